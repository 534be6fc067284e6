"""Figures of a posterior: corner.png, fit.png and pt.png.

* `corner_figure`: one- and two-dimensional marginals of the free parameters (corner).
* `fit_figure`: every observation with its error bar against the model prediction of
  posterior draws (median, 68 % and 95 % ranges), one panel per observed quantity.
* `pt_figure`: pressure-temperature diagram with the melting curves of the chosen
  parameterization, melting paths of posterior draws, the posterior lid base and the
  observed P-T points with error bars.

Every function returns a matplotlib Figure and does not touch pyplot's global state, so
it is safe to call from scripts and tests (Agg backend).
"""

from __future__ import annotations

from pathlib import Path

import corner
import numpy as np
from matplotlib.figure import Figure

from .. import forward
from ..forward import plotting


__all__ = ["LABELS", "corner_figure", "fit_figure", "pt_figure", "save_figures"]

#: Axis label of every parameter and derived quantity, with units.
LABELS = {
    "potential_temperature": "Potential temperature $T_p$ (°C)",
    "lithosphere_thickness": "Lid thickness (km)",
    "water": "Source water (ppm H$_2$O)",
    "active_upwelling": "active upwelling (–)",
    "solidus_offset": "Solidus offset (°C)",
    "onset_depth": "Onset depth of melting (km)",
    "crustal_thickness": "Igneous crust thickness (km)",
    "mean_melt_fraction": "Mean melt fraction (–)",
    "mean_melting_pressure": "Mean melting pressure (GPa)",
}
_SHORT = {
    "potential_temperature": "$T_p$ (°C)",
    "lithosphere_thickness": "Lid (km)",
    "water": "H$_2$O (ppm)",
    "active_upwelling": "active upwelling",
    "solidus_offset": "Solidus offset (°C)",
}
_DPI = 150
_UNIT_TEXT = {"degC": "°C", "km": "km", "ppm": "ppm", "GPa": "GPa", "-": ""}


def save_figures(posterior, folder: str | Path) -> None:
    """Render corner.png, fit.png and pt.png of `posterior` into `folder`."""
    folder = Path(folder)
    for name, make in (("corner.png", corner_figure), ("fit.png", fit_figure),
                       ("pt.png", pt_figure)):
        fig = make(posterior)
        fig.savefig(folder / name, dpi=_DPI, metadata={"Software": None})


def corner_figure(posterior) -> Figure:
    """Corner plot of the free parameters, MAP marked, 16/50/84 % quantiles in titles."""
    ndim = len(posterior.names)
    kept = posterior.chain[posterior.discard:: posterior.thin].reshape(-1, ndim)
    size = max(3.6, 2.4 * ndim)
    fig = Figure(figsize=(size, size))
    corner.corner(
        kept, fig=fig, labels=[axis_label(posterior, n) for n in posterior.names],
        quantiles=[0.16, 0.5, 0.84], show_titles=False, label_kwargs={"fontsize": 11},
        truths=[posterior.map[n] for n in posterior.names], truth_color="tab:red",
        levels=(0.393, 0.865), plot_datapoints=False, fill_contours=True, color="#1f4e79",
        smooth=1.0, bins=30, max_n_ticks=4,
    )
    diagonal = np.array(fig.axes).reshape(ndim, ndim).diagonal()
    for ax, (_, row) in zip(diagonal, posterior.summary().iterrows(), strict=True):
        ax.set_title(_title(row), fontsize=9.5)
    fig.suptitle(f"{posterior.study.name}: posterior of the free parameters\n"
                 "contours enclose 39 % and 86 % (1σ and 2σ in 2-D); red: MAP;\n"
                 "dashed: 16, 50 and 84 % quantiles", fontsize=9, y=0.995)
    # About an inch of title space whatever the figure size (5+ parameters with errors).
    fig.subplots_adjust(top=min(0.93, 1.0 - 1.0 / size) if ndim > 1 else 0.7, left=0.14,
                        bottom=0.12)
    return fig


