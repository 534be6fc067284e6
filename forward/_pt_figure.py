"""The P-T figure of ``lidmelt column --plot``."""

from __future__ import annotations

import numpy as np

from .._atomic import replacing
from .adiabat import depth_per_pressure
from .column import melt_column
from .parameterizations import get_parameterization
from .plotting import add_depth_axis, draw_lid, draw_melting_path, draw_pt_diagram

_MAX_PANELS = 4
_MAX_PATHS = 8
_COLORS = ["tab:red", "tab:blue", "tab:green", "tab:purple", "tab:brown", "tab:pink",
           "tab:cyan", "tab:gray"]


def _panels(rows):
    """Rows grouped by what changes the melting curves (one panel each)."""
    groups: dict[tuple, list[dict]] = {}
    for row in rows:
        key = (row["parameterization"], row["water"], row["solidus_offset"])
        groups.setdefault(key, []).append(row)
    return list(groups.items())[:_MAX_PANELS]


def _pick(rows):
    if len(rows) <= _MAX_PATHS:
        return rows
    keep = np.unique(np.linspace(0, len(rows) - 1, _MAX_PATHS).round().astype(int))
    return [rows[i] for i in keep]


def _draw_panel(ax, key, rows, crust_density, mantle_density):
    """One colour per potential temperature; each lid truncates the same path."""
    param_name, water, shift = key
    param = get_parameterization(param_name)
    chosen = _pick(rows)
    km_per_gpa = float(depth_per_pressure(mantle_density))
    deepest = max(r["onset_depth"] for r in chosen) * 1.15 / km_per_gpa
    max_p = float(np.clip(np.ceil(deepest), 2.0, 10.0))
    draw_pt_diagram(ax, param, water=water, solidus_offset=shift, max_pressure=max_p)
    for lid in sorted({r["lithosphere_thickness"] for r in chosen} - {0.0}):
        draw_lid(ax, lid / km_per_gpa, label=f"lid base {lid:g} km")
    by_tp: dict[float, list[dict]] = {}
    for row in chosen:
        by_tp.setdefault(row["potential_temperature"], []).append(row)
    for (tp, group), color in zip(by_tp.items(), _COLORS, strict=False):
        crusts = ", ".join(f"{r['crustal_thickness']:.1f} km (lid {r['lithosphere_thickness']:g})"
                           for r in group)
        for i, row in enumerate(sorted(group, key=lambda r: r["lithosphere_thickness"])):
            col = melt_column(tp, row["lithosphere_thickness"], water=water,
                              parameterization=param, melting_region=row["melting_region"],
                              active_upwelling=row["active_upwelling"], solidus_offset=shift,
                              crust_density=crust_density, mantle_density=mantle_density)
            draw_melting_path(ax, col, color=color, max_pressure=max_p,
                              label=f"Tp {tp:g} °C, crust {crusts}" if i == 0 else None)
    add_depth_axis(ax, mantle_density)
    ax.set_title(f"{param.title}, {water:g} ppm H$_2$O, solidus offset {shift:+g} °C", fontsize=10)
    ax.legend(fontsize=7, loc="lower left", framealpha=0.9)


def write_column_figure(path, rows, *, crust_density=2900.0, mantle_density=3300.0):
    """Draw one P-T panel per melting-curve set and write a PNG atomically."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    panels = _panels(rows)
    fig, axes = plt.subplots(1, len(panels), figsize=(7.0 * len(panels), 6.2), squeeze=False)
    for ax, (key, group) in zip(axes[0], panels, strict=True):
        _draw_panel(ax, key, group, crust_density, mantle_density)
    fig.text(0.01, 0.005, "Thick: melting path (dot = onset); dotted: solid adiabat; olive: "
             "equilibrium melt fraction F.\nScientific estimate: depends on the melting "
             "parameterization.", fontsize=7, color="0.3")
    fig.tight_layout(rect=(0, 0.035, 1, 1))
    save_figure_atomically(fig, path)
    plt.close(fig)


def save_figure_atomically(fig, path, dpi=150):
    """Write the figure as a PNG to a temporary file beside ``path``; rename it into place."""
    with replacing(path) as tmp:
        fig.savefig(tmp, dpi=dpi)
