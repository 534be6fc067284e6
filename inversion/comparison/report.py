"""report.md of a comparison: the ranking in words, both readings, warnings, caution."""

from __future__ import annotations

import math

from ...forward.quantities import MINUS, format_percent, format_signed, quantity
from ..observations.crust import thickness_reading
from ..results.report import CAUTION, interval_words
from .evidence import DISAGREEMENT_SIGMAS
from .loo import PARETO_K_WARN
from .nested import NETWORKS
from .ranking import evidence_words

__all__ = ["COMPARISON_CAUTION", "LOO_SIGMAS", "loo_caveats", "render"]

#: A LOO difference within this many standard errors does not separate two scenarios.
LOO_SIGMAS = 2.0

#: Added to the usual caution: what a scenario probability means.
COMPARISON_CAUTION = (
    "The scenario probabilities are relative to the scenarios compared here and to their "
    "prior odds: a scenario left out can be better than all of them, and the evidence "
    "rewards or punishes each prior's width as much as the fit. They are not the "
    "probability that a scenario is true."
)


def render(comparison, *, figure_format: str = "png") -> str:
    """Markdown text of the comparison report (its figure named in `figure_format`)."""
    parts = [
        f"# {comparison.scenarios.base.name}: which scenario do the data favour?\n",
        _headline(comparison),
        _scenario_section(comparison),
        _evidence_section(comparison),
        _loo_section(comparison),
        _agreement_section(comparison),
        _warning_section(comparison),
        _estimates_section(comparison),
        "## Caution\n",
        f"{CAUTION} {COMPARISON_CAUTION}\n",
        _files_section(comparison, figure_format),
    ]
    return "\n".join(parts)


def _by_name(comparison) -> dict:
    return {r.name: r for r in comparison.results}


def _probability_words(comparison, name: str) -> str:
    p, lo, hi = comparison.probabilities
    k = [r.name for r in comparison.results].index(name)
    if _pct(lo[k]) == _pct(hi[k]):
        return _pct(p[k])
    return f"{_pct(p[k])} (68 % range {_pct(lo[k])} to {_pct(hi[k])})"


def _headline(comparison) -> str:
    order = comparison.ranking()
    best = _by_name(comparison)[order[0]]
    lines = [f"- Most probable scenario: **{best.name}** — {best.scenario.description}; "
             f"posterior probability {_probability_words(comparison, best.name)}."]
    for name in order[1:]:
        lines.append(f"- Against **{name}**: {_bayes_words(comparison, best.name, name)}.")
    for r in comparison.results:
        if r.evidence.disagrees:
            lines.append(f"- The evidence of **{r.name}** is uncertain: nested sampling and "
                         "quadrature disagree (see Warnings).")
    loo = comparison.loo_table()
    caveats = loo_caveats(comparison)
    text = (f"- Best predictive accuracy (PSIS-LOO): **{loo.index[0]}**; "
            + _agreement_words(comparison))
    if caveats:
        stuck = any(not r.converged for r in comparison.results)
        text += ("; **this LOO reading is not reliable**: " + "; ".join(caveats)
                 + ". Rank by the evidence; do not rely on the LOO numbers of those "
                 "scenarios" + (" nor on the estimates of one that did not converge"
                                if stuck else ""))
    lines.append(text + ".")
    return "In short:\n\n" + "\n".join(lines) + "\n"


def loo_caveats(comparison) -> list[str]:
    """Why the LOO ranking (and the estimates) of a scenario cannot be trusted, if so.

    A posterior that did not converge (its draws are not the posterior), and PSIS-LOO
    with rows of Pareto k above `PARETO_K_WARN` (Vehtari et al. 2017: the importance
    weights of those rows have too heavy a tail). p_loo is quoted beside k: well above
    the number of free parameters it is a further sign of trouble (Vehtari et al. 2017,
    sec. 2.3).
    """
    out = []
    for r in comparison.results:
        if not r.converged:
            out.append(f"the posterior of {r.name} did NOT converge")
        bad = r.loo.unreliable_rows
        if bad.size:
            out.append(
                f"PSIS-LOO of {r.name} is unreliable (Pareto k up to "
                f"{r.loo.pareto_k_max:.2f} on {bad.size} of {r.loo.pointwise.size} rows; "
                f"p_loo {r.loo.p_loo:.1f} for {r.scenario.n_free} free parameter"
                f"{'s' if r.scenario.n_free != 1 else ''})")
    return out


def _bayes_words(comparison, first: str, second: str) -> str:
    by = _by_name(comparison)
    a, b = by[first].evidence, by[second].evidence
    log_b = a.log_evidence - b.log_evidence
    error = math.hypot(a.sd, b.sd)
    return (f"ln B = {_num(log_b, 2)} ± {error:.2f} (2 ln B = {_num(2 * log_b, 1)}: "
            f"{evidence_words(log_b)} evidence for {first} on the Kass & Raftery 1995 "
            "scale)")


