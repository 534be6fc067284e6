"""report.md: the results of a fit in words, with units, intervals and cautions."""

from __future__ import annotations

import math
import re

import numpy as np

from ...forward import get_parameterization
from ...forward.quantities import MINUS, format_signed, quantity, unit_text
from ..observations.crust import thickness_reading
from .checks import FLAG_LIMIT, posterior_checks
from ..fitting.log_posterior import UNITS

__all__ = ["CAUTION", "decimals", "estimate", "interval_words", "render"]

#: The caution paragraph every report ends with.
CAUTION = (
    "These numbers are scientific estimates, not measurements. They depend on the chosen "
    "melting parameterization, on the shape of the melting region, on the values held fixed, "
    "on the "
    "priors and on how the observations are linked to the melting column (for instance "
    "where the basalts last equilibrated). Another parameterization or other assumptions "
    "can move them by more than the quoted intervals. They are no basis on their own for "
    "hazard or resource decisions."
)

# A hyphen-minus that starts a number (not one inside a word, date or file name).
_NEGATIVE = re.compile(r"(?<![\w.])-(?=\d)")


def render(posterior, *, figure_format: str = "png") -> str:
    """Markdown text of the report for `posterior` (figures named in `figure_format`)."""
    study = posterior.study
    parts = [
        f"# {study.name}: posterior estimates of mantle temperature and lid thickness\n",
        _headline(posterior),
        _warnings_section(posterior),
        "## Estimates\n",
        "Median with the central 68 % and 95 % posterior intervals "
        "(2.5, 16, 84 and 97.5 % quantiles), and the maximum a posteriori (MAP) value.\n",
        _table(posterior.summary()),
        "\nDerived quantities of the melting column:\n",
        _table(posterior.derived_summary()),
        _model_section(posterior),
        _fit_section(posterior_checks(posterior)),
        _sampler_section(posterior),
        _convergence_section(posterior),
        "## Caution\n",
        CAUTION + "\n",
        _files_section(figure_format),
    ]
    return _NEGATIVE.sub(MINUS, "\n".join(parts))


def _headline(posterior) -> str:
    lines = []
    for _, row in posterior.summary().iterrows():
        lines.append(f"- {quantity(row['parameter']).title}: {interval_words(row)}")
    flag = "" if posterior.converged else (
        "\n**Warning: the sampler did NOT converge** (see Convergence); the numbers below "
        "may be unreliable.\n")
    intro = "In short (median, 68 % interval, 95 % interval):\n\n"
    return intro + "\n".join(lines) + "\n" + flag


def _warnings_section(posterior) -> str:
    """Every warning, one line each (the same lines as diagnostics.json and stderr)."""
    if not posterior.warnings:
        return ""
    lines = "\n".join(f"- {line}" for line in posterior.warnings)
    return f"## Warnings\n\nRead these before using the numbers:\n\n{lines}\n"


def interval_words(row) -> str:
    """A summary row in words: median, 68 % spread, both intervals, with the unit.

    ``**1392 ± 11 °C** (68 %: 1381 to 1403 °C; 95 %: 1370 to 1415 °C)`` where the 68 %
    interval is symmetric at the shown precision, else ``**1392 +12/−10 °C** (...)``.
    """
    unit = unit_text(row["unit"])
    unit = f" {unit}" if unit else ""
    d = decimals(row["sd"])
    return (f"**{estimate(row)}** "
            f"(68 %: {_range(row['q16'], row['q84'], d)}{unit}; "
            f"95 %: {_range(row['q2.5'], row['q97.5'], d)}{unit})")


def estimate(row) -> str:
    """Median and 68 % spread with the unit: ``1392 ± 11 °C`` or ``1392 +12/−10 °C``.

    "±" where the interval is symmetric at the shown precision (about a tenth of the
    posterior sd).
    """
    unit = unit_text(row["unit"])
    d = decimals(row["sd"])
    med = row["median"]
    plus, minus = _f(row["q84"] - med, d), _f(med - row["q16"], d)
    spread = f" ± {plus}" if plus == minus else f" +{plus}/{MINUS}{minus}"
    return f"{_f(med, d)}{spread}" + (f" {unit}" if unit else "")


