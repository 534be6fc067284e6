"""Solid adiabat, depth-pressure conversion and the onset of melting."""

from __future__ import annotations

import numpy as np

from .parameterizations import Parameterization

__all__ = [
    "GRAVITY",
    "KELVIN",
    "MAX_PRESSURE",
    "depth_per_pressure",
    "margin_trust",
    "onset_state",
    "refine_onset",
    "solid_adiabat",
    "solidus_margin",
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
    """Solid adiabat minus the wet, shifted solidus (K); > 0 means melting."""
    t_ad = solid_adiabat(potential_temperature, pressure, param.thermo)
    return t_ad - param.wet_solidus(pressure, water) - shift


#: K: where the solidus margin interpolated from the table is below -_MARGIN_RAMP[0] the
#: outputs are scaled down, reaching 0 at -(sum of both) (see ``margin_trust``).
_MARGIN_RAMP = (1.0, 5.0)
_NEWTON_RAMP = 2.0  # K: Newton steps toward shallower pressure fade out over this margin
_MIN_GAP_SLOPE = 5.0  # K/GPa; below this |d gap/dP| Newton steps are shortened, not lengthened
_MAX_STEP = 0.2  # GPa per Newton step, so the iteration stays on the root it started near
#: K/GPa added to the slope floor of the faded steps as the margin falls to -2 K. A wet
#: point that does not melt has its closest approach on a kink of the gap (where the
#: melt would become water-saturated), across which the slope flips within 1e-4 GPa; a
#: floor of up to 205 K/GPa keeps the step there below ~0.004 GPa, so the onset stays
#: within its continuity bound (tests/test_continuity.py)
_NO_MELT_SLOPE = 200.0


def margin_trust(margin):
    """Continuous 0..1 weight of a point's melt: 1 for a margin >= -1 K, 0 below -6 K.

    ``margin`` (K) is the solidus margin interpolated from the neighbouring table paths.
    Those paths can melt a little where the point itself does not (margin < 0, the
    adiabat never reaches the solidus); scaling by this weight makes that melt vanish
    continuously within a table cell's worth (5 K of theta) of the edge of melting.
    """
    low, width = _MARGIN_RAMP
    return np.clip(1.0 + (np.asarray(margin, float) + low) / width, 0.0, 1.0)


def refine_onset(param, pressure, potential_temperature, water, shift, margin,
                 iterations=2):
    """Safeguarded Newton steps toward the deepest adiabat-solidus crossing (GPa).

    Starts from an interpolated onset guess. A step is taken only where the gap
    (adiabat minus wet, shifted solidus, K) falls with depth (the deep side of a
    crossing): the Newton step ``-gap / slope``, shortened where the slope is gentler
    than 5 K/GPa. Where the gap is negative (the guess lies too deep) the step toward
    lower pressure fades out as the solidus ``margin`` (K, interpolated) falls from 0 to
    -2 K, and its slope floor rises from 5 to 205 K/GPa: a point that does not melt keeps
    its tabulated closest-approach pressure instead of stepping past it. Every factor is continuous in the gap, its
    (finite-difference) slope and the margin, so the onset is continuous in the inputs.
    """
    p = np.asarray(pressure, float)
    delta = 1e-4
    fade = np.clip(1.0 + np.asarray(margin, float) / _NEWTON_RAMP, 0.0, 1.0)
    floor = (_MIN_GAP_SLOPE + (1.0 - fade) * _NO_MELT_SLOPE) ** 2
    for _ in range(iterations):
        gap = _tau_gap(param, potential_temperature, p, water, shift)
        slope = (_tau_gap(param, potential_temperature, p + delta, water, shift) - gap) / delta
        falling = np.maximum(-slope, 0.0)
        rising = gap >= 0.0  # the full Newton step; else faded, with a higher slope floor
        step = gap * falling * np.where(rising, 1.0, fade) / np.maximum(
            slope * slope, np.where(rising, _MIN_GAP_SLOPE ** 2, floor))
        p = np.clip(p + np.clip(step, -_MAX_STEP, _MAX_STEP), 0.0, MAX_PRESSURE)
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
    "onset" is the pressure of closest approach (largest adiabat-solidus gap, 0 GPa
    for a dry source), with no melt: it is where melting would begin in a slightly
    hotter mantle, so the onset varies continuously across the edge of melting. Where
    the adiabat is still above the solidus at ``MAX_PRESSURE``, melting starts there,
    the mantle brought isentropically to equilibrium: ``T = T_ad exp(-dS F / c_p)``.

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
    closest = _closest_approach(lambda p: _tau_gap(param, tp, p, w, s), grid_p, gaps)[0]
    onset = np.where(capped, MAX_PRESSURE, np.where(melts, onset, closest))
    sigma = param.solidus(onset)
    if np.any(capped):
        sigma = np.where(capped, _equilibrated_sigma(param, tp, w, s), sigma)
    return onset, sigma, melts


def solidus_margin(param: Parameterization, potential_temperature, water, shift, *, grid=201):
    """Largest excess (K) of the solid adiabat over the wet, shifted solidus, 0-10 GPa.

    Negative where the mantle is too cold to melt at any depth. Returns ``(margin,
    pressure)``, the pressure (GPa) where it is reached; inputs are 1-D arrays.
    """
    tp, w, s = (np.asarray(v, float) for v in (potential_temperature, water, shift))
    grid_p = np.linspace(MAX_PRESSURE, 0.0, grid)
    gaps = _tau_gap(param, tp[:, None], grid_p[None, :], w[:, None], s[:, None])
    pressure, margin = _closest_approach(lambda p: _tau_gap(param, tp, p, w, s), grid_p, gaps)
    return margin, pressure


def _closest_approach(gap, grid_p, gaps, iterations=60):
    """Pressure and value of the largest gap: grid maximum, then a golden-section search."""
    best = np.argmax(gaps, axis=1)
    low = grid_p[np.minimum(best + 1, grid_p.size - 1)]  # grid_p descends
    high = grid_p[np.maximum(best - 1, 0)]
    ratio = 0.5 * (np.sqrt(5.0) - 1.0)
    for _ in range(iterations):
        a, b = high - ratio * (high - low), low + ratio * (high - low)
        left_better = gap(a) >= gap(b)
        high = np.where(left_better, b, high)
        low = np.where(left_better, low, a)
    found = 0.5 * (low + high)
    at_surface, inside = gap(np.zeros_like(found)), gap(found)
    surface = at_surface >= inside
    return np.where(surface, 0.0, found), np.where(surface, at_surface, inside)


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
