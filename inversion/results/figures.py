"""Figures of a posterior: corner.png, fit.png and pt.png.

* `corner_figure`: one- and two-dimensional marginals of the free parameters, with the
  priors on the one-dimensional ones, the median and 68 % interval, and the MAP.
* `fit_figure`: every observation with its error bar against the posterior predictive
  distribution of what the likelihood compares it with (for ``equilibration = "path"``
  the melt-weighted spread along the melting path), and, for pressure-temperature data,
  each sample's P and T together against the predicted P-T distribution.
* `pt_figure`: pressure-temperature diagram with the melting curves at the MAP, melting
  paths of posterior draws, the posterior lid base and the observations (pressures
  without a temperature as bands).

Colours and line styles are lidmelt's own (`forward.figure_style`, docs/figures.md).
Every function returns a matplotlib Figure and does not touch pyplot's global state, so
it is safe to call from scripts and tests (Agg backend).
"""

from __future__ import annotations

import textwrap

import corner
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ... import forward
from ...forward import figure_style as style
from ...forward import plotting
from ...forward.figure_output import DOUBLE_COLUMN, figure_bytes, figure_name
from ...forward.quantities import quantity, unit_text
from ..study.priors import LogUniform
from .report import decimals, estimate
from .sample_labels import place_labels

__all__ = ["corner_figure", "figure_files", "fit_figure", "pt_figure"]

_DPI = 150
_INCH_FOR_LABELS = 0.95  # room left and below the corner grid for tick and axis labels
_INCH_FOR_CAPTION = 0.45  # below that: the caption naming each symbol


def figure_files(posterior, *, figure_format: str = "png") -> dict[str, bytes]:
    """The bytes of the corner, fit and P-T figures of `posterior`, in that order.

    Keys are the file names (``corner.png`` ...; ``corner.pdf`` for ``"pdf"``); every
    figure goes through `forward.figure_output.figure_bytes` (fonts embedded).
    """
    return {figure_name(stem, figure_format): figure_bytes(make(posterior), figure_format,
                                                            dpi=_DPI)
            for stem, make in (("corner", corner_figure), ("fit", fit_figure),
                               ("pt", pt_figure))}


# ---- corner -----------------------------------------------------------------------------

_CHAR_INCH_8PT = 0.062  # mean width of a character at 8 pt (DejaVu Sans), inches
_LEGEND_HANDLE_INCH = 0.55  # a legend entry's marker and the gaps around it, inches


