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

import io
import textwrap

import corner
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ... import forward
from ...forward import figure_style as style
from ...forward import plotting
from ...forward.quantities import quantity, unit_text
from .report import decimals, estimate

__all__ = ["corner_figure", "figure_files", "fit_figure", "pt_figure"]

_DPI = 150
_INCH_FOR_LABELS = 0.95  # room left and below the corner grid for tick and axis labels


def figure_files(posterior) -> dict[str, bytes]:
    """The PNG bytes of corner.png, fit.png and pt.png of `posterior`, in that order."""
    files = {}
    for name, make in (("corner.png", corner_figure), ("fit.png", fit_figure),
                       ("pt.png", pt_figure)):
        buffer = io.BytesIO()
        make(posterior).savefig(buffer, format="png", dpi=_DPI, metadata={"Software": None})
        files[name] = buffer.getvalue()
    return files


# ---- corner -----------------------------------------------------------------------------

def corner_figure(posterior) -> Figure:
    """Marginals of the free parameters: priors, median, 68 % interval and MAP marked."""
    names, units = posterior.names, posterior.logpost.units
    ndim = len(names)
    kept = posterior.chain[posterior.discard:: posterior.thin].reshape(-1, ndim)
    size = max(5.0, 2.3 * ndim + _INCH_FOR_LABELS + 0.3)
    fig = Figure(figsize=(size, size + 0.5))
    corner.corner(
        kept, fig=fig, labels=[quantity(n, unit=units[n]).axis_label(short=True)
                               for n in names],
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
    height = size + 0.5
    left, bottom, right, top = (_INCH_FOR_LABELS / size, _INCH_FOR_LABELS / height,
                                1 - 0.25 / size, 1 - 0.9 / height)
    fig.subplots_adjust(left=left, bottom=bottom, right=right, top=top, wspace=0.06,
                        hspace=0.06)
    # Axis labels at a fixed distance in inches, inside the margins left for them.
    cell_w, cell_h = size * (right - left) / ndim, height * (top - bottom) / ndim
    for k in range(ndim):
        axes[k, 0].yaxis.set_label_coords(-0.75 / cell_w, 0.5)
        axes[ndim - 1, k].xaxis.set_label_coords(0.5, -0.72 / cell_h)
    fig.legend(handles=_corner_legend(ndim), loc="upper right", fontsize=8, frameon=False,
               bbox_to_anchor=(1 - 0.08 / size, 1 - 0.08 / height))
    fig.suptitle(f"{posterior.study.name}\nposterior of the free parameters",
                 fontsize=10, x=0.02, ha="left", y=1 - 0.12 / height, va="top")
    return fig


def _mark_marginal(ax, row, prior, map_value) -> None:
    """Prior density, median (solid), 16/84 % (dashed), MAP tick and the estimate."""
    x = np.linspace(*ax.get_xlim(), 400)
    density = np.exp(prior.logpdf(x))
    ax.plot(x, density, color=style.PRIOR, lw=1.4, ls=(0, (4, 2)), zorder=4)
    ax.set_ylim(0, max(ax.get_ylim()[1], 1.1 * float(np.max(density))))
    ax.axvline(row["median"], color=style.POSTERIOR, lw=1.4, zorder=5)
    for q in ("q16", "q84"):
        ax.axvline(row[q], color=style.POSTERIOR, lw=1.0, ls=(0, (3, 2)), zorder=5)
    # The MAP as a marker on the top edge, so the median line stays visible.
    ax.plot(map_value, 1.0, "v", color=style.MAP, ms=8, mec="white", mew=0.8, zorder=7,
            transform=ax.get_xaxis_transform(), clip_on=False)
    ax.set_title(estimate(row), fontsize=9, pad=9)


def _corner_legend(ndim: int):
    handles = [
        Line2D([], [], color=style.POSTERIOR, lw=1.3, label="posterior (density)"),
        Line2D([], [], color=style.PRIOR, lw=1.4, ls=(0, (4, 2)),
               label="prior (same density scale)"),
        Line2D([], [], color=style.POSTERIOR, lw=1.4, label="median"),
        Line2D([], [], color=style.POSTERIOR, lw=1.0, ls=(0, (3, 2)),
               label="16 and 84 % quantiles"),
        Line2D([], [], color=style.MAP, marker="v", ls="", ms=7, label="MAP (top edge)"),
    ]
    if ndim > 1:
        handles += [
            Patch(color=style.POSTERIOR, alpha=0.6, label="39 % and 86 % regions "
                  "(1σ, 2σ in 2-D)"),
            Line2D([], [], color=style.MAP, marker="D", ls="", mec="white", ms=6,
                   label="MAP"),
        ]
    return handles


# ---- fit --------------------------------------------------------------------------------

#: Kinds whose rows are pressures and temperatures, drawn alike (basalt_analyses: derived).
_PT_KINDS = ("melting_pressure", "basalt_analyses")

def fit_figure(posterior, *, ndraws: int = 200) -> Figure:
    """Observations against the posterior predictive distribution of `ndraws` draws."""
    column = posterior.logpost.column(posterior.predictive_draws(ndraws))
    blocks = list(posterior.study.observations)
    joint = [b.kind in _PT_KINDS and b.has_temperature for b in blocks]
    fig = Figure(figsize=(13.0 if any(joint) else 10.0, 0.9 + 3.3 * len(blocks)),
                 layout="constrained")
    grid = fig.add_gridspec(len(blocks), 5 if any(joint) else 1)
    errors = _median_errors(posterior)
    for row, (block, both) in enumerate(zip(blocks, joint, strict=True)):
        ax = fig.add_subplot(grid[row, :3] if both else grid[row, :])
        _draw_fit_panel(ax, **_fit_panel(block, column, errors[row]),
                        legend_columns=2 if any(joint) else 4)
        if both:
            _draw_joint_panel(fig.add_subplot(grid[row, 3:]), block, column, errors[row])
    fig.suptitle(f"{posterior.study.name}: observations against the posterior predictive "
                 f"distribution ({column.melt_thickness.shape[0]} draws)", fontsize=11)
    return fig


def _median_errors(posterior) -> list[dict[str, float]]:
    """Posterior median of each block's free model errors (for the error bars)."""
    medians = posterior.samples.median(numeric_only=True)
    out = [{} for _ in posterior.study.observations]
    for error in posterior.logpost.errors:
        out[error.block][error.option] = float(medians[error.name])
    return out


def _bar_label(block, errors: dict[str, float]) -> str:
    unit = unit_text(block.unit)
    if "model_error" in errors:
        return (f"observed ± 1σ, incl. model error {errors['model_error']:.2g} {unit} "
                "(free; posterior median)")
    if block.model_error > 0:
        return f"observed ± 1σ, incl. model error {block.model_error:g} {unit}"
    return "observed ± 1σ (measurement only; no model error)"


def _fit_panel(block, column, errors: dict[str, float]) -> dict:
    """What one per-row panel shows: labels, observations and the predicted points.

    The error bars include the model error; a free one at its posterior median.
    """
    observed = block.observed(errors)
    common = dict(names=list(block.ids), obs=observed["value"], sigma=observed["sigma"])
    if block.kind == "crustal_thickness":
        key = "crustal_thickness" if block.thickness_of == "crust" else "melt_thickness"
        values = np.asarray(block.predict(column)["value"], float)
        return common | dict(
            points=values[..., None], weights=np.ones(values.shape + (1,)),
            ylabel=quantity(key).axis_label(), bar_label=_bar_label(block, errors),
            model_label=f"model {quantity(key).name}",
            title=f"{block.name}: thickness against the model {quantity(key).name}")
    pressure, _, weight = block.equilibration_points(column)
    how = {"top": "at the top of melting", "pooled": "at the mean melting pressure",
           "path": "anywhere on the melting path, weighted by melt production"}
    model = ("model, where the melts equilibrate along the path" if
             block.equilibration == "path" else "model equilibration pressure")
    return common | dict(
        points=np.repeat(pressure[:, None, :], len(block), axis=1),
        weights=np.repeat(weight[:, None, :], len(block), axis=1),
        ylabel=quantity("pressure").axis_label(), bar_label=_bar_label(block, errors),
        model_label=model, invert=True,
        title=f"{block.name}: melting pressure, equilibrated {how[block.equilibration]}")


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
                    model_label, invert=False, legend_columns=4):
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
    ax.set_title(title, fontsize=9, loc="left")
    ax.grid(axis="y", alpha=0.3, lw=0.5)
    if invert:
        ax.invert_yaxis()
    ax.legend(handles=handles, fontsize=7.5, loc="lower left", bbox_to_anchor=(0.0, 1.06),
              ncols=legend_columns,
              frameon=False)


