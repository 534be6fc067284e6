"""The posterior of a fitted study: `Posterior` (samples, summaries, diagnostics, saving).

`inversion.fitting.run.fit` builds it from a finished chain; `Posterior.save` writes every
output atomically by the one folder rule of `inversion.outputs.folder`.
"""

from __future__ import annotations

from functools import cached_property
from os import PathLike
from pathlib import Path

import numpy as np
import pandas as pd

from ..fitting import start as _start
from ..fitting.log_posterior import DERIVED, UNITS, LogPosterior
from ..fitting.sampler import ChainResult, autocorrelation_time
from ..study.seeds import generator

__all__ = ["SUMMARY_COLUMNS", "Posterior"]

#: Columns of summary.csv and derived.csv, in order.
SUMMARY_COLUMNS = ("parameter", "unit", "median", "mean", "sd", "q2.5", "q16", "q84",
                   "q97.5", "map", "ess", "tau")

_QUANTILES = (0.025, 0.16, 0.84, 0.975)


class Posterior:
    """Posterior samples of a study's free parameters and derived quantities.

    Parameters
    ----------
    study : inversion.Study
        The fitted study.
    result : ChainResult
        The sampler output.
    seed : int
        Master seed of the run.
    run_info : dict, optional
        Extra provenance stored in run.json.

    Attributes
    ----------
    names : tuple of str
        Free parameters (column order of `chain`).
    chain : ndarray, shape (nsteps, nwalkers, ndim)
        Every walker position (emcee axis order), burn-in included.
    log_prob : ndarray, shape (nsteps, nwalkers)
        Log-posterior of every position.
    derived_chain : ndarray, shape (nsteps, nwalkers, len(DERIVED))
        Derived quantities of every position.
    discard : int
        Burn-in steps left out of samples and summaries.
    thin : int
        Thinning of `samples` (about half the shortest autocorrelation time).
    converged : bool
        Whether the stopping rule was met before the step cap.
    """

    def __init__(self, study, result: ChainResult, *, seed: int,
                 run_info: dict | None = None) -> None:
        self.study = study
        self.result = result
        self.seed = int(seed)
        self.run_info = dict(run_info or {})
        self.logpost = LogPosterior(study)
        self.names = self.logpost.names
        self.chain = result.chain
        self.log_prob = result.log_prob
        self.derived_chain = result.blobs
        assessment = result.assessment
        self.discard = int(assessment["discard"])
        self.tau = np.asarray(assessment["tau"], dtype=float)
        self.ess = np.asarray(assessment["ess"], dtype=float)
        self.converged = bool(assessment["converged"])
        finite = self.tau[np.isfinite(self.tau)]
        self.thin = max(1, int(np.min(finite) // 2)) if finite.size else 1

    @cached_property
    def map(self) -> dict:
        """Maximum a posteriori point: free parameters, derived values, log-posterior.

        Found by Nelder-Mead started from the highest-posterior sample of the chain.
        """
        step, walker = np.unravel_index(np.argmax(self.log_prob), self.log_prob.shape)
        start = self.chain[step, walker][None, :]
        flat = self._kept(self.chain).reshape(-1, len(self.names))
        scale = np.maximum(np.std(flat, axis=0), 1e-9)
        theta, value = _start.find_map(self.logpost, start, scale)
        derived = self.logpost(theta[None, :])[0, 1:]
        out = {name: float(v) for name, v in zip(self.names, theta, strict=True)}
        out.update({name: float(v) for name, v in zip(DERIVED, derived, strict=True)})
        out["log_posterior"] = value
        return out

    @cached_property
    def samples(self) -> pd.DataFrame:
        """Flat posterior sample after burn-in, thinned by `thin`.

        Columns: ``step``, ``walker``, the free parameters, the derived quantities,
        ``log_posterior``; one row per kept walker position.
        """
        nsteps, nwalkers, _ = self.chain.shape
        steps = np.arange(self.discard, nsteps, self.thin)
        frame = {
            "step": np.repeat(steps, nwalkers),
            "walker": np.tile(np.arange(nwalkers), steps.size),
        }
        for j, name in enumerate(self.names):
            frame[name] = self.chain[steps, :, j].ravel()
        for j, name in enumerate(DERIVED):
            frame[name] = self.derived_chain[steps, :, j].ravel()
        frame["log_posterior"] = self.log_prob[steps].ravel()
        return pd.DataFrame(frame)

    def summary(self) -> pd.DataFrame:
        """One row per free parameter with the columns of `SUMMARY_COLUMNS`.

        Free model errors follow the physical parameters, named as in
        `inversion.study.ErrorParameter` (e.g. ``basalts.model_error``).

        Statistics use every kept step (after burn-in, not thinned); ``ess`` and ``tau``
        are emcee's autocorrelation estimates (tau in steps).
        """
        return _summary_table(self.names, self._kept(self.chain), self.map, self.ess,
                              self.tau, self.logpost.units)

    def derived_summary(self) -> pd.DataFrame:
        """Like `summary` for the derived quantities of `DERIVED`."""
        kept = self._kept(self.derived_chain)
        # Same burn-in as the parameters; tau of each derived quantity on the kept chain.
        tau = np.maximum(autocorrelation_time(kept), 1.0)
        ess = kept.shape[0] * kept.shape[1] / tau
        return _summary_table(DERIVED, kept, self.map, ess, tau, UNITS)

    @cached_property
    def diagnostics(self) -> dict:
        """Convergence diagnostics (the content of diagnostics.json)."""
        from ..fitting.convergence import diagnostics_dict

        return diagnostics_dict(self)

    @cached_property
    def posterior_warnings(self) -> list[str]:
        """What needs care about the posterior itself, one line each (see `warnings`)."""
        from ..fitting.convergence import posterior_warnings

        return posterior_warnings(self)

    @property
    def warnings(self) -> list[str]:
        """Everything a user must know before using the numbers, one line each.

        Why the run did not converge (each unmet part of the stopping rule), then
        `posterior_warnings`: a posterior piled against a prior bound or the edge of the
        model's range, samples whose melting starts at the model's base, no melt.
        """
        steps = self.chain.shape[0]
        return [f"NOT converged within the step cap ({steps} steps): {line}"
                for line in self.result.assessment["shortfalls"]] + self.posterior_warnings

    def save(self, directory: str | PathLike[str], *, force: bool = False,
             figure_format: str = "png", after_publish=None) -> Path:
        """Write every output file to `directory` atomically.

        Files: summary.csv, derived.csv, samples.csv, chain.h5, diagnostics.json,
        run.json, posterior.nc (ArviZ InferenceData, `inversion.results.netcdf`),
        corner.png, fit.png, pt.png (or .pdf/.svg), report.md and the manifest
        lidmelt-files.json. They are written to a temporary folder beside `directory`,
        which is then renamed into place.

        Parameters
        ----------
        directory : str or path-like
            Result folder; must not exist unless `force`.
        force : bool
            Replace an existing folder, if lidmelt wrote it and it holds nothing else
            (see `inversion.outputs.folder.check_replaceable`).
        figure_format : {"png", "pdf", "svg"}
            File format of the figures (PDF fonts embedded; docs/figures.md).
        after_publish : callable, optional
            Called without arguments right after the folder is in place; Ctrl-C and
            SIGTERM are held across both steps and one caught there is raised as
            `inversion.errors.InterruptedWhenComplete` (`fit` removes its checkpoint
            here, so a complete folder never stands beside one).

        Returns
        -------
        pathlib.Path
            The result folder.
        """
        from ..outputs.formats import checked_figure_format
        from .writers import save_posterior

        return save_posterior(self, Path(directory), force=force,
                              figure_format=checked_figure_format(figure_format),
                              after_publish=after_publish)

    def predictive_draws(self, n: int = 200) -> np.ndarray:
        """A reproducible subset of `n` kept positions, shape (n, ndim), for plots."""
        flat = self._kept(self.chain).reshape(-1, len(self.names))
        rng = generator(self.seed, "predictive_draws")
        index = rng.choice(flat.shape[0], size=min(n, flat.shape[0]), replace=False)
        return flat[np.sort(index)]

    def _kept(self, array: np.ndarray) -> np.ndarray:
        return array[self.discard:]

    def __repr__(self) -> str:
        state = "converged" if self.converged else "NOT converged"
        return (f"Posterior({self.study.name!r}, {', '.join(self.names)}; "
                f"{self.chain.shape[0]} steps x {self.chain.shape[1]} walkers, {state})")


def _summary_table(names, kept: np.ndarray, map_point: dict, ess, tau,
                   units) -> pd.DataFrame:
    flat = kept.reshape(-1, kept.shape[-1])
    rows = []
    for j, name in enumerate(names):
        x = flat[:, j]
        q = np.quantile(x, _QUANTILES)
        rows.append({
            "parameter": name, "unit": units[name], "median": float(np.median(x)),
            "mean": float(np.mean(x)), "sd": float(np.std(x, ddof=1)),
            "q2.5": q[0], "q16": q[1], "q84": q[2], "q97.5": q[3],
            "map": map_point[name], "ess": float(ess[j]), "tau": float(tau[j]),
        })
    return pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))