def corner_figure(posterior) -> Figure:
    """Marginals of the free parameters: priors, median, 68 % interval and MAP marked."""
    names, units = posterior.names, posterior.logpost.units
    ndim = len(names)
    kept = posterior.chain[posterior.discard:: posterior.thin].reshape(-1, ndim)
    # at most a journal page's width; fewer parameters, a smaller square
    size = min(DOUBLE_COLUMN, max(5.0, 2.3 * ndim + _INCH_FOR_LABELS + 0.3))
    fig = Figure(figsize=(size, size + 0.5 + _INCH_FOR_CAPTION))
    # A log-uniform prior spans decades: bin and draw that parameter on a log axis.
    scales = ["log" if isinstance(prior, LogUniform) else "linear"
              for prior in posterior.logpost.priors]
    corner.corner(
        kept, fig=fig, axes_scale=scales,
        labels=[quantity(n, unit=units[n]).axis_label(short=True) for n in names],
        show_titles=False, label_kwargs={"fontsize": 10}, levels=(0.393, 0.865),
        plot_datapoints=False, fill_contours=True, color=style.POSTERIOR, smooth=1.0,
        bins=30, max_n_ticks=4, labelpad=0.08,
        hist_kwargs={"density": True, "color": style.POSTERIOR, "lw": 1.3},
    )
    axes = np.array(fig.axes).reshape(ndim, ndim)
    summary = posterior.summary().set_index("parameter")
    point = [posterior.map[n] for n in names]
    for j, (name, prior) in enumerate(zip(names, posterior.logpost.priors, strict=True)):
        _mark_marginal(axes[j, j], summary.loc[name], prior, point[j])
        for i in range(j + 1, ndim):
            axes[i, j].plot(point[j], point[i], "D", color=style.MAP, mec="white",
                            ms=6, mew=1.0, zorder=6)
    height = size + 0.5 + _INCH_FOR_CAPTION
    left, bottom, right, top = (_INCH_FOR_LABELS / size,
                                (_INCH_FOR_LABELS + _INCH_FOR_CAPTION) / height,
                                1 - 0.25 / size, 1 - 0.9 / height)
    fig.subplots_adjust(left=left, bottom=bottom, right=right, top=top, wspace=0.06,
                        hspace=0.06)
    # Axis labels at a fixed distance in inches, inside the margins left for them.
    cell_w, cell_h = size * (right - left) / ndim, height * (top - bottom) / ndim
    for k in range(ndim):
        axes[k, 0].yaxis.set_label_coords(-0.75 / cell_w, 0.5)
        axes[ndim - 1, k].xaxis.set_label_coords(0.5, -0.72 / cell_h)
    handles, labels, handler_map = _corner_legend(ndim)
    if ndim > 1:  # within the empty upper-right triangle: labels wrapped to its width
        x0 = axes[0, 1].get_position().x0
        room = int(((1 - 0.08 / size - x0) * size - _LEGEND_HANDLE_INCH) / _CHAR_INCH_8PT)
        labels = [textwrap.fill(label, room) for label in labels]
    fig.legend(handles, labels, handler_map=handler_map, loc="upper right", fontsize=8,
               frameon=False, bbox_to_anchor=(1 - 0.08 / size, 1 - 0.08 / height))
    fig.suptitle(textwrap.fill(posterior.study.name, width=int(7 * size))
                 + "\nposterior of the free parameters",
                 fontsize=10, x=0.02, ha="left", y=1 - 0.12 / height, va="top")
    fig.text(0.02, 0.08 / height, _symbol_note(names, scales, width=int(17 * size)),
             fontsize=7.5, color=style.INK, ha="left", va="bottom")
    return fig


def _symbol_note(names, scales, *, width: int) -> str:
    """The caption: each axis symbol in words, and which axes are logarithmic."""
    words = []
    for name in names:
        q = quantity(name)
        words.append(f"{q.symbol} = {q.name}" + (
            " (moves the solidus, lherzolite-out curve and liquidus up (> 0) or down "
            "together: a more refractory or a more fertile source; docs/model.md)"
            if name == "solidus_offset" else ""))
    note = "; ".join(words)
    logs = [quantity(n).symbol for n, scale in zip(names, scales, strict=True)
            if scale == "log"]
    if logs:
        note += "; log axis (log-uniform prior): " + ", ".join(logs)
    return textwrap.fill(note, width=width)  # width: characters of 7.5 pt per line


def _mark_marginal(ax, row, prior, map_value) -> None:
    """Prior density, median (solid), 16/84 % (dashed), MAP tick and the estimate."""
    spacing = np.geomspace if ax.get_xscale() == "log" else np.linspace
    x = spacing(*ax.get_xlim(), 400)
    density = np.exp(prior.logpdf(x))
    ax.plot(x, density, color=style.PRIOR, lw=1.4, ls=(0, (4, 2)), zorder=4)
    ax.set_ylim(0, max(ax.get_ylim()[1], 1.1 * float(np.max(density))))
    ax.axvline(row["median"], **_MEDIAN, zorder=5)
    for q in ("q16", "q84"):
        ax.axvline(row[q], **_QUANTILE, zorder=5)
    # The MAP as a marker on the top edge, so the median line stays visible.
    ax.plot(map_value, 1.0, "v", color=style.MAP, ms=8, mec="white", mew=0.8, zorder=7,
            transform=ax.get_xaxis_transform(), clip_on=False)
    ax.set_title(estimate(row), fontsize=9, pad=9)


#: The posterior median and 16/84 % lines: ink, so they stand apart from the steel-blue
#: posterior histogram they are drawn on (docs/figures.md).
_MEDIAN = dict(color=style.INK, lw=1.3)
_QUANTILE = dict(color=style.INK, lw=0.9, ls=(0, (3, 2)))