def _draw_joint_panel(ax, block, column, errors, *, per_draw: int = 40) -> None:
    """Each sample's P and T together against the predicted P-T distribution."""
    pressure, temperature, weight = block.equilibration_points(column)
    rng = np.random.default_rng(0)  # only picks plotted points; the figure is reproducible
    picks = [rng.choice(weight.shape[1], size=per_draw, p=w / w.sum()) for w in weight]
    p = np.concatenate([pressure[i, k] for i, k in enumerate(picks)])
    t = np.concatenate([temperature[i, k] for i, k in enumerate(picks)])
    ax.plot(t, p, ".", color=style.POSTERIOR, ms=2, alpha=0.12, zorder=1)
    obs = block.observed(errors)
    ax.errorbar(obs["temperature"], obs["value"], xerr=obs["temperature_sigma"],
                yerr=obs["sigma"], zorder=5, **style.OBSERVED)
    for name, tx, py in zip(block.ids, obs["temperature"], obs["value"], strict=True):
        ax.annotate(name, (tx, py), xytext=(4, 3), textcoords="offset points", fontsize=6.5,
                    color=style.INK)
    ax.invert_yaxis()
    ax.set_xlabel(quantity("temperature").axis_label())
    ax.set_ylabel(quantity("pressure").axis_label())
    ax.set_title(f"{block.name}: P and T of each sample together\n"
                 "dots: where the model melts equilibrate (posterior draws)",
                 fontsize=8.5, loc="left")
    ax.grid(alpha=0.3, lw=0.5)


