"""report.md of a survey: the area-wide answer, every site, the failed sites, a caution."""

from __future__ import annotations

import numpy as np

from ...forward import get_parameterization
from ...forward.quantities import format_signed, quantity, unit_text
from ..observations.crust import thickness_reading
from ..results.report import decimals
from ..study.priors import Prior
from .job import MISFIT_SIGMA, TP

__all__ = ["render", "write_report"]

_LIST_LIMIT = 200  # sites listed one by one; a larger survey points to the CSV instead
_CAUTION = (
    "These are scientific estimates. They depend on the chosen melting parameterization, "
    "the priors, the comparison choices (what the thickness is compared with, where the "
    "melts equilibrated) and the other modelling assumptions described in the model "
    "documentation (docs/model.md); joint mode further assumes that the sites are "
    "independent given the area-wide parameters. They are no basis on their own for "
    "hazard or resource decisions.")


def write_report(result, plan, folder, *, executor_name: str,
                 figure_format: str = "png") -> None:
    """Write profile.png (or .pdf/.svg) and report.md into the survey folder."""
    import matplotlib.pyplot as plt

    from .figure import profile_figure

    figure = profile_figure(result, plan)
    try:
        folder.write_figure(f"profile.{figure_format}", figure, figure_format)
    finally:
        plt.close(figure)
    folder.write_text("report.md", render(result, plan, executor_name=executor_name,
                                          figure_format=figure_format))


def _interval(row) -> str:
    """Median and intervals at the fit report's precision (a tenth of the 68 % spread)."""
    if row["median"] is None or not np.isfinite(float(row["median"])):
        return "—"
    d = decimals((float(row["q84"]) - float(row["q16"])) / 2.0)
    f = lambda v: format_signed(float(v), d)  # noqa: E731
    return (f"{f(row['median'])} (68 %: {f(row['q16'])} to {f(row['q84'])}; "
            f"95 %: {f(row['q2.5'])} to {f(row['q97.5'])})")


def _area_section(result, plan) -> list[str]:
    ok = result.summary[(result.summary["parameter"] == TP)
                        & (result.summary["status"] == "ok")]
    n, used = len(result.records), len(result.usable)
    head = f"{used} of {n} sites gave a result."
    if plan.mode == "joint" and result.area is None:
        return [f"{head} No site could be used, so there is no area-wide answer."]
    if result.area is None:
        if ok.empty:
            return [f"{head} No site gave a result."]
        return [
            f"{head} Each site was fitted on its own (independent mode); there is no "
            "area-wide posterior. Across the sites with a result, the site medians of the "
            f"potential temperature range from {ok['median'].min():.0f} to "
            f"{ok['median'].max():.0f} °C (median of the medians {ok['median'].median():.0f}"
            " °C). Run with `--mode joint` for one area-wide answer that uses every site "
            "at once."]
    lines = [f"{head} The area-wide answer uses those {used} sites only (a failed site "
             "is left out and the others combined again without it).", ""]
    for _, row in result.area.iterrows():
        lines.append(f"- **{row['parameter']}** ({row['meaning']}): {_interval(row)} "
                     f"{row['unit']}, from {row['sites']} sites")
    return lines


def _tension_section(result, plan) -> list[str]:
    from .joint import TENSION_P

    checked = [r for r in result.usable if "tension_p" in r]
    if plan.mode != "joint" or not checked:
        return []
    reference = ("the predictive distribution of a site's temperature under the area "
                 "posterior" if plan.settings.hierarchical else
                 "the area posterior from the other sites")
    lines = ["## Consistency between sites", "",
             "Each used site's potential temperature (its own Tp likelihood, flat over "
             f"the prior's range) is compared with {reference}: p = 2 min(P(site < rest), "
             f"P(site > rest)). A site is flagged as in tension when p < {TENSION_P:g} "
             "(about 3 sigma).", ""]
    flagged = [r for r in checked if r["in_tension"]]
    if not flagged:
        lines.append(f"No site is in tension ({len(checked)} checked; smallest p = "
                     f"{min(r['tension_p'] for r in checked):.2g}).")
    else:
        lines.append(f"{len(flagged)} of {len(checked)} sites are in tension with the "
                     "rest of the area (the area-wide answer may not describe them):")
        lines.append("")
        lines += [f"- **{r['site']}** (line {r['line']}): p = {r['tension_p']:.2g}"
                  for r in flagged]
    return [*lines, ""]


def _site_table(result) -> list[str]:
    if len(result.records) > _LIST_LIMIT:
        return [f"{len(result.records)} sites: see sites_summary.csv."]
    lines = ["| site | position (km) | Tp (°C) | lid (km) | method | status |",
             "|---|---|---|---|---|---|"]
    summary = result.summary
    for record in result.records:
        rows = summary[summary["site"] == record["site"]].set_index("parameter")
        tp = _interval(rows.loc[TP]) if TP in rows.index else "—"
        lid = (_interval(rows.loc["lithosphere_thickness"])
               if "lithosphere_thickness" in rows.index else "—")
        position = "" if record["position_km"] is None else f"{record['position_km']:g}"
        status = "ok" if record["status"] == "ok" else record["status"].split(":")[0]
        lines.append(f"| {record['site']} | {position} | {tp} | {lid} | "
                     f"{record['method'] or '—'} | {status} |")
    return lines