def axis_label(posterior, name: str) -> str:
    """Short axis label of a free parameter, with unit (free model errors included)."""
    if name in _SHORT:
        return _SHORT[name]
    error = next(e for e in posterior.logpost.errors if e.name == name)
    block = error.name.rsplit(".", 1)[0]
    what = {"temperature_model_error": " T", "model_error": {
        "GPa": " P"}.get(error.unit, "")}[error.option]
    return f"Model error,\n{block}{what} ({_UNIT_TEXT.get(error.unit, error.unit)})"


def _title(row) -> str:
    from .report import _decimals

    d = _decimals(row["sd"])
    med = row["median"]
    return (f"{med:.{d}f}$^{{+{row['q84'] - med:.{d}f}}}_{{-{med - row['q16']:.{d}f}}}$ "
            f"{_UNIT_TEXT.get(row['unit'], '')}")


def fit_figure(posterior, *, ndraws: int = 200) -> Figure:
    """Observations against the model predictions of `ndraws` posterior draws."""
    column = posterior.logpost.column(posterior.predictive_draws(ndraws))
    panels = list(_fit_panels(posterior.study.observations, column,
                              _median_errors(posterior)))
    fig = Figure(figsize=(10.0, 0.6 + 2.6 * len(panels)), layout="constrained")
    axes = fig.subplots(len(panels), 1, squeeze=False)[:, 0]
    for ax, panel in zip(axes, panels, strict=True):
        _draw_fit_panel(ax, **panel)
    fig.suptitle(f"{posterior.study.name}: observations and posterior model predictions",
                 fontsize=11)
    return fig


def _median_errors(posterior) -> list[dict[str, float]]:
    """Posterior median of each block's free model errors (for the error bars)."""
    medians = posterior.samples.median(numeric_only=True)
    out = [{} for _ in posterior.study.observations]
    for error in posterior.logpost.errors:
        out[error.block][error.option] = float(medians[error.name])
    return out


def _fit_panels(blocks, column, errors):
    """One panel per observed quantity: labels, observed values/sigmas, predictions.

    Error bars include the model errors, free ones at their posterior median.
    """
    for block, block_errors in zip(blocks, errors, strict=True):
        observed = block.observed(block_errors)
        predicted = block.predict(column)
        names = list(block.ids)
        if block.kind == "crustal_thickness":
            target = f"{block.thickness_of} thickness"
            label = "Igneous crust (km)" if block.thickness_of == "crust" else "Melt (km)"
            yield dict(names=names, obs=observed["value"], sigma=observed["sigma"],
                       pred=predicted["value"], ylabel=label,
                       title=f"{block.name}: thickness against the model {target}")
            continue
        how = {"top": "at the top of melting", "pooled": "at the mean melting pressure",
               "path": "anywhere on the melting path"}[block.equilibration]
        interval = (predicted["low"], predicted["high"]) if block.equilibration == "path" \
            else None
        weighted = True if block.equilibration == "path" else None
        yield dict(names=names, obs=observed["value"], sigma=observed["sigma"],
                   pred=predicted["value"], ylabel="Pressure (GPa)", interval=interval,
                   title=f"{block.name}: melting pressure, equilibrated {how}", invert=True,
                   weighted=weighted)
        if "temperature" in observed and "temperature" in predicted:
            t_interval = None
            if block.equilibration == "path":
                path = column.path(num=16)
                rows = len(names)
                t_interval = tuple(np.repeat(np.asarray(t, float)[:, None], rows, axis=1)
                                   for t in (path.temperature[:, 0], path.temperature[:, -1]))
            yield dict(names=names, obs=observed["temperature"], interval=t_interval,
                       sigma=observed["temperature_sigma"], pred=predicted["temperature"],
                       ylabel="Temperature (°C)", weighted=weighted,
                       title=f"{block.name}: melting temperature, equilibrated {how}")


