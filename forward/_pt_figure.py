"""The P-T figure of ``lidmelt column --plot``: one panel per lid and melting-curve set."""

from __future__ import annotations

import numpy as np

from . import figure_style as style
from .adiabat import depth_per_pressure
from .column import melt_column
from .figure_output import save_figure
from .parameterizations import get_parameterization
from .plotting import (
    add_depth_axis,
    draw_lid,
    draw_melting_path,
    draw_pt_diagram,
    label_contours,
    visible_legend_entries,
)
from .quantities import quantity

__all__ = ["save_figure_atomically", "write_column_figure"]

_MAX_PANELS = 6
_MAX_PATHS = 8
_NOTE = ("Thick line: melting path, from the ring where melting starts up to the lid base; "
         "dotted thin line: solid adiabat of the same Tp. Each panel has its own lid (dotted "
         "violet line, pale band above).\nScientific estimate: depends on the melting "
         "parameterization. Colours and line styles: docs/figures.md.")


def _panels(rows):
    """Rows grouped by melting curves and lid: each path is drawn against its own lid."""
    groups: dict[tuple, list[dict]] = {}
    for row in rows:
        key = (row["parameterization"], row["water"], row["solidus_offset"],
               row["lithosphere_thickness"])
        groups.setdefault(key, []).append(row)
    return list(groups.items())


def _pick(values, limit):
    if len(values) <= limit:
        return list(values)
    keep = np.unique(np.linspace(0, len(values) - 1, limit).round().astype(int))
    return [values[i] for i in keep]


def _variant(row, group) -> str:
    """What tells rows of one Tp apart in a panel (melting region, active upwelling)."""
    words = []
    if len({r["melting_region"] for r in group}) > 1:
        words.append(row["melting_region"])
    if len({r["active_upwelling"] for r in group}) > 1:
        words.append(f"upwelling {row['active_upwelling']:g}")
    return f" ({', '.join(words)})" if words else ""


def _draw_panel(ax, key, rows, colors, frame):
    """Melting curves, the lid of this panel and one path per potential temperature."""
    param_name, water, shift, lid = key
    param = get_parameterization(param_name)
    km_per_gpa = float(depth_per_pressure(frame["mantle_density"]))
    draw_pt_diagram(ax, param, water=water, solidus_offset=shift,
                    max_pressure=frame["max_pressure"],
                    temperature_range=frame["temperature_range"])
    if lid > 0:
        draw_lid(ax, lid / km_per_gpa, text=f"lid base {lid:g} km")
    by_tp: dict[float, list[dict]] = {}
    for row in rows:
        by_tp.setdefault(row["potential_temperature"], []).append(row)
    for tp in _pick(sorted(by_tp), _MAX_PATHS):
        group = by_tp[tp]
        crusts = ", ".join(f"{r['crustal_thickness']:.1f} km{_variant(r, group)}"
                           for r in group)
        first = group[0]
        col = melt_column(tp, lid, water=water, parameterization=param,
                          melting_region=first["melting_region"],
                          active_upwelling=first["active_upwelling"], solidus_offset=shift,
                          crust_density=frame["crust_density"],
                          mantle_density=frame["mantle_density"])
        draw_melting_path(ax, col, color=colors[tp], max_pressure=frame["max_pressure"],
                          label=f"Tp {quantity('potential_temperature').with_value(tp)}: "
                          f"crust {crusts}")
    depth = add_depth_axis(ax, frame["mantle_density"])
    if not frame.get("last_in_row", True):
        depth.set_ylabel("")
    title = f"lid {lid:g} km" if lid > 0 else "no lid"
    ax.set_title(f"{title} · {param.title}, {water:g} ppm H$_2$O, solidus offset "
                 f"{shift:+g} °C".replace("-", "\N{MINUS SIGN}"), fontsize=9)
    ax.legend(*visible_legend_entries(ax), fontsize=7, loc="lower left", framealpha=0.92)
    label_contours(ax)


def _frame(rows, crust_density, mantle_density) -> dict:
    """Axes limits shared by every panel, so panels compare at a glance."""
    km_per_gpa = float(depth_per_pressure(mantle_density))
    deepest = max(r["onset_depth"] for r in rows) * 1.12 / km_per_gpa
    tps = [r["potential_temperature"] for r in rows]
    low = np.floor((min(tps) - 250.0) / 50.0) * 50.0
    high = np.ceil((max(tps) + 300.0) / 50.0) * 50.0
    return {"max_pressure": float(np.clip(np.ceil(deepest * 2) / 2, 2.0, 10.0)),
            "temperature_range": (low, high), "crust_density": crust_density,
            "mantle_density": mantle_density}


def write_column_figure(path, rows, *, crust_density=2900.0, mantle_density=3300.0,
                        figure_format="png"):
    """Draw one P-T panel per lid and melting-curve set; write it atomically as a PNG,
    PDF or SVG (`figure_format`)."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    panels = _panels(rows)
    shown = panels[:_MAX_PANELS]
    colors = style.temperature_colors(r["potential_temperature"] for r in rows)
    frame = _frame([r for _, group in shown for r in group], crust_density, mantle_density)
    ncols = min(len(shown), 3)
    nrows = -(-len(shown) // ncols)
    fig = Figure(figsize=(5.6 * ncols, 5.4 * nrows + 0.7), layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=False, sharey=True).ravel()
    for i, (ax, (key, group)) in enumerate(zip(axes, shown, strict=False)):
        last = i % ncols == ncols - 1 or i == len(shown) - 1
        _draw_panel(ax, key, group, colors, frame | {"last_in_row": last})
        if i % ncols:
            ax.set_ylabel("")
    for ax in axes[len(shown):]:
        ax.set_visible(False)
    note = _NOTE if len(panels) <= _MAX_PANELS else (
        f"First {_MAX_PANELS} of {len(panels)} panels shown. " + _NOTE)
    bottom = (0.07 if ncols > 1 else 0.1) / nrows
    fig.get_layout_engine().set(rect=(0, bottom, 1, 1 - bottom))
    fig.text(0.01, 0.005, note.replace("\n", " "), fontsize=7.5, color="0.3", va="bottom",
             wrap=True)
    save_figure_atomically(fig, path, figure_format=figure_format)


def save_figure_atomically(fig, path, dpi=150, *, figure_format="png"):
    """Write the figure to ``path`` atomically (`figure_output.save_figure`)."""
    save_figure(fig, path, figure_format, dpi=dpi)
