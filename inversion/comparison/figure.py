"""compare.png: the scenarios side by side.

Top row: the posteriors of potential temperature and lid thickness of every scenario
(solid) over their priors (dashed; a fixed value is a vertical line), the posterior
probability of each scenario with its 68 % error bar, and the LOO difference from the
best-predicting scenario with its standard error. Below: every observation (black,
±1σ) against each scenario's posterior predictions (median, 68 % and 95 % ranges).
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from ...forward import figure_style as style
from ...forward.quantities import quantity
from .checks import replicate_data

__all__ = ["comparison_figure"]

#: One colour per scenario: the posterior's steel blue first, then hues that stay clear of
#: the ochre of priors and the near-black of observations (docs/figures.md).
_COLOURS = (style.POSTERIOR, "#d0622f", "#7b4fa0", "#2a9d8f", "#b8322a", "#6b8e23",
            "#e377c2", "#8c6d31", "#17becf", "#7f7f7f")
_SHOWN = ("potential_temperature", "lithosphere_thickness")
_DRAWS = 200


def comparison_figure(comparison) -> Figure:
    """The figure of a `Comparison` (see the module docstring)."""
    results = comparison.results
    predictions = [_predictions(r, comparison.seed) for r in results]
    panels = len(predictions[0])
    fig = Figure(figsize=(15.0, 4.2 + 2.7 * panels), layout="constrained")
    grid = fig.add_gridspec(1 + panels, 4, height_ratios=[1.5] + [1.0] * panels)
    for j, name in enumerate(_SHOWN):
        _draw_marginals(fig.add_subplot(grid[0, j]), results, name)
    _draw_probabilities(fig.add_subplot(grid[0, 2]), comparison)
    _draw_loo(fig.add_subplot(grid[0, 3]), comparison)
    for i in range(panels):
        ax = fig.add_subplot(grid[1 + i, :])
        _draw_predictive(ax, results, [p[i] for p in predictions], legend=i == 0)
    fig.suptitle(f"{comparison.scenarios.base.name}: {len(results)} scenarios compared",
                 fontsize=12)
    return fig


def _colour(k: int) -> str:
    return _COLOURS[k % len(_COLOURS)]


def _draw_marginals(ax, results, name: str) -> None:
    low, high = _axis_range(results, name)
    x = np.linspace(low, high, 400)
    priors = [r.scenario.study.priors.get(name) for r in results]
    shared = len({repr(p) for p in priors if p is not None}) == 1
    for k, r in enumerate(results):
        study, colour = r.scenario.study, _colour(k)
        if name in study.fixed:
            ax.axvline(study.fixed[name], color=colour, lw=2.0, ls=":",
                       label=f"{r.name}: fixed at {study.fixed[name]:g}")
            continue
        ax.plot(x, np.exp(study.priors[name].logpdf(x)),
                color=style.PRIOR if shared else colour,
                lw=1.0, ls="--", alpha=0.9)
        samples = r.posterior.samples[name].to_numpy()
        ax.hist(samples, bins=np.linspace(low, high, 90), density=True, histtype="step",
                color=colour, lw=1.6, label=f"{r.name}: posterior")
    free = sum(p is not None for p in priors)
    words = ("prior" if free == 1 else "prior (scenario's colour)" if not shared
             else "prior (all scenarios)" if free == len(results)
             else "prior (where it is free)")
    ax.plot([], [], color=style.PRIOR if shared else "0.4", lw=1.0, ls="--", label=words)
    ax.set_xlim(low, high)
    ax.set_xlabel(quantity(name).axis_label())
    ax.set_ylabel("probability density")
    ax.set_title(f"{quantity(name).title}: posterior and prior", fontsize=9.5, loc="left")
    ax.legend(fontsize=7, loc="upper right", frameon=True, framealpha=0.85,
              edgecolor="none")


def _axis_range(results, name: str) -> tuple[float, float]:
    """The span of every scenario's prior (central 99.8 % of an unbounded one) and fixed
    value, padded by 3 %."""
    edges = []
    for r in results:
        study = r.scenario.study
        if name in study.fixed:
            edges += [study.fixed[name]] * 2
        else:
            prior = study.priors[name]
            edges += [float(prior.ppf(0.001)), float(prior.ppf(0.999))]
            low, high = study.priors[name].bounds
            edges += [b for b in (low, high) if np.isfinite(b)]
    low, high = min(edges), max(edges)
    pad = 0.03 * (high - low) if high > low else 1.0
    return low - pad, high + pad


def _draw_probabilities(ax, comparison) -> None:
    p, lo, hi = comparison.probabilities
    names = [r.name for r in comparison.results]
    y = np.arange(len(names))[::-1]
    ax.barh(y, p, color=[_colour(k) for k in range(len(names))], alpha=0.75, height=0.6)
    ax.errorbar(p, y, xerr=[np.maximum(p - lo, 0), np.maximum(hi - p, 0)], fmt="none",
                ecolor="black", capsize=4, lw=1.2)
    for yk, pk in zip(y, p, strict=True):
        ax.text(min(pk + 0.03, 0.8), yk, _percent(pk), va="center", fontsize=8.5)
    ax.set_yticks(y, names)
    ax.set_xlim(0.0, 1.0)
    ax.set_xlabel("posterior probability")
    ax.set_title("Evidence: scenario probabilities\n(error bars: 68 % range from the "
                 "ln Z errors)", fontsize=9.5, loc="left")
    ax.grid(axis="x", alpha=0.3, lw=0.5)


def _draw_loo(ax, comparison) -> None:
    table = comparison.loo_table()
    names = [r.name for r in comparison.results]
    y = np.arange(len(names))[::-1]
    diff = np.array([-table.loc[n, "elpd_diff"] for n in names])
    dse = np.array([table.loc[n, "dse"] for n in names])
    ax.errorbar(diff, y, xerr=dse, fmt="none", ecolor="black", capsize=4, lw=1.2)
    for k, (yk, dk, sk) in enumerate(zip(y, diff, dse, strict=True)):
        ax.plot(dk, yk, "o", color=_colour(k), ms=8, zorder=3)
        ax.annotate("best" if dk == 0 else f"{dk:.1f} ± {sk:.1f}".replace("-", "−"),
                    (dk, yk), xytext=(0, 9), textcoords="offset points", ha="center",
                    fontsize=8)
    ax.axvline(0.0, color="0.5", lw=0.8)
    span = float(np.max(np.abs(diff) + dse))
    if span > 20:  # a scenario far behind would squeeze the others onto zero
        ax.set_xscale("symlog", linthresh=2.0)
        ax.set_xlim(-span * 1.5, 1.0)
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}".replace("-", "−")))
    else:
        ax.set_xlim(-max(1.0, span) * 1.2, max(1.0, span) * 0.25)
    ax.set_yticks(y, names)
    ax.set_ylim(y.min() - 0.6, y.max() + 0.6)
    ax.set_xlabel("elpd_loo minus the best" + (" (symmetric log axis)" if span > 20 else ""))
    ax.set_title("Leave-one-out: predictive accuracy\n(0 = best; bars ±1 standard error of "
                 "the difference)", fontsize=9.5, loc="left")
    ax.grid(axis="x", alpha=0.3, lw=0.5)


def _predictions(result, seed: int) -> list[dict]:
    """Posterior predictive panels of one scenario: observations and data simulated from
    its posterior draws (`checks.replicate_data`), one panel per observed quantity."""
    from ..fitting.log_posterior import LogPosterior

    study = result.scenario.study
    if result.posterior is not None:
        logpost, draws = result.posterior.logpost, result.posterior.predictive_draws(_DRAWS)
    else:
        logpost, draws = LogPosterior(study), np.zeros((1, 0))
    rng = np.random.default_rng(np.random.SeedSequence(seed).spawn(1)[0])
    replicas = [sets for _, sets in replicate_data(logpost, draws, rng, _DRAWS)
                if sets is not None]
    panels = []
    for j, block in enumerate(study.observations):
        observed = block.observed()
        for panel in block.panels():  # each kind says what it shows (ObservationSet.panels)
            simulated = (np.array([sets[j].observed()[panel.key] for sets in replicas])
                         if replicas else np.full((1, len(block)), np.nan))
            panels.append({
                "names": list(block.ids), "obs": observed[panel.key],
                "sigma": observed[panel.sigma_key], "simulated": simulated,
                "ylabel": panel.label, "title": f"{block.name}: {panel.title}",
                "invert": panel.invert})
    return panels


def _draw_predictive(ax, results, panels, *, legend: bool) -> None:
    first = panels[0]
    x = np.arange(len(first["names"]))
    width = 0.8 / (len(results) + 1)  # slot 0: the observation, then one per scenario
    for k, (r, panel) in enumerate(zip(results, panels, strict=True)):
        q = np.nanquantile(panel["simulated"], [0.025, 0.16, 0.5, 0.84, 0.975], axis=0)
        xs = x + (k + 1 - len(results) / 2) * width
        colour = _colour(k)
        ax.vlines(xs, q[0], q[4], color=colour, lw=1.0, alpha=0.8)
        ax.vlines(xs, q[1], q[3], color=colour, lw=4.5, alpha=0.85, label=r.name)
        ax.plot(xs, q[2], "_", color="black", ms=7, mew=1.3)
    ax.errorbar(x - len(results) / 2 * width, first["obs"], yerr=first["sigma"],
                label="observed ± 1σ", zorder=4, **style.OBSERVED)
    ax.set_xticks(x, first["names"], rotation=25, ha="right", fontsize=8)
    ax.set_xlim(-0.6, len(x) - 0.4)
    ax.set_ylabel(first["ylabel"])
    ax.set_title(f"{first['title']}: observed against each scenario's posterior predictive "
                 "(data simulated from its posterior; thick 68 %, thin 95 %, tick median)",
                 fontsize=9.5, loc="left")
    ax.grid(axis="y", alpha=0.3, lw=0.5)
    if first.get("invert"):
        ax.invert_yaxis()
    if legend:
        ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.005, 1.0), frameon=False,
                  title="scenario", title_fontsize=8)


def _percent(p: float) -> str:
    if p >= 0.995:
        return f"{100 * p:.1f} %" if p < 0.9995 else "> 99.9 %"
    if p < 0.001:
        return "< 0.1 %"
    return f"{100 * p:.1f} %"