def _corner_legend(ndim: int):
    """The corner figure's legend: each thing drawn is named once (the MAP by both its
    markers, the triangle of the 1-D panels and the diamond of the 2-D ones)."""
    from matplotlib.legend_handler import HandlerTuple

    top = Line2D([], [], color=style.MAP, marker="v", ls="", ms=7)
    handles = [
        Patch(facecolor="none", edgecolor=style.POSTERIOR, lw=1.3,
              label="posterior (histogram of the samples)"),
        Line2D([], [], color=style.PRIOR, lw=1.4, ls=(0, (4, 2)),
               label="prior (same density scale)"),
        Line2D([], [], marker="|", ls="", ms=11, mew=1.3, color=_MEDIAN["color"],
               label="posterior median (vertical line)"),
        Line2D([], [], marker="|", ls="", ms=11, mew=0.9, color=_QUANTILE["color"],
               label="16 and 84 % quantiles (dashed vertical lines)"),
    ]
    if ndim == 1:
        return handles + [top], [h.get_label() for h in handles] + ["MAP (top edge)"], {}
    handles.append(Patch(color=style.POSTERIOR, alpha=0.6,
                         label="39 % and 86 % regions (1σ, 2σ in 2-D)"))
    diamond = Line2D([], [], color=style.MAP, marker="D", ls="", mec="white", ms=6)
    labels = [h.get_label() for h in handles]
    labels.append("MAP (on the top edge in 1-D; a point in 2-D)")
    return handles + [(top, diamond)], labels, {tuple: HandlerTuple(ndivide=None, pad=0.6)}


# ---- fit --------------------------------------------------------------------------------

#: Kinds whose rows are pressures and temperatures, drawn alike (basalt_analyses: derived).

def fit_figure(posterior, *, ndraws: int = 200) -> Figure:
    """Observations against the posterior predictive distribution of `ndraws` draws.

    One row per `Panel` of each block (`ObservationSet.panels`); a block that observes
    pressures with temperatures (`ObservationSet.pt_observed`) also gets a P-T panel
    below its rows, with each sample's 1-sigma error ellipse. The figure is a journal
    page wide (`DOUBLE_COLUMN`), so every panel takes the full width.
    """
    column = posterior.logpost.column(posterior.predictive_draws(ndraws))
    blocks = list(posterior.study.observations)
    errors = _median_errors(posterior)
    panels = [block.panels() for block in blocks]
    patterns = [block.pattern_panels(column) for block in blocks]
    joint = [_joint_data(block, column, e) for block, e in zip(blocks, errors, strict=True)]
    heights = []
    for block_panels, block_patterns, pt in zip(panels, patterns, joint, strict=True):
        heights += [1.0] * (len(block_panels) + len(block_patterns))
        heights += [1.6] if pt is not None else []
    fig = Figure(figsize=(DOUBLE_COLUMN, 1.0 + 3.0 * sum(heights)), layout="constrained")
    grid = fig.add_gridspec(len(heights), 1, height_ratios=heights)
    first, placers = 0, []
    for block, block_panels, block_patterns, pt, block_errors in zip(
            blocks, panels, patterns, joint, errors, strict=True):
        for panel in block_panels:
            _draw_fit_panel(fig.add_subplot(grid[first, 0]),
                            **_fit_panel(block, panel, column, block_errors,
                                         model=posterior.study.model),
                            legend_columns=2)
            first += 1
        for pattern in block_patterns:
            _draw_pattern_panel(fig.add_subplot(grid[first, 0]), pattern,
                                title=f"{block.name}: {pattern.title}")
            first += 1
        if pt is not None:
            placers.append(_draw_joint_panel(fig.add_subplot(grid[first, 0]), block, **pt))
            first += 1
    fig.suptitle(textwrap.fill(
        f"{posterior.study.name}: observations against the posterior predictive "
        f"distribution ({column.melt_thickness.shape[0]} draws)", width=80), fontsize=10)
    if placers:  # sample labels are placed once the layout is fixed (one extra render)
        FigureCanvasAgg(fig).draw()
        for place in placers:
            place(fig.canvas.get_renderer())
    return fig