def _thickness_lines(comparison) -> list[str]:
    """What the crust data of each scenario were fitted with (one line per reading)."""
    seen = []
    for r in comparison.results:
        model = r.scenario.study.model
        for block in r.scenario.study.observations:
            if block.kind == "crustal_thickness":
                line = thickness_reading(block.thickness_of, model.crust_density,
                                         model.mantle_density)
                if line not in seen:
                    seen.append(line)
    return seen


def _scenario_section(comparison) -> str:
    rows = ["## Scenarios\n",
            "| scenario | description | free parameters | prior odds | differs from the "
            "base study by |", "|---|---|---|---|---|"]
    for r in comparison.results:
        free = ", ".join(quantity(n).name for n in r.scenario.study.sampled_parameters) \
            or "none"
        rows.append(f"| {r.name} | {r.scenario.description} | {free} | "
                    f"{r.scenario.prior_odds:g} | {_override_words(r.scenario)} |")
    rows += [""] + _thickness_lines(comparison)
    return "\n".join(rows) + "\n"


def _override_words(scenario) -> str:
    study, words = scenario.study, []
    for name in scenario.overrides.get("parameters", {}):
        q = quantity(name)
        if name in study.fixed:
            words.append(f"{q.name} fixed at {q.with_value(study.fixed[name])}")
        else:
            words.append(f"{q.name}: {study.priors[name].describe(unit=q.unit_text)}")
    words += [f"{k} = {v}" for k, v in scenario.overrides.get("model", {}).items()]
    return "; ".join(words) or "nothing (the base study)"


def _evidence_section(comparison) -> str:
    settings = comparison.scenarios.settings
    rows = [
        "## Evidence (Bayes factors)\n",
        "The evidence Z of a scenario is its likelihood averaged over its prior (every "
        "prior normalised over its support); the Bayes factor of two scenarios is the ratio "
        "of their Z. ln Z is estimated by nested sampling (nautilus, "
        f"{settings.live_points} live points, {NETWORKS} network per bound, stopped at "
        f"{settings.effective_samples} effective samples) with its standard error, and "
        "checked by grid quadrature (midpoint rule in parameter units) where a scenario has "
        "at most 3 free parameters. With no free parameter Z is the likelihood itself.\n",
        "| scenario | ln Z (nested) | ln Z (quadrature) | ln B vs best | reading "
        "(Kass & Raftery 1995) | probability (68 % range) |",
        "|---|---|---|---|---|---|"]
    table = comparison.table().set_index("scenario")
    best = comparison.ranking()[0]
    for r in comparison.results:
        ev = r.evidence
        quad = "–" if ev.quadrature is None else f"{_num(ev.quadrature, 3)} ± " \
            f"{ev.quadrature_error:.3f}"
        log_b = float(table.loc[r.name, "log_bayes_factor"])
        reading = "best" if r.name == best else f"{evidence_words(log_b)} for {best}"
        rows.append(f"| {r.name} | {_num(ev.log_evidence, 3)} ± {ev.sd:.3f} | {quad} | "
                    f"{_num(log_b, 2)} | {reading} | "
                    f"{_probability_words(comparison, r.name)} |")
    rows.append("\nln B is natural-log; Kass & Raftery (1995) read 2 ln B as 0–2 not worth "
                "more than a bare mention, 2–6 positive, 6–10 strong, above 10 very strong.")
    return "\n".join(rows) + "\n"


def _loo_section(comparison) -> str:
    loo = comparison.loo_table()
    rows = [
        "## Leave-one-out predictive comparison (PSIS-LOO)\n",
        "elpd_loo is the summed log predictive density of each observation row when it is "
        "left out of the fit (Pareto-smoothed importance sampling over the posterior "
        "draws; Vehtari, Gelman & Gabry 2017); higher is better. p_loo is the effective "
        f"number of parameters; a Pareto k above {PARETO_K_WARN:g} marks a row whose "
        "estimate is unreliable.\n",
        "| scenario | elpd_loo | p_loo | worst Pareto k | difference from best |",
        "|---|---|---|---|---|"]
    for r in comparison.results:
        k = "– (exact)" if math.isnan(r.loo.pareto_k_max) else f"{r.loo.pareto_k_max:.2f}"
        diff = loo.loc[r.name]
        diff_text = "best" if diff["elpd_diff"] == 0 else \
            f"{MINUS}{diff['elpd_diff']:.1f} ± {diff['dse']:.1f}"
        rows.append(f"| {r.name} | {_num(r.loo.elpd_loo, 1)} ± {r.loo.se:.1f} | "
                    f"{r.loo.p_loo:.1f} | {k} | {diff_text} |")
    caveats = loo_caveats(comparison)
    if caveats:
        rows.append("\n**This ranking is not reliable**: " + "; ".join(caveats) + ".")
    return "\n".join(rows) + "\n"