def _draw_fit_panel(ax, *, names, obs, sigma, pred, ylabel, title, interval=None,
                    invert=False, weighted=None):
    x = np.arange(len(names))
    pred = np.asarray(pred, dtype=float)
    lo95, lo68, med, hi68, hi95 = np.nanquantile(pred, [0.025, 0.16, 0.5, 0.84, 0.975], axis=0)
    width = 0.32
    if interval is not None:
        top, onset = (np.median(np.asarray(a, float), axis=0) for a in interval)
        ax.bar(x, onset - top, bottom=top, width=2.6 * width, color="tab:purple",
               alpha=0.12, label="along the melting path (top to onset), median")
    ax.bar(x, hi95 - lo95, bottom=lo95, width=2 * width, color="tab:blue", alpha=0.18,
           label="model, 95 % posterior range")
    ax.bar(x, hi68 - lo68, bottom=lo68, width=2 * width, color="tab:blue", alpha=0.38,
           label="model, 68 % range")
    centre = "model, median" if weighted is None else "model, melt-weighted mean"
    ax.hlines(med, x - width, x + width, color="tab:blue", lw=2.0, label=centre)
    ax.errorbar(x, obs, yerr=sigma, fmt="o", color="black", ms=4.5, capsize=3,
                label="observed ± 1σ (incl. model error)")
    ax.set_xticks(x, names, rotation=30, ha="right", fontsize=8)
    ax.set_xlim(-0.7, len(names) - 0.3)
    ax.set_ylabel(ylabel)
    ax.set_title(title, fontsize=9, loc="left")
    ax.grid(axis="y", alpha=0.3, lw=0.5)
    if invert:
        ax.invert_yaxis()
    ax.legend(fontsize=7.5, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)


def pt_figure(posterior, *, ndraws: int = 120, num: int = 48) -> Figure:
    """P-T diagram: melting curves, posterior melting paths, lid base, observed P-T."""
    study = posterior.study
    draws = posterior.predictive_draws(ndraws)
    column = posterior.logpost.column(draws)
    path = column.path(num=num)
    medians = posterior.samples.median(numeric_only=True)
    water = _central(posterior, medians, "water")
    shift = _central(posterior, medians, "solidus_offset")
    max_p = _max_pressure(column, study.observations)
    t_range = _temperature_range(path, study.observations)
    fig = Figure(figsize=(7.6, 6.4), layout="constrained")
    ax = fig.subplots()
    plotting.draw_pt_diagram(ax, study.model.parameterization, water=water,
                             solidus_offset=shift, max_pressure=max_p,
                             temperature_range=t_range)
    _label_contours(ax)
    _draw_lid_band(ax, posterior, study.model.mantle_density)
    _draw_paths(ax, path, column)
    map_column = posterior.logpost.column(
        np.array([[posterior.map[n] for n in posterior.names]]))
    plotting.draw_melting_path(ax, map_column, 0, color="tab:red", max_pressure=max_p,
                               label="melting path at the MAP (dotted: solid adiabat)")
    _draw_observed_pt(ax, study.observations, _median_errors(posterior))
    plotting.add_depth_axis(ax, study.model.mantle_density)
    ax.set_ylim(max_p, 0.0)
    handles, labels = _visible_legend_entries(ax)
    ax.legend(handles, labels, loc="lower left", fontsize=7.5, framealpha=0.9)
    note = _curve_note(posterior, water, shift)
    ax.set_title(f"{study.name}: melting paths of {draws.shape[0]} posterior draws\n{note}",
                 fontsize=9.5)
    return fig


def _label_contours(ax) -> None:
    """Legend entry for the melt-fraction contours drawn by forward.plotting."""
    from matplotlib.contour import ContourSet

    for artist in ax.get_children():
        if isinstance(artist, ContourSet):
            color = artist.get_edgecolor()[0]
            ax.plot([], [], color=color, lw=0.8, label="equilibrium melt fraction F")
            return