def _range(low: float, high: float, d: int) -> str:
    return f"{_f(low, d)} to {_f(high, d)}"


def _table(frame) -> str:
    head = ("| quantity | unit | median | 68 % interval | 95 % interval | MAP | ESS "
            "| τ (steps) |\n|---|---|---|---|---|---|---|---|")
    rows = [head]
    for _, r in frame.iterrows():
        d = decimals(r["sd"])
        rows.append(
            f"| {quantity(r['parameter']).title} | {unit_text(r['unit']) or '–'} "
            f"| {_f(r['median'], d)} | {_range(r['q16'], r['q84'], d)} "
            f"| {_range(r['q2.5'], r['q97.5'], d)} | {_f(r['map'], d)} | {_f(r['ess'], 0)} "
            f"| {_f(r['tau'], 1)} |"
        )
    return "\n".join(rows) + "\n"


def _model_section(posterior) -> str:
    study = posterior.study
    model = study.model
    region = _REGION_WORDS.get(model.melting_region, model.melting_region)
    title = get_parameterization(model.parameterization).title
    lines = ["## Model, priors and data\n",
             f"- Melting parameterization: {title} (`{model.parameterization}`); melting "
             f"region: {region}; crust density "
             f"{model.crust_density:g} kg/m³, mantle density {model.mantle_density:g} kg/m³."]
    units = posterior.logpost.units  # free model errors have their block's unit
    for name, prior in zip(posterior.names, posterior.logpost.priors, strict=True):
        lines.append(f"- Prior on the {quantity(name).name}: "
                     f"{prior.describe(unit=unit_text(units[name]))}.")
    for name, value in study.fixed.items():
        lines.append(f"- Held fixed: {quantity(name).name} = "
                     f"{_g(value)} {unit_text(UNITS[name])}".rstrip() + ".")
    for block in study.observations:
        lines.append(f"- Data: {block.describe()}.")
        if block.kind == "crustal_thickness":
            lines.append("- " + thickness_reading(block.thickness_of, model.crust_density,
                                                  model.mantle_density))
    return "\n".join(lines) + "\n"


_REGION_WORDS = {"column": "a 1-D melting column",
                 "triangle": "the passive-flow triangle beneath a spreading axis"}


def _fit_section(checks) -> str:
    """Goodness of fit of every observation block: p-value and flagged residuals."""
    lines = [
        "## How well the model fits the data\n",
        "For each observation block, data sets were replicated from the likelihood at "
        f"{checks[0].ndraws if checks else 0} posterior draws and compared with the "
        "observed data by the discrepancy −2 log L (the chi-square of the residuals for "
        "Gaussian rows; for equilibration along the melting path, the deviance of the "
        "mixture along the path). The posterior predictive p-value is the fraction of "
        "replicates at least as discrepant as the data: near 0 the data scatter more "
        "than their uncertainties allow or are offset from the model; near 1 the "
        "uncertainties look too large. A standardized residual is (observed − mean "
        "replicate) / sd of the replicates; rows beyond "
        f"{FLAG_LIMIT:g} are flagged.\n",
    ]
    for check in checks:
        largest = max((float(np.max(np.abs(r))) for r in check.residuals.values()),
                      default=0.0)
        verdict = ("no sign of misfit" if 0.05 <= check.p_value <= 0.95 else
                   "the data scatter more than the model and uncertainties allow"
                   if check.p_value < 0.05 else "the uncertainties may be too large")
        lines.append(f"- {check.name} ({len(check.ids)} rows): p = "
                     f"{_p(check.p_value, check.ndraws)}, {verdict}; largest |residual| "
                     f"{largest:.1f}.")
        for row, column, value in check.flagged():
            what = "temperature" if column == "temperature" else "value"
            residual = format_signed(value, 1, plus=True)
            lines.append(f"  - **{row}**: {what} residual {residual} (beyond {FLAG_LIMIT:g})")
    return "\n".join(lines) + "\n"