# ---- P-T --------------------------------------------------------------------------------

def pt_figure(posterior, *, ndraws: int = 120, num: int = 48) -> Figure:
    """P-T diagram: melting curves and path at the MAP, draws' paths, lid, observations."""
    study = posterior.study
    draws = posterior.predictive_draws(ndraws)
    column = posterior.logpost.column(draws)
    path = column.path(num=num)
    at_map = _at_map(posterior)
    max_p = _max_pressure(column, study.observations)
    fig = Figure(figsize=(7.8, 6.8), layout="constrained")
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
    ax.set_title(f"{study.name}: melting paths of {draws.shape[0]} posterior draws\n"
                 + textwrap.fill(_curve_note(posterior, at_map), width=95), fontsize=9)
    return fig


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
    lid = posterior.samples["lithosphere_thickness"].to_numpy()
    lo, med, hi = np.quantile(lid, [0.16, 0.5, 0.84])
    d = decimals(float(np.std(lid)))
    ax.axhspan(lo / km, hi / km, color=style.LID, alpha=0.16, lw=0, zorder=1,
               label=f"lid base, 68 % range {lo:.{d}f} to {hi:.{d}f} km")
    plotting.draw_lid(ax, med / km, label=f"lid base, posterior median {med:.{d}f} km")


def _draw_observed_pt(ax, blocks, errors) -> None:
    labelled = {"points": False, "bands": False}
    for block, block_errors in zip(blocks, errors, strict=True):
        if block.kind not in _PT_KINDS:
            continue
        obs = block.observed(block_errors)
        if "temperature" in obs:
            ax.errorbar(obs["temperature"], obs["value"], xerr=obs["temperature_sigma"],
                        yerr=obs["sigma"], zorder=6, **style.OBSERVED,
                        label=None if labelled["points"] else
                        "observed P ± 1σ (GPa) and T ± 1σ (°C)")
            labelled["points"] = True
            continue
        for value, sigma in zip(obs["value"], obs["sigma"], strict=True):
            ax.axhspan(value - sigma, value + sigma, color=style.INK, alpha=0.07, lw=0,
                       zorder=1, label=None if labelled["bands"] else
                       "observed pressure ± 1σ (GPa), no temperature measured")
            ax.axhline(value, color=style.INK, lw=0.7, alpha=0.6, zorder=1)
            labelled["bands"] = True


def _max_pressure(column, blocks) -> float:
    deepest = float(np.nanquantile(column.onset_pressure, 0.975))
    for block in blocks:
        if block.kind in _PT_KINDS:
            obs = block.observed()
            deepest = max(deepest, float(np.max(obs["value"] + 2 * obs["sigma"])))
    return float(np.clip(np.ceil(deepest * 1.15 * 2) / 2, 1.0, float(forward.MAX_PRESSURE)))


def _temperature_range(path, blocks) -> tuple[float, float]:
    temps = path.temperature[np.asarray(path.weight).sum(axis=-1) > 0]
    low = float(np.nanmin(temps)) if temps.size else 1200.0
    high = float(np.nanmax(temps)) if temps.size else 1500.0
    for block in blocks:
        obs = block.observed()
        if "temperature" in obs:
            t, s = obs["temperature"], obs["temperature_sigma"]
            low, high = min(low, float(np.min(t - 2 * s))), max(high, float(np.max(t + 2 * s)))
    return (np.floor((low - 120.0) / 50) * 50, np.ceil((high + 80.0) / 50) * 50)
