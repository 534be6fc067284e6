"""report.md: the results of a fit in words, with units, intervals and cautions."""

from __future__ import annotations

import math

import numpy as np

from .model import UNITS

__all__ = ["CAUTION", "parameter_title", "render"]

#: The caution paragraph every report ends with.
CAUTION = (
    "These numbers are scientific estimates, not measurements. They depend on the chosen "
    "melting parameterization, on the melting melting_region, on the values held fixed, on the "
    "priors and on how the observations are linked to the melting column (for instance "
    "where the basalts last equilibrated). Another parameterization or other assumptions "
    "can move them by more than the quoted intervals. They are no basis on their own for "
    "hazard or resource decisions."
)

_NAMES = {
    "potential_temperature": "Mantle potential temperature",
    "lithosphere_thickness": "Lid (lithosphere) thickness",
    "water": "Source water content",
    "active_upwelling": "active upwelling",
    "solidus_offset": "Solidus offset",
    "onset_depth": "Depth where melting starts",
    "crustal_thickness": "Igneous crust thickness",
    "mean_melt_fraction": "Mean melt fraction of the pooled melt",
    "mean_melting_pressure": "Mean melting pressure",
}
_UNIT_TEXT = {"degC": "°C", "km": "km", "ppm": "ppm", "GPa": "GPa", "-": ""}


def parameter_title(posterior, name: str) -> str:
    """A free parameter or derived quantity in words (free model errors included)."""
    if name in _NAMES:
        return _NAMES[name]
    error = next(e for e in posterior.logpost.errors if e.name == name)
    return error.title(posterior.study.observations[error.block])


def render(posterior) -> str:
    """Markdown text of the report for `posterior`."""
    study = posterior.study
    parts = [
        f"# {study.name}: posterior estimates of mantle temperature and lid thickness\n",
        _headline(posterior),
        "## Estimates\n",
        "Median with the central 68 % and 95 % posterior intervals "
        "(2.5, 16, 84 and 97.5 % quantiles), and the maximum a posteriori (MAP) value.\n",
        _table(posterior, posterior.summary()),
        "\nDerived quantities of the melting column:\n",
        _table(posterior, posterior.derived_summary()),
        _model_section(posterior),
        _sampler_section(posterior),
        _convergence_section(posterior),
        "## Caution\n",
        CAUTION + "\n",
        _files_section(),
    ]
    return "\n".join(parts)


def _headline(posterior) -> str:
    lines = []
    for _, row in posterior.summary().iterrows():
        lines.append(f"- {parameter_title(posterior, row['parameter'])}: "
                     f"{_interval_words(row)}")
    flag = "" if posterior.converged else (
        "\n**Warning: the sampler did NOT converge** (see Convergence); the numbers below "
        "may be unreliable.\n")
    intro = "In short (median, 68 % interval, 95 % interval):\n\n"
    return intro + "\n".join(lines) + "\n" + flag


def _interval_words(row) -> str:
    """E.g. ``**1392 +12/−10 °C** (68 %: 1382 to 1404 °C; 95 %: 1371 to 1416 °C)``."""
    unit = _UNIT_TEXT[row["unit"]]
    unit = f" {unit}" if unit else ""
    d = _decimals(row["sd"])
    med = row["median"]
    plus, minus = row["q84"] - med, med - row["q16"]
    return (f"**{_f(med, d)} +{_f(plus, d)}/−{_f(minus, d)}{unit}** "
            f"(68 %: {_f(row['q16'], d)} to {_f(row['q84'], d)}{unit}; "
            f"95 %: {_f(row['q2.5'], d)} to {_f(row['q97.5'], d)}{unit})")


def _table(posterior, frame) -> str:
    head = ("| quantity | unit | median | 68 % interval | 95 % interval | MAP | ESS "
            "| τ (steps) |\n|---|---|---|---|---|---|---|---|")
    rows = [head]
    for _, r in frame.iterrows():
        d = _decimals(r["sd"])
        rows.append(
            f"| {parameter_title(posterior, r['parameter'])} | "
            f"{_UNIT_TEXT[r['unit']] or '–'} "
            f"| {_f(r['median'], d)} "
            f"| {_f(r['q16'], d)} – {_f(r['q84'], d)} | {_f(r['q2.5'], d)} – "
            f"{_f(r['q97.5'], d)} | {_f(r['map'], d)} | {r['ess']:.0f} | {r['tau']:.1f} |"
        )
    return "\n".join(rows) + "\n"


def _model_section(posterior) -> str:
    study = posterior.study
    model = study.model
    lines = ["## Model, priors and data\n",
             f"- Melting parameterization: {model.parameterization}; melting_region: "
             f"{model.melting_region}; "
             f"crust density {model.crust_density:g} kg/m³, mantle density "
             f"{model.mantle_density:g} kg/m³."]
    for name, prior in zip(posterior.names, posterior.logpost.priors, strict=True):
        unit = _UNIT_TEXT[posterior.logpost.units[name]]
        lines.append(f"- Prior on {_lower_first(parameter_title(posterior, name))}: "
                     f"{prior.describe(unit=unit)}.")
    for name, value in study.fixed.items():
        lines.append(f"- Held fixed: {_NAMES[name].lower()} = {value:g} "
                     f"{_UNIT_TEXT[UNITS[name]]}".rstrip() + ".")
    for block in study.observations:
        lines.append(f"- Data: {block.describe()}")
    return "\n".join(lines) + "\n"


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
    tau_max = max(diag["tau_steps"].values())
    ess_min = min(diag["ess"].values())
    rhat_max = max(diag["split_rhat_approximate"].values())
    rhat_ref = max(diag["split_rhat_if_converged"].values())
    acc = diag["acceptance_fraction"]["mean"]
    state = ("The sampler **converged**: " if diag["converged"] else
             "The sampler **did NOT converge** before its step cap: ")
    text = (
        f"{state}{diag['steps']} steps of {diag['walkers']} walkers; the first "
        f"{diag['burn_in_steps']} steps were discarded as burn-in. The longest integrated "
        f"autocorrelation time is {tau_max:.1f} steps, so the kept chain is "
        f"{diag['tau_multiple_reached']:.0f} autocorrelation times long, and the smallest "
        f"effective sample size is {ess_min:.0f} (stopping rule: {diag['stopping_rule']}). "
        f"Mean acceptance fraction {acc:.2f}; largest split R-hat across walkers "
        f"{rhat_max:.3f}, against about {rhat_ref:.3f} expected from a converged ensemble "
        f"of this length (approximate, since walkers are not independent chains)."
    )
    if not diag["converged"]:
        text += (" Run longer (raise `max_steps` under `[sampler]`) before relying on "
                 "these numbers.")
    return "## Convergence\n\n" + text + "\n"


def _files_section() -> str:
    return (
        "## Files\n\n"
        "summary.csv and derived.csv (these tables), samples.csv (posterior draws after "
        "burn-in, thinned), chain.h5 (every step, emcee HDF5 layout), diagnostics.json, "
        "run.json (versions, seed, study-file hash, command line), corner.png, fit.png, "
        "pt.png.\n"
    )


def _lower_first(text: str) -> str:
    return text[:1].lower() + text[1:]


def _decimals(sd: float) -> int:
    """Decimals that show the value to about a tenth of its posterior sd."""
    if not np.isfinite(sd) or sd <= 0:
        return 3
    return int(min(6, max(0, 1 - math.floor(math.log10(sd)))))


def _f(value: float, decimals: int) -> str:
    return f"{value:.{decimals}f}"
