"""compare.png: the scenarios side by side.

Top rows: the posterior of every parameter that is free in some scenario or fixed at
different values (model errors included), for every scenario (solid) over its prior
(dashed; a fixed value is a dotted vertical line). Then the posterior probability of each
scenario with its 68 % error bar, and the LOO difference from the best-predicting
scenario with its standard error. Below: every observation (black, ±1σ) against each
scenario's posterior predictions (median, 68 % and 95 % ranges). One legend, above the
panels, names the scenarios' colours and the line styles.
"""

from __future__ import annotations

import textwrap

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from ...forward import figure_style as style
from ...forward.figure_output import DOUBLE_COLUMN
from ...forward.plotting import plain_log_axis
from ...forward.quantities import format_percent, format_signed, quantity
from .checks import replicate_data
from ..study.seeds import generator

__all__ = ["comparison_figure"]

#: One colour per scenario: the posterior's steel blue first, then hues that stay clear of
#: the ochre of priors and the near-black of observations (docs/figures.md).
_COLOURS = (style.POSTERIOR, "#d0622f", "#7b4fa0", "#2a9d8f", "#b8322a", "#6b8e23",
            "#e377c2", "#8c6d31", "#17becf", "#7f7f7f")
_DRAWS = 200
#: A journal page wide (docs/figures.md): two parameter panels a row, 9 pt titles and
#: labels, wrapped to the width of their panel (characters per line, measured).
_PER_ROW = 2
_TITLE = 9
_HALF_CHARS = 34  # characters of 9 pt text under half the page
_FULL_CHARS = 85  # characters of 9 pt text across the page


def comparison_figure(comparison) -> Figure:
    """The figure of a `Comparison` (see the module docstring)."""
    results = comparison.results
    predictions = [_predictions(r, comparison.seed) for r in results]
    panels = len(predictions[0])
    shown = _parameters(results)
    per_row = min(_PER_ROW, max(1, len(shown)))
    marginal_rows = -(-len(shown) // per_row)
    ranking_height = 1.7 + 0.3 * len(results)
    heights = [2.3] * marginal_rows + [ranking_height] + [2.2] * panels
    fig = Figure(figsize=(DOUBLE_COLUMN, sum(heights) + 1.3), layout="constrained")
    grid = fig.add_gridspec(len(heights), _PER_ROW, height_ratios=heights)
    for k, (name, unit) in enumerate(shown):
        row, col = divmod(k, per_row)
        cells = grid[row, col] if per_row == _PER_ROW else grid[row, :]
        _draw_marginals(fig.add_subplot(cells), results, name, unit)
    _draw_probabilities(fig.add_subplot(grid[marginal_rows, 0]), comparison)
    _draw_loo(fig.add_subplot(grid[marginal_rows, 1]), comparison)
    for i in range(panels):
        ax = fig.add_subplot(grid[marginal_rows + 1 + i, :])
        _draw_predictive(ax, results, [p[i] for p in predictions])
    _legend(fig, results, title=f"{comparison.scenarios.base.name}: {len(results)} "
            "scenarios compared")
    return fig


def _colour(k: int) -> str:
    return _COLOURS[k % len(_COLOURS)]


#: Order of the model's parameters in the figure; free model errors follow.
_ORDER = ("potential_temperature", "lithosphere_thickness", "water", "active_upwelling",
          "solidus_offset")


def _parameters(results) -> list[tuple[str, str]]:
    """``(name, unit)`` of every parameter that differs between scenarios or is sampled
    in any of them: free somewhere (model errors too), or fixed at different values."""
    found: dict[str, str] = {}
    fixed: dict[str, set] = {}
    for r in results:
        study = r.scenario.study
        for name in study.priors:
            found.setdefault(name, quantity(name).unit)
        for error in study.error_parameters:
            found.setdefault(error.name, error.unit)
        for name, value in study.fixed.items():
            fixed.setdefault(name, set()).add(value)
    for name, values in fixed.items():
        if len(values) > 1:
            found.setdefault(name, quantity(name).unit)
    rank = {name: k for k, name in enumerate(_ORDER)}
    return sorted(found.items(), key=lambda item: rank.get(item[0], len(rank)))


def _prior(study, name: str):
    """The prior of `name` in `study` (a parameter or a free model error), or None."""
    if name in study.priors:
        return study.priors[name]
    return next((e.prior for e in study.error_parameters if e.name == name), None)


def _draw_marginals(ax, results, name: str, unit: str) -> None:
    low, high = _axis_range(results, name)
    x = np.linspace(low, high, 400)
    priors = [_prior(r.scenario.study, name) for r in results]
    shared = len({repr(p) for p in priors if p is not None}) == 1
    for k, (r, prior) in enumerate(zip(results, priors, strict=True)):
        study, colour = r.scenario.study, _colour(k)
        if name in study.fixed:
            ax.axvline(study.fixed[name], color=colour, lw=2.0, ls=":")
            continue
        if prior is None or r.posterior is None:
            continue
        ax.plot(x, np.exp(prior.logpdf(x)), color=style.PRIOR if shared else colour,
                lw=1.0, ls="--", alpha=0.9)
        samples = r.posterior.samples[name].to_numpy()
        ax.hist(samples, bins=np.linspace(low, high, 90), density=True, histtype="step",
                color=colour, lw=1.6)
    q = quantity(name, unit=unit)
    ax.set_xlim(low, high)
    ax.set_xlabel(q.axis_label(), fontsize=_TITLE)
    ax.set_ylabel(f"probability density (1/{q.unit_text})" if q.unit_text
                  else "probability density", fontsize=_TITLE)
    ax.set_title(q.title if len(q.title) <= 40 else q.symbol, fontsize=_TITLE, loc="left")


def _legend(fig, results, *, title: str) -> None:
    """One legend for the whole figure, above the panels, so that none hides a curve; the
    figure's title heads it (a separate title and an outside legend would overlap)."""
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color=_colour(k), lw=4.0) for k in range(len(results))]
    labels = [f"scenario {r.name}" for r in results]
    handles += [Line2D([], [], color=style.PRIOR, lw=1.0, ls="--"),
                Line2D([], [], color="0.4", lw=2.0, ls=":"),
                Line2D([], [], ls="none", marker=style.OBSERVED["fmt"],
                       color=style.OBSERVED["color"], mfc=style.OBSERVED["mfc"],
                       ms=style.OBSERVED["ms"])]
    labels += ["prior (dashed; in the scenario's\ncolour where priors differ)",
               "fixed value (dotted)", "observed ± 1σ"]
    fig.legend(handles, labels, loc="outside upper center", ncols=min(len(labels), 3),
               fontsize=8, frameon=False, title=textwrap.fill(title, width=80),
               title_fontsize=10)


