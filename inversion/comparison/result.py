"""The result of a scenario comparison: per-scenario numbers, the table and the warnings."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property
from os import PathLike
from pathlib import Path

import numpy as np
import pandas as pd

from .checks import FitCheck
from .evidence import DISAGREEMENT_SIGMAS, EvidenceEstimate
from .loo import PARETO_K_WARN, LooEstimate, elpd_differences
from .ranking import scenario_probabilities

__all__ = ["EVIDENCE_COLUMNS", "RANK_SIGMAS", "Comparison", "ScenarioResult"]

#: Columns of evidence.csv (and of `Comparison.table`), in order.
EVIDENCE_COLUMNS = ("scenario", "n_free", "log_evidence", "log_evidence_sd",
                    "log_evidence_quadrature", "log_bayes_factor", "prior_odds",
                    "probability", "elpd_loo", "elpd_loo_se", "p_loo", "pareto_k_max")
#: Two scenarios cannot be ranked by their evidence when ln B is within this many of its
#: standard errors (about 95 % of the error distribution).
RANK_SIGMAS = 2.0


@dataclass(frozen=True)
class ScenarioResult:
    """Everything computed for one scenario.

    Attributes
    ----------
    scenario : inversion.study.scenarios.Scenario
    evidence : EvidenceEstimate
    loo : LooEstimate
    fit : FitCheck
        Posterior predictive check (does the scenario fit the data at all?).
    posterior : inversion.Posterior or None
        The emcee posterior (None without free parameters).
    posterior_warnings : tuple of str
        `Posterior.warnings` of that posterior: not converged, piled against a prior
        bound or the model's range, melting from the model's base, no melt.
    seconds : dict
        Wall time of each part: ``nested``, ``quadrature``, ``posterior``, ``loo``,
        ``checks``.
    """

    scenario: object
    evidence: EvidenceEstimate
    loo: LooEstimate
    fit: FitCheck
    posterior: object | None = None
    posterior_warnings: tuple = ()
    seconds: dict = field(default_factory=dict)

    @property
    def name(self) -> str:
        return self.scenario.name

    @property
    def converged(self) -> bool:
        return True if self.posterior is None else bool(self.posterior.converged)

    def to_dict(self) -> dict:
        """The numbers of scenario.json (everything but the posterior)."""
        return {"scenario": self.name, "description": self.scenario.description,
                "prior_odds": self.scenario.prior_odds, "n_free": self.scenario.n_free,
                "evidence": self.evidence.to_dict(), "loo": self.loo.to_dict(),
                "fit_check": {"p_value": self.fit.p_value,
                              "replicates": self.fit.replicates,
                              "worst_block": self.fit.worst_block},
                "posterior_warnings": list(self.posterior_warnings),
                "converged": self.converged, "seconds": self.seconds}

    @classmethod
    def from_dict(cls, data: dict, scenario, posterior) -> ScenarioResult:
        """Rebuild from scenario.json and the reloaded posterior (a resumed run)."""
        check = data["fit_check"]
        return cls(scenario, EvidenceEstimate(**data["evidence"]),
                   LooEstimate.from_dict(data["loo"]),
                   FitCheck(float(check["p_value"]), int(check["replicates"]),
                            str(check.get("worst_block", ""))), posterior,
                   tuple(data["posterior_warnings"]), dict(data["seconds"]))


class Comparison:
    """Evidence and leave-one-out comparison of the scenarios of a study.

    Parameters
    ----------
    scenarios : inversion.study.scenarios.ScenarioSet
    results : sequence of ScenarioResult
        One per scenario, in the order of `scenarios`.
    seed : int
        Master seed of the run.

    Examples
    --------
    ::

        result = lidmelt.compare("scenarios.toml", seed=1)
        result.table()              # one row per scenario, the columns of evidence.csv
        result.save("comparison")   # evidence.csv, compare.png, report.md, one folder each
    """

    def __init__(self, scenarios, results, *, seed: int) -> None:
        self.scenarios = scenarios
        self.results = tuple(results)
        self.seed = int(seed)
        if tuple(r.name for r in self.results) != scenarios.names:
            raise ValueError("results must follow the order of the scenarios")

    @cached_property
    def probabilities(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Posterior probability of each scenario and its 16-84 % range (`ranking`)."""
        return scenario_probabilities(
            [r.evidence.log_evidence for r in self.results],
            [r.evidence.sd for r in self.results],
            [r.scenario.prior_odds for r in self.results], seed=self.seed)

    def table(self) -> pd.DataFrame:
        """One row per scenario (study order), columns `EVIDENCE_COLUMNS`.

        ``log_bayes_factor`` is ln Z minus the largest ln Z (0 for the best, natural
        log); ``probability`` the posterior probability among the compared scenarios;
        ``log_evidence_quadrature`` is NaN where not computed.
        """
        best = max(r.evidence.log_evidence for r in self.results)
        probability = self.probabilities[0]
        rows = []
        for result, p in zip(self.results, probability, strict=True):
            ev, loo = result.evidence, result.loo
            rows.append({
                "scenario": result.name, "n_free": result.scenario.n_free,
                "log_evidence": ev.log_evidence, "log_evidence_sd": ev.sd,
                "log_evidence_quadrature": math.nan if ev.quadrature is None
                else ev.quadrature,
                "log_bayes_factor": ev.log_evidence - best,
                "prior_odds": result.scenario.prior_odds, "probability": float(p),
                "elpd_loo": loo.elpd_loo, "elpd_loo_se": loo.se, "p_loo": loo.p_loo,
                "pareto_k_max": loo.pareto_k_max,
            })
        return pd.DataFrame(rows, columns=list(EVIDENCE_COLUMNS))

    def loo_table(self) -> pd.DataFrame:
        """elpd_loo differences against the best-predicting scenario, with their errors."""
        return elpd_differences({r.name: r.loo for r in self.results})

    def ranking(self) -> list[str]:
        """Scenario names by posterior probability, most probable first."""
        order = np.argsort(-self.probabilities[0], kind="stable")
        return [self.results[i].name for i in order]

    def warnings(self) -> list[str]:
        """Every caveat the report raises, one sentence each."""
        out = []
        for r in self.results:
            out.extend(_scenario_warnings(r))
        out.extend(self._ranking_warnings())
        return out

    def _ranking_warnings(self) -> list[str]:
        by_name = {r.name: r for r in self.results}
        order = self.ranking()
        out = []
        for first, second in zip(order, order[1:], strict=False):
            a, b = by_name[first].evidence, by_name[second].evidence
            log_b = a.log_evidence - b.log_evidence
            error = math.hypot(a.sd, b.sd)
            if error > 0 and abs(log_b) < RANK_SIGMAS * error:
                out.append(
                    f"The evidence cannot rank '{first}' above '{second}': ln B = "
                    f"{log_b:.2f} ± {error:.2f} is within {RANK_SIGMAS:g} of its "
                    "errors; raise live_points or effective_samples under [comparison] "
                    "to shrink the error.")
        return out

    def save(self, directory: str | PathLike[str], *, force: bool = False,
             figure_format: str = "png") -> Path:
        """Write evidence.csv, compare.png, report.md, comparison.json and one folder per
        scenario (what ``lidmelt fit`` writes, plus scenario.json) to `directory`,
        atomically.

        Parameters
        ----------
        directory : str or path-like
            Must not exist, unless `force` and it is a comparison folder lidmelt wrote.
        force : bool
            Replace such a folder.
        figure_format : {"png", "pdf", "svg"}
            File format of the figures (compare.png and each scenario's).

        Returns
        -------
        pathlib.Path
        """
        from ..outputs.formats import checked_figure_format
        from .outputs import save_comparison

        return save_comparison(self, Path(directory), force=force,
                               figure_format=checked_figure_format(figure_format))

    def __repr__(self) -> str:
        best = self.ranking()[0]
        return (f"Comparison({self.scenarios.base.name!r}: {len(self.results)} scenarios, "
                f"most probable {best!r})")