def _median_errors(posterior) -> list[dict[str, float]]:
    """Posterior median of each block's free model errors (for the error bars)."""
    medians = posterior.samples.median(numeric_only=True)
    out = [{} for _ in posterior.study.observations]
    for error in posterior.logpost.errors:
        out[error.block][error.option] = float(medians[error.name])
    return out


def _bar_label(block, panel, errors: dict[str, float]) -> str:
    unit = unit_text(panel.unit)
    option = panel.error_option

    def size(value: float, digits: str) -> str:
        return (f"{100 * value:{digits}} % (relative)" if panel.relative_error
                else f"{value:{digits}} {unit}")

    if option in errors:
        return (f"observed ± 1σ, incl. model error {size(errors[option], '.2g')} "
                "(free; posterior median)")
    if getattr(block, option, 0.0):
        return f"observed ± 1σ, incl. model error {size(getattr(block, option), 'g')}"
    return "observed ± 1σ (measurement only; no model error)"


def _fit_panel(block, panel, column, errors: dict[str, float], *, model=None) -> dict:
    """What one per-row panel shows: labels, observations and the predicted points.

    The error bars include the model error; a free one at its posterior median. A crust
    panel's title says what was fitted: the crust made from the melt (with the density
    ratio of `model`, the study's ModelSettings) or the melt thickness itself.
    """
    observed = block.observed(errors)
    points, weights = block.panel_draws(column, panel.key)
    return dict(names=list(block.ids), obs=observed[panel.key],
                sigma=observed[panel.sigma_key], points=points, weights=weights,
                ylabel=panel.label, bar_label=_bar_label(block, panel, errors),
                model_label=panel.model, invert=panel.invert, log=panel.log,
                title=f"{block.name}: {panel.title}"
                + _reading_note(getattr(block, "thickness_of", None), model))


def _reading_note(thickness_of: str | None, model) -> str:
    """What a thickness panel compares with (no note for other quantities)."""
    if model is None or thickness_of is None:
        return ""
    if thickness_of == "melt":
        return " (melt itself, no density conversion)"
    ratio = model.mantle_density / model.crust_density
    return (f" (crust = melt × ρ_mantle/ρ_crust = melt × {ratio:.3f}, "
            f"{model.mantle_density:g}/{model.crust_density:g} kg/m³)")


def _weighted_quantiles(points, weights, qs) -> np.ndarray:
    """Quantiles `qs` over draws and candidate points, per row; shape (len(qs), rows)."""
    n = points.shape[0]
    flat_p = np.moveaxis(points, 1, 0).reshape(points.shape[1], -1)
    flat_w = np.moveaxis(weights / n, 1, 0).reshape(points.shape[1], -1)
    out = np.empty((len(qs), flat_p.shape[0]))
    for r in range(flat_p.shape[0]):
        order = np.argsort(flat_p[r])
        cdf = np.cumsum(flat_w[r][order])
        out[:, r] = np.interp(np.asarray(qs) * cdf[-1], cdf, flat_p[r][order])
    return out


def _draw_fit_panel(ax, *, names, obs, sigma, points, weights, ylabel, title, bar_label,
                    model_label, invert=False, log=False, legend_columns=4):
    x = np.arange(len(names))
    lo95, lo68, med, hi68, hi95 = _weighted_quantiles(points, weights,
                                                      [0.025, 0.16, 0.5, 0.84, 0.975])
    width = 0.34
    handles = [
        ax.bar(x, hi95 - lo95, bottom=lo95, width=2 * width, color=style.POSTERIOR,
               alpha=0.18, label=f"{model_label}: 95 % range"),
        ax.bar(x, hi68 - lo68, bottom=lo68, width=2 * width, color=style.POSTERIOR,
               alpha=0.4, label="68 % range"),
        ax.hlines(med, x - width, x + width, color=style.POSTERIOR, lw=2.0, label="median"),
        ax.errorbar(x, obs, yerr=sigma, zorder=5, label=bar_label, **style.OBSERVED),
    ]
    ax.set_xticks(x, names, rotation=30, ha="right", fontsize=8)
    ax.set_xlim(-0.7, len(names) - 0.3)
    ax.set_ylabel(ylabel)
    ax.grid(axis="y", alpha=0.3, lw=0.5)
    if log:
        plotting.plain_log_axis(ax)
    if invert:
        ax.invert_yaxis()
    for handle in handles:  # two legend columns in a journal page's width
        handle.set_label(textwrap.fill(handle.get_label(), width=52))
    # The panel title heads its legend, so the two never overlap.
    ax.legend(handles=handles, fontsize=7, loc="lower left", bbox_to_anchor=(0.0, 1.0),
              ncols=legend_columns, frameon=False, title=textwrap.fill(title, width=100),
              title_fontsize=8.5, alignment="left", borderaxespad=0.2)


