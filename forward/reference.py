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
from scipy.optimize import brentq, minimize_scalar

from .adiabat import KELVIN, MAX_PRESSURE, depth_per_pressure, solid_adiabat
from .parameterizations import get_parameterization

__all__ = ["ReferenceColumn", "ReferencePath", "reference_column", "reference_path"]


@dataclass(frozen=True)
class ReferenceColumn:
    """Scalar outputs of one reference integration (same units as ``MeltColumn``)."""

    melt_thickness: float
    onset_depth: float
    onset_pressure: float
    top_pressure: float
    max_melt_fraction: float
    top_melt_fraction: float
    mean_melt_fraction: float
    mean_melting_pressure: float


@dataclass(frozen=True)
class ReferencePath:
    """One adaptively integrated melting path from its onset up to the top of melting.

    ``melt_fraction(p)`` and ``temperature(p)`` (degC) take pressures (GPa) in
    ``[top_pressure, onset_pressure]``; ``melts`` is False where the adiabat never meets
    the solidus or the lid is at or below the onset (then both functions are not set).
    ``int_f`` is the integral of F dP from the top to the onset (GPa).
    """

    onset_pressure: float
    top_pressure: float
    melts: bool
    int_f: float
    temperature: object = None
    melt_fraction: object = None


def _onset(param, tp, water, shift):
    """Deepest crossing of the solid adiabat and the wet, shifted solidus (GPa).

    Where there is none: the pressure of closest approach (the largest gap), no melt.
    """

    def gap(p):
        return solid_adiabat(tp, p, param.thermo) - param.wet_solidus(p, water) - shift

    grid = np.linspace(MAX_PRESSURE, 0.0, 2001)
    values = gap(grid)
    if values[0] > 0.0:
        return MAX_PRESSURE, True
    above = np.nonzero(values > 0.0)[0]
    if above.size == 0:
        k = int(np.argmax(values))
        low, high = grid[min(k + 1, grid.size - 1)], grid[max(k - 1, 0)]
        best = minimize_scalar(lambda p: -gap(p), bounds=(low, high), method="bounded",
                               options={"xatol": 1e-12})
        return (0.0 if gap(0.0) >= -best.fun else float(best.x)), False
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


def reference_path(potential_temperature: float, lithosphere_thickness: float, *,
                   water: float = 0.0, parameterization=None, solidus_offset: float = 0.0,
                   mantle_density: float = 3300.0, rtol: float = 1e-9) -> ReferencePath:
    """Integrate one melting path adaptively (slow, tight tolerance)."""
    param = get_parameterization(parameterization)
    km = float(depth_per_pressure(mantle_density))
    tp, s = float(potential_temperature), float(solidus_offset)
    p0, melts = _onset(param, tp, water, s)
    top = min(lithosphere_thickness / km, p0)
    if not melts or top >= p0:
        return ReferencePath(p0, top, False, 0.0)
    t0 = _start_temperature(param, tp, p0, water, s)
    sol = solve_ivp(_rhs(param, water, s), (p0, top), [t0, 0.0], method="DOP853",
                    rtol=rtol, atol=rtol, dense_output=True)
    if not sol.success:
        raise RuntimeError(f"reference integration failed: {sol.message}")

    def temperature(p):
        return sol.sol(np.asarray(p, float))[0]

    def melt_fraction(p):
        p = np.atleast_1d(np.asarray(p, float))
        frac = [float(param.melt_fraction(t, q, water, solidus_offset=s).fraction)
                for t, q in zip(temperature(p), p, strict=True)]
        return np.asarray(frac)

    return ReferencePath(p0, top, True, float(sol.y[1, -1]), temperature, melt_fraction)


def reference_column(potential_temperature: float, lithosphere_thickness: float, *,
                     water: float = 0.0, parameterization=None, melting_region: str = "column",
                     active_upwelling: float = 1.0, solidus_offset: float = 0.0,
                     mantle_density: float = 3300.0, rtol: float = 1e-9,
                     nodes: int = 401) -> ReferenceColumn:
    """Column outputs of one adaptively integrated path, by dense quadrature on ``nodes``."""
    km = float(depth_per_pressure(mantle_density))
    path = reference_path(potential_temperature, lithosphere_thickness, water=water,
                          parameterization=parameterization, solidus_offset=solidus_offset,
                          mantle_density=mantle_density, rtol=rtol)
    p0, top = path.onset_pressure, path.top_pressure
    if not path.melts:
        return ReferenceColumn(0.0, p0 * km, p0, top, 0.0, 0.0, 0.0, p0)
    return _summarise(path, km, melting_region, active_upwelling, nodes)


def _summarise(path, km, melting_region, chi, nodes):
    """Column outputs by dense quadrature of the path (no integration by parts).

    Melt made in an interval is the rise of F across it (none where F falls); in the
    triangle it is weighted by the width of the melting region, P - P_top.
    """
    p0, top = path.onset_pressure, path.top_pressure
    # uniform in sqrt(P): resolves the thin refreezing layer of a wet path near the surface
    pressures = np.linspace(np.sqrt(p0), np.sqrt(top), nodes) ** 2
    frac = path.melt_fraction(pressures)
    # melt present at the start (onset at the model base) counts as made there
    made = np.concatenate([[frac[0]], np.maximum(np.diff(frac), 0.0)])
    mids = np.concatenate([[p0], 0.5 * (pressures[1:] + pressures[:-1])])
    if melting_region == "triangle":
        made = made * (mids - top)
        mean_f = path.int_f / (p0 - top)
    else:
        mean_f = frac.max()  # every parcel has been melted that far
    mean_p = float(np.sum(mids * made) / np.sum(made)) if np.sum(made) > 0 else p0
    return ReferenceColumn(chi * path.int_f * km, p0 * km, p0, top, float(frac.max()),
                           float(frac[-1]), float(mean_f), mean_p)