def _failed(result) -> list[str]:
    failed = result.failed
    if not failed:
        return ["Every site gave a result."]
    lines = [f"{len(failed)} of {len(result.records)} sites have no usable result "
             "(excluded from the area-wide answer in joint mode):", ""]
    lines += [f"- **{r['site']}** (line {r['line']}): {r['status']}" for r in failed]
    return lines


def _setting(value, unit: str) -> str:
    """A fixed value with its unit, or a prior's description."""
    if isinstance(value, Prior):
        return f"free, {value.describe(unit=unit_text(unit))}"
    return f"{format_signed(float(value))} {unit_text(unit)}".strip()


def _methods_section(plan) -> list[str]:
    """What every site was fitted with: model, priors, fixed values, comparison choices."""
    model, settings, study = plan.study.model, plan.settings, plan.study
    lines = [f"- Melting model: {get_parameterization(model.parameterization).title}, "
             f"melting region '{model.melting_region}', crust density "
             f"{model.crust_density:g} kg/m³, mantle density {model.mantle_density:g} kg/m³."]
    for name, prior in study.priors.items():
        lines.append(f"- {quantity(name).title} ({name}): prior "
                     f"{prior.describe(unit=quantity(name).unit_text)}.")
    for name, value in study.fixed.items():
        lines.append(f"- {quantity(name).title} ({name}): fixed at "
                     f"{_setting(value, quantity(name).unit)}.")
    lines.append(f"- Model errors: crust {_setting(settings.crust_model_error, 'km')}; "
                 f"pressure {_setting(settings.pressure_model_error, 'GPa')}; "
                 f"temperature {_setting(settings.temperature_model_error, 'degC')}.")
    where = settings.equilibration or "no melting pressures in the sites file"
    lines.append(f"- Melting pressures equilibrated: {where}"
                 + (f" ({settings.path_points} path points)." if where == "path" else "."))
    return lines


def _fit_section(result) -> list[str]:
    """Goodness of fit: each site's thickness against what its own posterior predicts."""
    z = [(r["site"], r["thickness_z"]) for r in result.records
         if r.get("thickness_z") is not None and np.isfinite(r["thickness_z"])]
    if not z:
        return ["No site has a posterior predictive check of its thickness."]
    far = [(site, v) for site, v in z if abs(v) > 2.0]
    worst = max(z, key=lambda item: abs(item[1]))
    lines = [f"Each site's measured thickness is compared with what its own posterior "
             f"predicts, in predictive standard deviations (z). {len(z) - len(far)} of "
             f"{len(z)} sites lie within 2 (about {0.95 * len(z):.0f} would by chance); the "
             f"largest |z| is {abs(worst[1]):.1f} ({worst[0]}). A site beyond "
             f"{MISFIT_SIGMA:g} fails as one the model cannot fit."]
    if far:
        lines += ["", *[f"- **{site}**: z = {format_signed(v, 1)}" for site, v in far]]
    return lines


def render(result, plan, *, executor_name: str, figure_format: str = "png") -> str:
    """The text of report.md."""
    methods = sorted({r["method"] for r in result.records if r["method"]})
    mode = plan.mode + (" (hierarchical)" if plan.mode == "joint"
                        and plan.settings.hierarchical else "")
    free = ", ".join(plan.study.free_parameters)
    text = [
        f"# Survey: {plan.study.name}", "",
        f"{len(result.records)} sites from `{plan.table.path.name}`, mode **{mode}**, "
        f"master seed {plan.seed}, run on {executor_name}. Free parameters per site: "
        f"{free}. Methods used: {', '.join(methods) or 'none'} (grid = quadrature "
        "on a grid in parameter units for at most 3 free parameters, "
        "mcmc = emcee); each site's method is in sites_summary.csv.", "",
        thickness_reading(plan.settings.thickness_of, plan.study.model.crust_density,
                          plan.study.model.mantle_density), "",
        "## Model, priors and comparison choices", "", *_methods_section(plan), "",
        "## Area-wide answer", "", *_area_section(result, plan), "",
        *_tension_section(result, plan),
        "## Sites", "", *_site_table(result), "",
        "## Goodness of fit", "", *_fit_section(result), "",
        "## Failed sites", "", *_failed(result), "",
        "## Files", "",
        "sites_summary.csv (one row per site and parameter), "
        + ("area.csv (the area-wide posterior), " if result.area is not None else "")
        + "survey.nc (every site's posterior draws"
        + (" and the area-wide posterior on its grid" if result.area is not None else "")
        + "; NetCDF-4, opens with ArviZ and xarray), "
        + f"profile.{figure_format} (sites against position), sites/ (one folder per "
        "site).", "",
        "## Caution", "", _CAUTION, "",
    ]
    return "\n".join(text)