def _draw_pattern_panel(ax, pattern, *, title: str) -> None:
    """A model pattern over named items: median line with 68 % and 95 % bands."""
    x = np.arange(len(pattern.items))
    lo95, lo68, med, hi68, hi95 = np.quantile(pattern.draws,
                                              [0.025, 0.16, 0.5, 0.84, 0.975], axis=0)
    handles = [
        ax.fill_between(x, lo95, hi95, color=style.POSTERIOR, alpha=0.18, lw=0,
                        label=f"{pattern.model}: 95 % range"),
        ax.fill_between(x, lo68, hi68, color=style.POSTERIOR, alpha=0.4, lw=0,
                        label="68 % range"),
        ax.plot(x, med, "-o", color=style.POSTERIOR, lw=2.0, ms=3.5, label="median")[0],
    ]
    ax.set_xticks(x, pattern.items, fontsize=8)
    ax.set_xlim(-0.5, len(x) - 0.5)
    ax.set_ylabel(pattern.label)
    ax.grid(axis="y", alpha=0.3, lw=0.5)
    if pattern.log:
        plotting.plain_log_axis(ax)
    ax.legend(handles=handles, fontsize=7, loc="lower left", bbox_to_anchor=(0.0, 1.0),
              ncols=3, frameon=False, title=textwrap.fill(title, width=100),
              title_fontsize=8.5, alignment="left", borderaxespad=0.2)


def _joint_data(block, column, errors, *, per_draw: int = 40) -> dict | None:
    """Observed P-T with their ellipses and sampled model points, or None."""
    observed = block.pt_observed(errors)
    draws = block.pt_draws(column)
    if observed is None or "temperature" not in observed or draws is None \
            or draws[1] is None:
        return None
    pressure, temperature, weight = draws
    rng = np.random.default_rng(0)  # only picks plotted points; the figure is reproducible
    picks = [rng.choice(weight.shape[1], size=per_draw, p=w / w.sum()) for w in weight]
    return dict(observed=observed,
                p=np.concatenate([pressure[i, k] for i, k in enumerate(picks)]),
                t=np.concatenate([temperature[i, k] for i, k in enumerate(picks)]))


def _draw_joint_panel(ax, block, *, observed, p, t):
    """Each sample's P and T together against the predicted P-T distribution.

    Returns the function that places the sample labels once the layout is fixed.
    """
    ax.plot(t, p, ".", color=style.POSTERIOR, ms=2, alpha=0.12, zorder=1)
    outlines, markers = _draw_pt_ellipses(ax, observed, label=None)
    ax.invert_yaxis()
    ax.set_xlabel(quantity("temperature").axis_label())
    ax.set_ylabel(quantity("pressure").axis_label())
    ax.set_title(f"{block.name}: P and T of each sample together\n"
                 "dots: where the model melts equilibrate (posterior draws)\n"
                 "ellipses: observed ± 1σ, tilted by correlated P-T errors",
                 fontsize=8.5, loc="left")
    ax.grid(alpha=0.3, lw=0.5)
    labels = [ax.annotate(name, (tx, py), xytext=(4, 3), textcoords="offset points",
                          fontsize=6.5, color=style.INK)
              for name, tx, py in zip(block.ids, observed["temperature"],
                                      observed["pressure"], strict=True)]
    return lambda renderer: place_labels(ax, labels, outlines, markers, renderer)