def _visible_legend_entries(ax):
    """Legend entries, leaving out curves that lie entirely outside the axes."""
    (x0, x1), (y1, y0) = ax.get_xlim(), ax.get_ylim()
    keep_h, keep_l = [], []
    for handle, label in zip(*ax.get_legend_handles_labels(), strict=True):
        # Only data-coordinate curves can fall outside (axhline spans the axes anyway).
        if (hasattr(handle, "get_xdata") and handle.get_transform() is ax.transData
                and len(handle.get_xdata())):
            x = np.asarray(handle.get_xdata(), float)
            y = np.asarray(handle.get_ydata(), float)
            if not np.any((x >= x0) & (x <= x1) & (y >= y0) & (y <= y1)):
                continue
        keep_h.append(handle)
        keep_l.append(label)
    return keep_h, keep_l


def _central(posterior, medians, name) -> float:
    if name in posterior.names:
        return float(medians[name])
    return float(posterior.study.fixed.get(name, 0.0))


def _curve_note(posterior, water, shift) -> str:
    param = forward.get_parameterization(posterior.study.model.parameterization).title

    def how(name):
        return "posterior median" if name in posterior.names else "fixed"

    return (f"curves: {param}, water {water:.0f} ppm ({how('water')}), solidus offset "
            f"{shift:+.1f} °C ({how('solidus_offset')})")


def _draw_paths(ax, path, column) -> None:
    melt = np.asarray(column.produces_melt)
    for i in np.flatnonzero(melt):
        ax.plot(path.temperature[i], path.pressure[i], color="tab:purple", lw=0.8, alpha=0.12,
                zorder=2)
    ax.plot([], [], color="tab:purple", lw=1.5, alpha=0.5,
            label="melting paths, posterior draws")


def _draw_lid_band(ax, posterior, mantle_density) -> None:
    km = float(forward.depth_per_pressure(mantle_density))
    if "lithosphere_thickness" in posterior.names:
        lid = posterior.samples["lithosphere_thickness"].to_numpy() / km
        lo, med, hi = np.quantile(lid, [0.16, 0.5, 0.84])
        ax.axhspan(0.0, med, color="0.85", alpha=0.5, lw=0, zorder=0)
        ax.axhspan(lo, hi, color="tab:green", alpha=0.25, lw=0, zorder=1,
                   label="lid base, 68 % posterior range")
        ax.axhline(med, color="tab:green", lw=1.2, ls="--", label="lid base, median")
    else:
        lid = float(posterior.study.fixed["lithosphere_thickness"]) / km
        plotting.draw_lid(ax, lid, color="tab:green", label="lid base (fixed)")


def _draw_observed_pt(ax, blocks, errors) -> None:
    first = True
    for block, block_errors in zip(blocks, errors, strict=True):
        if block.kind != "melting_pressure":
            continue
        obs = block.observed(block_errors)
        label = "observed P–T ± 1σ" if first else None
        if "temperature" in obs:
            ax.errorbar(obs["temperature"], obs["value"], xerr=obs["temperature_sigma"],
                        yerr=obs["sigma"], fmt="s", color="black", mfc="gold", ms=5,
                        capsize=2, lw=0.9, zorder=5, label=label)
        else:
            x = np.full(len(block), ax.get_xlim()[0] + 25.0)
            ax.errorbar(x, obs["value"], yerr=obs["sigma"], fmt="s", color="black",
                        mfc="gold", ms=4, capsize=2, lw=0.9, zorder=5,
                        label="observed pressure ± 1σ (no temperature)" if first else None)
        first = False


def _max_pressure(column, blocks) -> float:
    deepest = float(np.nanquantile(column.onset_pressure, 0.975))
    for block in blocks:
        if block.kind == "melting_pressure":
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
