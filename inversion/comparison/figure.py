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

from ..figures import LABELS, _fit_panels

__all__ = ["comparison_figure"]

_COLOURS = ("tab:blue", "tab:orange", "tab:green", "tab:red", "tab:purple", "tab:brown",
            "tab:pink", "tab:olive", "tab:cyan", "tab:gray")
_SHOWN = ("potential_temperature", "lithosphere_thickness")
_DRAWS = 200


def comparison_figure(comparison) -> Figure:
    """The figure of a `Comparison` (see the module docstring)."""
    results = comparison.results
    predictions = [_predictions(r) for r in results]
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
    for k, r in enumerate(results):
        study, colour = r.scenario.study, _colour(k)
        if name in study.fixed:
            ax.axvline(study.fixed[name], color=colour, lw=2.0, ls=":",
                       label=f"{r.name}: fixed at {study.fixed[name]:g}")
            continue
        prior = study.priors[name]
        ax.plot(x, np.exp(prior.logpdf(x)), color=colour, lw=1.0, ls="--", alpha=0.8)
        samples = r.posterior.samples[name].to_numpy()
        ax.hist(samples, bins=np.linspace(low, high, 90), density=True, histtype="step",
                color=colour, lw=1.6, label=f"{r.name}: posterior")
    ax.plot([], [], color="0.3", lw=1.0, ls="--", label="prior (same colour)")
    ax.set_xlim(low, high)
    ax.set_xlabel(LABELS[name])
    ax.set_ylabel("probability density")
    ax.set_title(LABELS[name].split(" (")[0] + ": posterior and prior", fontsize=9.5,
                 loc="left")
    ax.legend(fontsize=7, loc="upper right", frameon=False)


def _axis_range(results, name: str) -> tuple[float, float]:
    """The span of every scenario's prior (central 99.8 % of an unbounded one) and fixed
    value, padded by 3 %."""
    edges = []
    for r in results:
        study = r.scenario.study
        if name in study.fixed:
            edges += [study.fixed[name]] * 2
        else:
            edges += [float(study.priors[name].ppf(0.001)), float(study.priors[name].ppf(0.999))]
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
    ax.set_xlabel("posterior probability among these scenarios")
    ax.set_title("Evidence: scenario probabilities\n(error bars: 68 % range from the "
                 "ln Z errors)", fontsize=9.5, loc="left")
    ax.grid(axis="x", alpha=0.3, lw=0.5)


def _draw_loo(ax, comparison) -> None:
    table = comparison.loo_table()
    names = [r.name for r in comparison.results]
    y = np.arange(len(names))[::-1]
    diff = np.array([-table.loc[n, "elpd_diff"] for n in names])
    dse = np.array([table.loc[n, "dse"] for n in names])
    ax.errorbar(diff, y, xerr=dse, fmt="o", color="black", ms=5, capsize=4)
    for k, (yk, dk) in enumerate(zip(y, diff, strict=True)):
        ax.plot(dk, yk, "o", color=_colour(k), ms=8, zorder=3)
    ax.axvline(0.0, color="0.5", lw=0.8)
    ax.set_yticks(y, names)
    span = max(1.0, float(np.max(np.abs(diff) + dse))) * 1.15
    ax.set_xlim(-span, 0.25 * span)
    ax.set_xlabel("elpd_loo difference from the best (log units)")
    ax.set_title("Leave-one-out: predictive accuracy\n(0 = best; bars ±1 standard error of "
                 "the difference)", fontsize=9.5, loc="left")
    ax.grid(axis="x", alpha=0.3, lw=0.5)


def _predictions(result) -> list[dict]:
    """The fit panels (inversion.figures) of one scenario's posterior predictions."""
    from ..model import LogPosterior

    if result.posterior is not None:
        logpost = result.posterior.logpost
        theta = result.posterior.predictive_draws(_DRAWS)
    else:
        logpost = LogPosterior(result.scenario.study)
        theta = np.zeros((1, 0))
    return list(_fit_panels(result.scenario.study.observations, logpost.column(theta)))


def _draw_predictive(ax, results, panels, *, legend: bool) -> None:
    first = panels[0]
    x = np.arange(len(first["names"]))
    width = 0.8 / (len(results) + 1)
    for k, (r, panel) in enumerate(zip(results, panels, strict=True)):
        pred = np.asarray(panel["pred"], float)
        q = np.nanquantile(pred, [0.025, 0.16, 0.5, 0.84, 0.975], axis=0)
        xs = x + (k - (len(results) - 1) / 2) * width
        colour = _colour(k)
        ax.vlines(xs, q[0], q[4], color=colour, lw=1.0, alpha=0.7)
        ax.vlines(xs, q[1], q[3], color=colour, lw=4.0, alpha=0.8)
        ax.plot(xs, q[2], "_", color="black", ms=8, mew=1.5)
        ax.plot([], [], color=colour, lw=4, label=f"{r.name}: 68 % (thin: 95 %), median —")
    ax.errorbar(x, first["obs"], yerr=first["sigma"], fmt="o", color="black", mfc="white",
                ms=5, capsize=3, label="observed ± 1σ", zorder=4)
    ax.set_xticks(x, first["names"], rotation=25, ha="right", fontsize=8)
    ax.set_xlim(-0.6, len(x) - 0.4)
    ax.set_ylabel(first["ylabel"])
    ax.set_title(first["title"].replace("the model", "each scenario's predicted"),
                 fontsize=9.5, loc="left")
    ax.grid(axis="y", alpha=0.3, lw=0.5)
    if first.get("invert"):
        ax.invert_yaxis()
    if legend:
        ax.legend(fontsize=7.5, loc="upper left", bbox_to_anchor=(1.005, 1.0), frameon=False)


def _percent(p: float) -> str:
    if p >= 0.995:
        return f"{100 * p:.1f} %" if p < 0.9995 else "> 99.9 %"
    if p < 0.001:
        return "< 0.1 %"
    return f"{100 * p:.1f} %"