def _ellipse_xy(x, y, sx, sy, rho, num: int = 64) -> tuple[np.ndarray, np.ndarray]:
    """The 1-sigma ellipse of a bivariate normal, as a closed polygon (data units).

    Points c + L (cos t, sin t) with L the Cholesky factor of the covariance
    [[sx^2, rho sx sy], [rho sx sy, sy^2]]: the set where the Mahalanobis distance is 1.
    Its extent along each axis is exactly ± the marginal sigma (common practice).
    """
    t = np.linspace(0.0, 2.0 * np.pi, num)
    u, v = np.cos(t), np.sin(t)
    return x + sx * u, y + sy * (rho * u + np.sqrt(1.0 - rho * rho) * v)


def _draw_pt_ellipses(ax, observed, *, label: str | None) -> tuple[list, Line2D]:
    """Each observed P-T point with its 1-sigma error ellipse (correlation included).

    Returns the ellipse outlines (one Line2D per sample) and the markers (one Line2D).
    """
    rho = observed.get("correlation", np.zeros_like(observed["pressure"]))
    outlines = []
    for k, (t, p, st, sp, r) in enumerate(zip(
            observed["temperature"], observed["pressure"], observed["temperature_sigma"],
            observed["pressure_sigma"], rho, strict=True)):
        ex, ey = _ellipse_xy(t, p, st, sp, r)
        ax.fill(ex, ey, color=style.INK, alpha=0.07, lw=0, zorder=5)
        outlines += ax.plot(ex, ey, color=style.INK, lw=0.9, zorder=5,
                            label=label if k == 0 else None)
    markers, = ax.plot(observed["temperature"], observed["pressure"], ls="", marker="D",
                       ms=4.5, mfc="white", mec=style.INK, mew=1.0, zorder=6)
    return outlines, markers


# ---- P-T --------------------------------------------------------------------------------

def pt_figure(posterior, *, ndraws: int = 120, num: int = 48) -> Figure:
    """P-T diagram: melting curves and path at the MAP, draws' paths, lid, observations."""
    study = posterior.study
    draws = posterior.predictive_draws(ndraws)
    column = posterior.logpost.column(draws)
    path = column.path(num=num)
    at_map = _at_map(posterior)
    max_p = _max_pressure(column, study.observations)
    fig = Figure(figsize=(DOUBLE_COLUMN, 6.4), layout="constrained")
    ax = fig.subplots()
    plotting.draw_pt_diagram(ax, study.model.parameterization, water=at_map["water"],
                             solidus_offset=at_map["solidus_offset"], max_pressure=max_p,
                             temperature_range=_temperature_range(path, study.observations))
    _draw_lid_band(ax, posterior, study.model.mantle_density)
    _draw_paths(ax, path, column)
    map_column = posterior.logpost.column(np.array([[posterior.map[n]
                                                     for n in posterior.names]]))
    plotting.draw_melting_path(ax, map_column, 0, color=style.MAP, max_pressure=max_p,
                               label="melting path at the MAP, Tp " + quantity(
                                   "potential_temperature").with_value(
                                   at_map["potential_temperature"]))
    _draw_observed_pt(ax, study.observations, _median_errors(posterior))
    plotting.add_depth_axis(ax, study.model.mantle_density)
    ax.set_ylim(max_p, 0.0)
    ax.legend(*plotting.visible_legend_entries(ax), loc="lower left", fontsize=7.5,
              framealpha=0.92)
    plotting.label_contours(ax)
    # Wrapped to the axes' width: a scenario's study name ("<study>: scenario <name>")
    # is long enough to run off both edges.
    ax.set_title(textwrap.fill(f"{study.name}: melting paths of {draws.shape[0]} posterior "
                               "draws", width=_PT_TITLE_CHARS) + "\n"
                 + textwrap.fill(_curve_note(posterior, at_map), width=_PT_TITLE_CHARS),
                 fontsize=9)
    return fig


_PT_TITLE_CHARS = 95  # characters of 9 pt text across the P-T axes (6.4 in; measured)


