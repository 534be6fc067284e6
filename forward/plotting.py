"""P-T diagrams of melting: curves, melt-fraction contours, adiabats and paths.

Pressure increases downward (as depth does); a second axis gives depth in km.
"""

from __future__ import annotations

import numpy as np

from .adiabat import depth_per_pressure, solid_adiabat
from .parameterizations import get_parameterization

__all__ = ["add_depth_axis", "draw_lid", "draw_melting_path", "draw_pt_diagram"]

_CURVE_STYLE = {
    "solidus": dict(color="black", lw=1.8),
    "lherzolite-out": dict(color="0.35", lw=1.2, ls="--"),
    "liquidus": dict(color="black", lw=1.2, ls="-."),
}


def _melt_fraction_grid(param, temps, pressures, water, shift):
    """Equilibrium F on a (P, T) grid, row by row from the monotone tau -> T map."""
    frac = np.empty((pressures.size, temps.size))
    taus = np.linspace(temps[0] - 50.0, temps[-1] + 400.0, 1500)
    for i, p in enumerate(pressures):
        f_row = param.dry_melt_fraction(taus - shift, p).fraction
        t_row = taus - param.water_depression(f_row, p, water)[0]
        frac[i] = np.interp(temps, t_row, f_row)
    return frac


def draw_pt_diagram(ax, parameterization=None, *, water=0.0, solidus_offset=0.0,
                    max_pressure=5.0, temperature_range=(1000.0, 1900.0),
                    contours=(0.1, 0.2, 0.3, 0.5)):
    """Melting curves and equilibrium melt-fraction contours on ``ax``.

    Temperatures in degC on x, pressure in GPa on y (downward). The curves are shifted
    by ``solidus_offset``; with ``water`` > 0 the wet solidus (F -> 0) is added.
    """
    param = get_parameterization(parameterization)
    pressures = np.linspace(0.0, max_pressure, 241)
    temps = np.linspace(*temperature_range, 361)
    frac = _melt_fraction_grid(param, temps, pressures, water, solidus_offset)
    lines = ax.contour(temps, pressures, frac, levels=list(contours), colors="tab:olive",
                       linewidths=0.7, alpha=0.8)
    ax.clabel(lines, fmt=lambda f: f"F={f:g}", fontsize=7, inline_spacing=2)
    for name, temp in param.curves(pressures).items():
        ax.plot(temp + solidus_offset, pressures, label=name, **_CURVE_STYLE.get(name, {}))
    if water > 0 and param.supports_water:
        wet = param.wet_solidus(pressures, water) + solidus_offset
        ax.plot(wet, pressures, color="tab:blue", lw=1.4, label=f"solidus, {water:g} ppm H$_2$O")
    ax.set_xlim(*temperature_range)
    ax.set_ylim(max_pressure, 0.0)
    ax.set_xlabel("Temperature (°C)")
    ax.set_ylabel("Pressure (GPa)")
    ax.grid(alpha=0.25, lw=0.5)
    return ax


def add_depth_axis(ax, mantle_density=3300.0):
    """Right-hand depth axis (km) from P = rho g z."""
    km = float(depth_per_pressure(mantle_density))
    sec = ax.secondary_yaxis("right", functions=(lambda p: p * km, lambda z: z / km))
    sec.set_ylabel(f"Depth (km; {km:.2f} km/GPa)")
    return sec


def draw_melting_path(ax, column, index=(), *, color="tab:red", label=None, max_pressure=5.0):
    """Solid adiabat (thin) and melting path (thick) of one point of a ``MeltColumn``."""
    pressures = np.linspace(0.0, max_pressure, 400)
    temp, _ = column.profile(pressures)
    temp = np.asarray(temp)[index]
    q = column._query
    tp = float(np.asarray(q.potential_temperature)[index])
    ax.plot(solid_adiabat(tp, pressures, q.param.thermo), pressures, color=color, lw=0.8,
            ls=":", alpha=0.8)
    top = float(np.asarray(column.top_pressure)[index])
    onset = float(np.asarray(column.onset_pressure)[index])
    melting = (pressures >= top) & (pressures <= onset)
    ax.plot(np.where(melting, temp, np.nan), pressures, color=color, lw=2.6, label=label)
    if column.produces_melt[index]:
        ax.plot(float(np.interp(onset, pressures, temp)), onset, "o", color=color, ms=5)
    return ax


def draw_lid(ax, pressure, *, color="0.2", label="lid base"):
    """Horizontal band above the lid base (GPa)."""
    ax.axhspan(0.0, pressure, color="0.85", alpha=0.5, lw=0, zorder=0)
    ax.axhline(pressure, color=color, lw=1.0, ls="--", label=label)
    return ax