def _scenario_warnings(r: ScenarioResult) -> list[str]:
    out = []
    ev = r.evidence
    if ev.disagrees:
        out.append(
            f"'{r.name}': nested sampling (ln Z = {ev.log_evidence:.3f} ± {ev.sd:.3f}) and "
            f"quadrature ({ev.quadrature:.3f} ± {ev.quadrature_error:.3f}) disagree by more "
            f"than {DISAGREEMENT_SIGMAS:g} combined errors; raise live_points and "
            "grid_points under [comparison] before trusting this evidence.")
    bad = r.loo.unreliable_rows
    if bad.size:
        from ..fitting.log_posterior import LogPosterior

        labels = LogPosterior(r.scenario.study).rows
        rows = [f"{labels[i][0]} {labels[i][1]}" for i in bad]
        out.append(
            f"'{r.name}': PSIS-LOO is unreliable for {bad.size} observation "
            f"{'rows' if bad.size != 1 else 'row'} "
            f"({', '.join(rows)}; Pareto k up to {r.loo.pareto_k_max:.2f} > "
            f"{PARETO_K_WARN:g}): these rows pull the posterior strongly.")
    out.extend(f"'{r.name}': {line}." for line in r.posterior_warnings)
    if not r.fit.fits:
        where = f"{r.fit.worst_block}: " if r.fit.worst_block else "no posterior draw melts; "
        out.append(
            f"'{r.name}' does not fit the data ({where}posterior predictive p = "
            f"{r.fit.p_value:.3f} over {r.fit.replicates} draws: data simulated from the "
            "scenario are almost always closer to the model than the observations).")
    return out