def _agreement(comparison) -> tuple[str, str, str]:
    """(case, best by evidence, best by LOO); case is "agree", "unresolved" (LOO cannot
    separate the two) or "disagree"."""
    best_z = comparison.ranking()[0]
    loo = comparison.loo_table()
    best_loo = loo.index[0]
    if best_z == best_loo:
        return "agree", best_z, best_loo
    diff = loo.loc[best_z]
    if diff["elpd_diff"] <= LOO_SIGMAS * diff["dse"]:
        return "unresolved", best_z, best_loo
    return "disagree", best_z, best_loo


def _agreement_words(comparison) -> str:
    case, best_z, best_loo = _agreement(comparison)
    if case == "agree" and loo_caveats(comparison):
        return "the evidence and LOO point to the same scenario"
    if case == "agree":
        return "the evidence and LOO agree"
    if case == "unresolved":
        diff = comparison.loo_table().loc[best_z]
        return (f"LOO cannot tell it from {best_z} (difference {diff['elpd_diff']:.1f} ± "
                f"{diff['dse']:.1f}), so the evidence's preference comes from the priors")
    return "**the evidence and LOO disagree** (see below)"


_PRIOR_WIDTH = (
    "The evidence averages the likelihood over the whole prior, so a scenario with a wide "
    "prior pays for the parameter values the data rule out (the Occam factor) and a "
    "narrow prior around the best fit is rewarded; leave-one-out scores only how well the "
    "fitted posterior predicts each left-out observation, and hardly depends on the prior "
    "width once the data dominate. A scenario that narrows a prior to the right region "
    "therefore gains evidence without predicting better.")


def _agreement_section(comparison) -> str:
    case, best_z, best_loo = _agreement(comparison)
    caveats = loo_caveats(comparison)
    if case == "agree":
        text = "The evidence and the leave-one-out comparison favour the same scenario."
    elif case == "unresolved":
        diff = comparison.loo_table().loc[best_z]
        text = (f"The evidence favours **{best_z}**; leave-one-out ranks **{best_loo}** "
                f"first, but by {diff['elpd_diff']:.1f} ± {diff['dse']:.1f}, within "
                f"{LOO_SIGMAS:g} standard errors: both predict the data about equally well, "
                f"and the evidence prefers {best_z} for its prior. {_PRIOR_WIDTH}")
    else:
        text = (f"**They disagree**: the evidence favours **{best_z}**, leave-one-out "
                f"prediction **{best_loo}**. This can happen without any error. "
                f"{_PRIOR_WIDTH} A prior that is wide where the data are weak can thus "
                "cost a scenario evidence while it predicts best; check how the priors of "
                "the two scenarios differ before choosing.")
    if caveats:
        text += (" **The leave-one-out reading is not reliable here**: "
                 + "; ".join(caveats) + ". Whether the two readings agree cannot be "
                 "judged until these are fixed (each scenario's report.md says, under "
                 "Convergence, what to change; see also the Warnings).")
    return "## Do the two readings agree?\n\n" + text + "\n"


def _warning_section(comparison) -> str:
    found = comparison.warnings()
    if not found:
        return ("## Warnings\n\nNone: every scenario fits the data, no posterior presses "
                "against a prior bound, the nested and quadrature evidences agree within "
                f"{DISAGREEMENT_SIGMAS:g} combined errors and every Pareto k is at most "
                f"{PARETO_K_WARN:g}.\n")
    return "## Warnings\n\n" + "\n".join(f"- {w}" for w in found) + "\n"


def _estimates_section(comparison) -> str:
    lines = ["## Estimates under each scenario\n",
             "Median with the 68 % and 95 % posterior intervals; the full results of each "
             "scenario are in its folder (report.md there).\n"]
    for r in comparison.results:
        lines.append(f"**{r.name}**" + ("" if r.converged else " (sampler NOT converged)"))
        summary = None if r.posterior is None else r.posterior.summary().set_index(
            "parameter")
        for name in ("potential_temperature", "lithosphere_thickness"):
            q = quantity(name)
            if name in r.scenario.study.fixed:
                lines.append(f"- {q.title}: fixed at "
                             f"{q.with_value(r.scenario.study.fixed[name])}")
            else:
                lines.append(f"- {q.title}: {interval_words(summary.loc[name])}")
        lines.append("")
    return "\n".join(lines)


def _files_section(comparison, figure_format: str) -> str:
    names = ", ".join(f"{r.name}/" for r in comparison.results)
    return ("## Files\n\n"
            "evidence.csv (one row per scenario: evidence, Bayes factor, probability, LOO), "
            f"compare.{figure_format} (posteriors, predictions, probabilities), "
            "comparison.json "
            "(inputs with their sha256, seed, settings), and one folder per scenario "
            f"({names}) with what `lidmelt fit` writes (posterior.nc included) plus scenario.json.\n")


def _pct(p: float) -> str:
    return format_percent(p)


def _num(value: float, decimals: int) -> str:
    """A number with a true minus sign."""
    return format_signed(value, decimals)