def _at_map(posterior) -> dict[str, float]:
    """Every melt_column input at the MAP (fixed ones at their values)."""
    values = {name: float(value) for name, value in posterior.study.fixed.items()}
    values.update({name: float(posterior.map[name]) for name in posterior.names})
    return values


def _curve_note(posterior, at_map) -> str:
    param = forward.get_parameterization(posterior.study.model.parameterization).title

    def value(name):
        how = "MAP" if name in posterior.names else "fixed"
        return f"{quantity(name).with_value(at_map[name])} ({how})"

    return (f"curves and bold path: {param}, water {value('water')}, solidus offset "
            f"{value('solidus_offset')}; thin paths: each draw's own values")


def _draw_paths(ax, path, column) -> None:
    melt = np.asarray(column.produces_melt)
    for i in np.flatnonzero(melt):
        ax.plot(path.temperature[i], path.pressure[i], color=style.POSTERIOR, lw=0.8,
                alpha=0.14, zorder=2)
    ax.plot([], [], color=style.POSTERIOR, lw=1.5, alpha=0.6,
            label="melting paths of posterior draws")


def _draw_lid_band(ax, posterior, mantle_density) -> None:
    km = float(forward.depth_per_pressure(mantle_density))
    if "lithosphere_thickness" not in posterior.names:
        lid = float(posterior.study.fixed["lithosphere_thickness"])
        if lid > 0:
            plotting.draw_lid(ax, lid / km, label=f"lid base {lid:g} km (fixed)")
        return
    # the numbers of summary.csv and report.md (every kept step, not the thinned samples)
    row = posterior.summary().set_index("parameter").loc["lithosphere_thickness"]
    lo, med, hi = (float(row[q]) for q in ("q16", "median", "q84"))
    d = decimals(float(row["sd"]))
    ax.axhspan(lo / km, hi / km, color=style.LID, alpha=0.16, lw=0, zorder=1,
               label=f"lid base, 68 % range {lo:.{d}f} to {hi:.{d}f} km")
    plotting.draw_lid(ax, med / km, label=f"lid base, posterior median {med:.{d}f} km")


def _draw_observed_pt(ax, blocks, errors) -> None:
    labelled = {"points": False, "bands": False}
    for block, block_errors in zip(blocks, errors, strict=True):
        obs = block.pt_observed(block_errors)
        if obs is None:
            continue
        if "temperature" in obs:
            _draw_pt_ellipses(ax, obs, label=None if labelled["points"] else
                              "observed P and T, 1σ ellipse (correlated errors tilt it)")
            labelled["points"] = True
            continue
        for value, sigma in zip(obs["pressure"], obs["pressure_sigma"], strict=True):
            ax.axhspan(value - sigma, value + sigma, color=style.INK, alpha=0.07, lw=0,
                       zorder=1, label=None if labelled["bands"] else
                       "observed pressure ± 1σ (GPa), no temperature measured")
            ax.axhline(value, color=style.INK, lw=0.7, alpha=0.6, zorder=1)
            labelled["bands"] = True


def _max_pressure(column, blocks) -> float:
    deepest = float(np.nanquantile(column.onset_pressure, 0.975))
    for block in blocks:
        obs = block.pt_observed()
        if obs is not None:
            deepest = max(deepest, float(np.max(obs["pressure"] + 2 * obs["pressure_sigma"])))
    return float(np.clip(np.ceil(deepest * 1.15 * 2) / 2, 1.0, float(forward.MAX_PRESSURE)))


def _temperature_range(path, blocks) -> tuple[float, float]:
    temps = path.temperature[np.asarray(path.weight).sum(axis=-1) > 0]
    low = float(np.nanmin(temps)) if temps.size else 1200.0
    high = float(np.nanmax(temps)) if temps.size else 1500.0
    for block in blocks:
        obs = block.pt_observed()
        if obs is not None and "temperature" in obs:
            t, s = obs["temperature"], obs["temperature_sigma"]
            low, high = min(low, float(np.min(t - 2 * s))), max(high, float(np.max(t + 2 * s)))
    return (np.floor((low - 120.0) / 50) * 50, np.ceil((high + 80.0) / 50) * 50)