def _p(p: float, ndraws: int) -> str:
    if p == 0.0:
        return f"< {1 / ndraws:.2g}"
    return f"{p:.2f}" if p >= 0.01 else f"{p:.3f}"


def _sampler_section(posterior) -> str:
    """Every [sampler] value this run used, defaults marked, so a reader can repeat it."""
    from dataclasses import fields

    settings = posterior.study.sampler
    used = {f.name: getattr(settings, f.name) for f in fields(settings)}
    used["seed"] = posterior.seed  # --seed may override the study file
    items = []
    for f in fields(settings):
        value = used[f.name]
        text = f'"{value}"' if isinstance(value, str) else f"{value:g}"
        items.append(f"`{f.name}` = {text}" + (" (default)" if value == f.default else ""))
    return "## Sampler settings used\n\n" + "; ".join(items) + ".\n"


def _convergence_section(posterior) -> str:
    diag = posterior.diagnostics
    tau_max = _extreme(diag["tau_steps"], max)
    ess_min = _extreme(diag["ess"], min)
    rhat_max = _extreme(diag["split_rhat_approximate"], max)
    rhat_ref = _extreme(diag["split_rhat_if_converged"], max)
    acc = diag["acceptance_fraction"]["mean"]
    state = ("The sampler **converged**: " if diag["converged"] else
             "The sampler **did NOT converge** before its step cap: ")
    text = (
        f"{state}{diag['steps']} steps of {diag['walkers']} walkers; the first "
        f"{diag['burn_in_steps']} steps were discarded as burn-in. The longest integrated "
        f"autocorrelation time is {_f(tau_max, 1)} steps, so the kept chain is "
        f"{_f(diag['tau_multiple_reached'], 0)} autocorrelation times long, and the "
        f"smallest effective sample size is {_f(ess_min, 0)} "
        f"(stopping rule: {diag['stopping_rule']}). "
        f"Mean acceptance fraction {_f(acc, 2)}; largest split R-hat across walkers "
        f"{_f(rhat_max, 3)}, against about {_f(rhat_ref, 3)} expected from a converged "
        f"ensemble of this length (approximate, since walkers are not independent chains)."
    )
    if not diag["converged"]:
        text += (" Do not rely on these numbers yet; the warnings above say what fell "
                 f"short. {diag['advice']}")
    return "## Convergence\n\n" + text + "\n"


def _extreme(values: dict, pick) -> float | None:
    """`pick` (max or min) of the estimated values; None if none could be estimated."""
    finite = [v for v in values.values() if v is not None]
    return pick(finite) if finite else None


def _files_section(figure_format: str) -> str:
    figures = ", ".join(f"{stem}.{figure_format}" for stem in ("corner", "fit", "pt"))
    return (
        "## Files\n\n"
        "summary.csv and derived.csv (these tables), samples.csv (posterior draws after "
        "burn-in, thinned), chain.h5 (every step, emcee HDF5 layout), posterior.nc (the "
        "posterior, pointwise log-likelihood, observations and prior draws as an ArviZ "
        "InferenceData file, NetCDF-4: `arviz.from_netcdf`), diagnostics.json, "
        "run.json (versions, seed, study-file hash, command line, times), "
        f"{figures}, lidmelt-files.json (the files lidmelt wrote here).\n"
    )


def decimals(sd: float) -> int:
    """Decimals that show the value to about a tenth of its posterior sd."""
    if not np.isfinite(sd) or sd <= 0:
        return 3
    return int(min(6, max(0, 1 - math.floor(math.log10(sd)))))


def _f(value: float | None, places: int) -> str:
    """Fixed decimals, one minus sign; "–" for a value not estimated (None or NaN)."""
    if value is None or not np.isfinite(value):
        return "–"
    return format_signed(value, places)


def _g(value: float) -> str:
    return format_signed(value)