def _axis_range(results, name: str) -> tuple[float, float]:
    """The span of every scenario's prior (central 99.8 % of an unbounded one) and fixed
    value, padded by 3 %."""
    edges = []
    for r in results:
        study = r.scenario.study
        prior = _prior(study, name)
        if name in study.fixed:
            edges += [study.fixed[name]] * 2
        elif prior is not None:
            edges += [float(prior.ppf(0.001)), float(prior.ppf(0.999))]
            edges += [b for b in prior.bounds if np.isfinite(b)]
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
    # a no-break space keeps "68 %" on one line
    ax.set_xlabel(textwrap.fill("posterior probability of the scenario (dimensionless; bars: "
                                "68\N{NO-BREAK SPACE}% range from the ln Z errors)",
                                _HALF_CHARS), fontsize=_TITLE)
    ax.set_title("Evidence: scenario probabilities", fontsize=_TITLE, loc="left")
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
        ax.annotate("best" if dk == 0 else f"{format_signed(dk, 1)} ± {sk:.1f}",
                    (dk, yk), xytext=(0, 9), textcoords="offset points", ha="center",
                    fontsize=8)
    ax.axvline(0.0, color="0.5", lw=0.8)
    span = float(np.max(np.abs(diff) + dse))
    if span > 20:  # a scenario far behind would squeeze the others onto zero
        ax.set_xscale("symlog", linthresh=2.0)
        ax.set_xlim(-span * 1.5, 1.0)
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: format_signed(v)))
    else:
        ax.set_xlim(-max(1.0, span) * 1.2, max(1.0, span) * 0.25)
    ax.set_yticks(y, names)
    ax.set_ylim(y.min() - 0.6, y.max() + 0.6)
    ax.set_xlabel(textwrap.fill("elpd_loo minus the best (nats; bars: ±1 standard error of "
                                "the difference" + ("; symmetric log axis)" if span > 20
                                                    else ")"), _HALF_CHARS), fontsize=_TITLE)
    ax.set_title(textwrap.fill("Leave-one-out: predictive accuracy (0 = best)", _HALF_CHARS),
                 fontsize=_TITLE, loc="left")
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
    rng = generator(seed, "scenario_figure")
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
                "invert": panel.invert, "log": panel.log})
    return panels


def _draw_predictive(ax, results, panels) -> None:
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
    ax.set_ylabel(first["ylabel"], fontsize=_TITLE)
    ax.set_title(textwrap.fill(f"{first['title']}: observed against each scenario's "
                               "posterior predictive (data simulated from its posterior; "
                               "thick 68 %, thin 95 %, tick median)", width=_FULL_CHARS),
                 fontsize=_TITLE, loc="left")
    ax.grid(axis="y", alpha=0.3, lw=0.5)
    if first.get("log"):
        plain_log_axis(ax)
    if first.get("invert"):
        ax.invert_yaxis()


def _percent(p: float) -> str:
    return format_percent(p)
