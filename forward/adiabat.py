"""Solid adiabat, depth-pressure conversion and the onset of melting."""

from __future__ import annotations

import numpy as np

from .parameterizations import Parameterization

__all__ = [
    "GRAVITY",
    "KELVIN",
    "MAX_PRESSURE",
    "depth_per_pressure",
    "onset_state",
    "refine_onset",
    "solid_adiabat",
]

KELVIN = 273.15
GRAVITY = 9.81  # m/s^2
#: Base of the model (GPa). Where the solid adiabat is still above the solidus here,
#: melting is taken to begin at this pressure (see ``onset_state``).
MAX_PRESSURE = 10.0


def depth_per_pressure(mantle_density=3300.0):
    """km per GPa from P = rho g z (30.89 km/GPa for 3300 kg/m^3; common practice)."""
    return 1e6 / (np.asarray(mantle_density, float) * GRAVITY)


def solid_adiabat(potential_temperature, pressure, thermo):
    """Solid-mantle temperature (degC): T = Tp exp(alpha P / (rho c_p)), T in kelvin."""
    tp_kelvin = np.asarray(potential_temperature, float) + KELVIN
    return tp_kelvin * np.exp(thermo.adiabat_coefficient * np.asarray(pressure, float)) - KELVIN


def _tau_gap(param, potential_temperature, pressure, water, shift):
    """Dry-equivalent adiabat temperature minus the dry solidus (K); > 0 means melting."""
    depression = param.water_depression(0.0, pressure, water)[0]
    t_ad = solid_adiabat(potential_temperature, pressure, param.thermo)
    return t_ad + depression - shift - param.solidus(pressure)


def refine_onset(param, pressure, potential_temperature, water, shift, iterations=1):
    """Newton steps on the adiabat-solidus gap from an interpolated onset guess.

    Only points with ``0 < pressure < MAX_PRESSURE`` move; steps are limited to
    0.2 GPa so the iteration stays on the root it started near.
    """
    p = np.asarray(pressure, float)
    movable = (p > 0.0) & (p < MAX_PRESSURE)
    delta = 1e-4
    for _ in range(iterations):
        gap = _tau_gap(param, potential_temperature, p, water, shift)
        slope = (_tau_gap(param, potential_temperature, p + delta, water, shift) - gap) / delta
        step = np.clip(-gap / np.where(slope < 0.0, slope, -1.0), -0.2, 0.2)
        p = np.where(movable, np.clip(p + step, 1e-9, MAX_PRESSURE), p)
    return p


def _bisect(func, low, high, iterations=60):
    """Vectorised bisection for a sign change func(low) > 0 >= func(high)... any order."""
    f_low = func(low)
    for _ in range(iterations):
        mid = 0.5 * (low + high)
        f_mid = func(mid)
        same = np.sign(f_mid) == np.sign(f_low)
        low, f_low = np.where(same, mid, low), np.where(same, f_mid, f_low)
        high = np.where(same, high, mid)
    return 0.5 * (low + high)


def onset_state(param: Parameterization, potential_temperature, water, shift, *, grid=401):
    """Onset pressure (GPa) and dry-equivalent temperature ``sigma`` (degC) there.

    The onset is the deepest pressure where the solid adiabat meets the wet, shifted
    solidus. ``sigma`` is the dry-equivalent temperature minus the shift, so the melt
    fraction is ``F_dry(sigma, P)``. Where the adiabat never reaches the solidus the
    onset is 0 GPa with no melt. Where it is still above the solidus at
    ``MAX_PRESSURE``, melting starts there, the mantle brought isentropically to
    equilibrium: ``T = T_ad exp(-dS F / c_p)`` at that pressure.

    Returns ``(pressure, sigma, melts)``; inputs are 1-D arrays of equal length.
    """
    tp, w, s = (np.asarray(v, float) for v in (potential_temperature, water, shift))
    grid_p = np.linspace(MAX_PRESSURE, 0.0, grid)
    gaps = _tau_gap(param, tp[:, None], grid_p[None, :], w[:, None], s[:, None])
    above = gaps > 0.0
    melts = above.any(axis=1)
    capped = above[:, 0]
    first = np.argmax(above, axis=1)  # first node (from depth) above the solidus
    deep = grid_p[np.maximum(first - 1, 0)]
    shallow = grid_p[first]
    onset = _bisect(lambda p: _tau_gap(param, tp, p, w, s), shallow, deep)
    onset = np.where(capped, MAX_PRESSURE, np.where(melts, onset, 0.0))
    sigma = param.solidus(onset)
    if np.any(capped):
        sigma = np.where(capped, _equilibrated_sigma(param, tp, w, s), sigma)
    return onset, sigma, melts


def _equilibrated_sigma(param, tp, water, shift):
    """sigma at MAX_PRESSURE with entropy of the solid adiabat conserved."""
    th, p = param.thermo, MAX_PRESSURE
    t_ad_k = solid_adiabat(tp, p, th) + KELVIN

    def mismatch(sigma):
        frac = param.dry_melt_fraction(sigma, p).fraction
        temp_k = sigma + shift - param.water_depression(frac, p, water)[0] + KELVIN
        return temp_k - t_ad_k * np.exp(-th.entropy_of_fusion * frac / th.heat_capacity)

    low = np.broadcast_to(param.solidus(p), tp.shape).astype(float)
    high = np.maximum(low, t_ad_k - KELVIN - shift + 400.0)
    return _bisect(mismatch, low, high)
