"""Slow reference route: one adaptive ``solve_ivp`` integration per point.

It integrates the temperature form of the isentropic path (Katz et al. 2003,
eq. 22 in substance) with the melt fraction solved implicitly at every call
(``Parameterization.melt_fraction``), independent of the dry-equivalent state,
tables and interpolation of the fast route. Use it to check the fast route, never
inside an inversion: a point costs tens of milliseconds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from .adiabat import KELVIN, MAX_PRESSURE, depth_per_pressure, solid_adiabat
from .parameterizations import get_parameterization

__all__ = ["ReferenceColumn", "reference_column"]


@dataclass(frozen=True)
class ReferenceColumn:
    """Scalar outputs of one reference integration (same units as ``MeltColumn``)."""

    melt_thickness: float
    onset_depth: float
    onset_pressure: float
    top_pressure: float
    max_melt_fraction: float
    mean_melt_fraction: float
    mean_melting_pressure: float


def _onset(param, tp, water, shift):
    """Deepest crossing of the solid adiabat and the wet, shifted solidus (GPa)."""

    def gap(p):
        return solid_adiabat(tp, p, param.thermo) - param.wet_solidus(p, water) - shift

    grid = np.linspace(MAX_PRESSURE, 0.0, 2001)
    values = gap(grid)
    if values[0] > 0.0:
        return MAX_PRESSURE, True
    above = np.nonzero(values > 0.0)[0]
    if above.size == 0:
        return 0.0, False
    k = above[0]
    return brentq(gap, grid[k], grid[k - 1], xtol=1e-13), True


def _start_temperature(param, tp, p0, water, shift):
    """Temperature at the onset; at the model base, isentropic equilibration."""
    t_ad = float(solid_adiabat(tp, p0, param.thermo))
    if p0 < MAX_PRESSURE:
        return t_ad
    th = param.thermo

    def mismatch(t):
        frac = float(param.melt_fraction(t, p0, water, solidus_offset=shift).fraction)
        return (t + KELVIN) - (t_ad + KELVIN) * np.exp(-th.entropy_of_fusion * frac / th.heat_capacity)

    return brentq(mismatch, float(param.wet_solidus(p0, water)) + shift - 1.0, t_ad, xtol=1e-12)


def _rhs(param, water, shift):
    th = param.thermo

    def rhs(p, y):
        temp = y[0]
        mf = param.melt_fraction(temp, max(p, 0.0), water, solidus_offset=shift)
        f, f_t, f_p = float(mf.fraction), float(mf.d_temperature), float(mf.d_pressure)
        a = 1e9 * ((1 - f) * th.alpha_solid / th.density_solid + f * th.alpha_melt / th.density_melt)
        t_cp = (temp + KELVIN) / th.heat_capacity
        slope = t_cp * (a - th.entropy_of_fusion * f_p) / (1.0 + t_cp * th.entropy_of_fusion * f_t)
        return [slope, -f]

    return rhs


def reference_column(potential_temperature: float, lithosphere_thickness: float, *,
                     water: float = 0.0, parameterization=None, melting_region: str = "column",
                     active_upwelling: float = 1.0, solidus_offset: float = 0.0,
                     mantle_density: float = 3300.0, rtol: float = 1e-9) -> ReferenceColumn:
    """Integrate one melting column adaptively (slow, tight tolerance)."""
    param = get_parameterization(parameterization)
    km = float(depth_per_pressure(mantle_density))
    tp, s = float(potential_temperature), float(solidus_offset)
    p0, melts = _onset(param, tp, water, s)
    top = min(lithosphere_thickness / km, p0)
    if not melts or top >= p0:
        return ReferenceColumn(0.0, p0 * km, p0, top, 0.0, 0.0, top)
    t0 = _start_temperature(param, tp, p0, water, s)
    sol = solve_ivp(_rhs(param, water, s), (p0, top), [t0, 0.0], method="DOP853",
                    rtol=rtol, atol=rtol, dense_output=True)
    if not sol.success:
        raise RuntimeError(f"reference integration failed: {sol.message}")
    return _summarise(param, sol, p0, top, km, water, s, melting_region, active_upwelling)


def _summarise(param, sol, p0, top, km, water, shift, melting_region, chi):
    """Column outputs by dense quadrature of the path (no integration by parts)."""
    int_f = float(sol.y[1, -1])
    pressures = np.linspace(p0, top, 401)
    temps = sol.sol(pressures)[0]
    frac = np.array([float(param.melt_fraction(t, p, water, solidus_offset=shift).fraction)
                     for t, p in zip(temps, pressures, strict=True)])
    # melt present at the start (onset at the model base) counts as made there
    made = np.diff(np.concatenate([[0.0], frac[1:]]))
    mids = 0.5 * (pressures[1:] + pressures[:-1])
    if melting_region == "triangle":
        made = made * (p0 - mids)
        mean_f = int_f / (p0 - top)
    else:
        mean_f = frac[-1]
    mean_p = float(np.sum(mids * made) / np.sum(made)) if np.sum(made) > 0 else top
    return ReferenceColumn(chi * int_f * km, p0 * km, p0, top, float(frac[-1]), float(mean_f), mean_p)
