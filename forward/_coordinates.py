"""Coordinates of the tabulated melting paths: the axes and the path a node stands for.

Shared by the table (``_table``), its path facts (``_path_facts``) and the queries
(``column``); it imports none of them, so imports among them run one way only.

A path depends on the potential temperature Tp, the solidus offset s and the water,
through b = s - dT0(water) (``dT0`` the unsaturated water depression of the solidus at
F -> 0) and Tp. The table's first coordinate is

    theta = Tp - b exp(-c P_ref),   P_ref = P_dry(Tp - b exp(-c P_base)),

with c = alpha_s / (rho_s c_p) (the solid adiabat is T = (Tp + 273.15) exp(c P) - 273.15;
docs/model.md, "Solid adiabat"), P_base the model base (10 GPa) and P_dry(t) the onset
pressure of dry, unshifted mantle of potential temperature t (0 where it does not melt,
P_base where it melts from the base up). Mantle whose onset lies at P0 meets the
shifted wet solidus where (Tp + 273.15) exp(c P0) = T_sol(P0) + b + 273.15, that is
where Tp - b exp(-c P0) = theta_dry(P0), the potential temperature of dry, unshifted
mantle with that onset. So:

- at P_ref = P0, paths of every offset and water content with the same theta share
  their onset, and therefore their state there (on the dry-equivalent solidus), which
  keeps interpolation across the offset and water axes tight. P_ref is evaluated at
  the base-referenced Tp - b exp(-c P_base) instead of being solved for, which
  leaves a mismatch of well under 1 K of theta per 100 K of b;
- at the base that mismatch is zero: every path melts from the base up exactly where
  theta >= theta_cap = theta_dry(P_base), whatever its offset and water. Above
  theta_cap (paths that melt from the base up) exp(-c P_ref) returns to 1 over 100 K
  (``_FADE``) of Tp - b exp(-c P_base), so that well inside that region theta is
  Tp - b, with which paths far from their onset interpolate best. Near the base
  the onset moves fast with theta (0.25 GPa/K for Katz et al. 2003, whose solidus is
  barely steeper than the adiabat there), so the theta axis has a node on theta_cap
  and finer nodes below it (``theta_axis``).

theta rises with Tp: below theta_cap d theta / d Tp = 1 + b c exp(-c P_ref) dP_dry/dt,
at least 0.09 for b >= -342 K (offset -100 K, 1000 ppm) with dP_dry/dt <= 0.25 GPa/K;
above it at least 1 - b (1 - exp(-c P_base)) / 100 K = 0.89 for b <= 100 K. It is continuous in
every input; its slope has kinks where P_ref reaches 0 or the base.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property, lru_cache

import numpy as np

from .adiabat import KELVIN, MAX_PRESSURE

__all__ = ["WATER_EXPONENT", "Axis", "GradedAxis", "deep_depression", "potential_temperature",
           "theta", "theta_axis", "theta_cap"]

WATER_EXPONENT = 0.75  # Katz et al. (2003): dT = K X^0.75
#: Finer theta nodes below theta_cap, as (width of the band in K, node spacing in K),
#: innermost first: the onset curves sharply there (dP0/dtheta from 0.22 GPa/K at the base)
_BANDS = ((10.0, 1.0), (20.0, 2.5))
#: K of base-referenced theta above theta_cap over which theta returns to Tp - b: paths
#: melting from the base up interpolate best at equal Tp - b far above theta_cap (their
#: cpx-exhaustion kink), at equal base-referenced theta close to it (measured: 40 K cost
#: 1.6 limits of melt thickness there, 100 K none)
_FADE = 100.0


@dataclass(frozen=True)
class Axis:
    """A uniform interpolation axis; a single node means "exact, no interpolation"."""

    start: float
    step: float
    size: int

    @property
    def nodes(self):
        return self.start + self.step * np.arange(self.size)

    def locate(self, x):
        """Lower node index and fraction (0..1) of ``x`` on this axis."""
        if self.size == 1:
            return np.zeros(np.shape(x), np.intp), np.zeros(np.shape(x))
        pos = np.clip((np.asarray(x, float) - self.start) / self.step, 0.0, self.size - 1.0)
        idx = np.minimum(pos.astype(np.intp), self.size - 2)
        return idx, pos - idx


@dataclass(frozen=True)
class GradedAxis:
    """An interpolation axis on given ascending nodes (a tuple, so it is hashable).

    The nodes lie on a lattice (multiples of a common spacing from the first), so a
    point finds its cell through a uniform array of lattice bins, with no search.
    """

    points: tuple[float, ...]

    @property
    def size(self) -> int:
        return len(self.points)

    @property
    def nodes(self):
        return np.asarray(self.points, float)

    @cached_property
    def _bins(self):
        """``(bin width, cell index of each bin, 1 / cell width)``."""
        nodes = self.nodes
        width = float(np.min(np.diff(nodes)))
        while not np.allclose((nodes - nodes[0]) / width, np.round((nodes - nodes[0]) / width),
                              rtol=0.0, atol=1e-6):
            width /= 2.0  # spacings 1 and 2.5 K share 0.5 K
        count = int(round((nodes[-1] - nodes[0]) / width))
        mids = nodes[0] + width * (np.arange(count) + 0.5)
        cells = np.searchsorted(nodes, mids) - 1
        return width, cells, 1.0 / np.diff(nodes)

    def locate(self, x):
        """Lower node index and fraction (0..1) of ``x`` on this axis (piecewise linear)."""
        nodes = self.points
        width, cells, inverse = self._bins
        x = np.clip(np.asarray(x, float), nodes[0], nodes[-1])
        idx = cells[np.minimum(((x - nodes[0]) / width).astype(np.intp), cells.size - 1)]
        frac = np.clip((x - np.take(self.nodes, idx)) * inverse[idx], 0.0, 1.0)
        return idx, frac


def deep_depression(param, water):
    """Water solidus depression (K) at F -> 0 where unsaturated (at the model base)."""
    return param.water_depression(0.0, MAX_PRESSURE, water)[0]


def _base_factor(param) -> float:
    """exp(-c P_base): a change of the solidus at the base, in potential temperature."""
    return math.exp(-param.thermo.adiabat_coefficient * MAX_PRESSURE)


@lru_cache(maxsize=8)
def _reference_onsets(param):
    """``(theta_ref, pressure)``: theta_ref(P) = (T_sol(P) + 273.15) exp(-c P) - 273.15, the
    potential temperature of dry, unshifted mantle that starts melting at P (GPa), on
    0-10 GPa. None unless it rises with P all the way to the base, that is unless the
    solidus is steeper than the adiabat meeting it at every pressure (Katz et al.
    2003); where it is flatter (McKenzie & Bickle 1988 above about 7.5 GPa) hot
    adiabats cross the solidus twice and the onset jumps to the base (docs/model.md,
    "Known limits"), and theta is Tp - s + dT0."""
    pressure = np.linspace(0.0, MAX_PRESSURE, 2001)
    theta_ref = (np.asarray(param.solidus(pressure), float) + KELVIN) * np.exp(
        -param.thermo.adiabat_coefficient * pressure) - KELVIN
    return (theta_ref, pressure) if np.all(np.diff(theta_ref) > 0.0) else None


_FACTOR_STEP = 0.5  # K between the tabulated values of exp(-c P_ref)


@lru_cache(maxsize=8)
def _factor_table(param):
    """``(axis, values, rise to the next value)`` of exp(-c P_ref) against base-referenced
    theta, every 0.5 K from where dry mantle starts to melt (1 below) to _FADE K above
    theta_cap (1 above); None where theta is Tp - b."""
    reference = _reference_onsets(param)
    if reference is None:
        return None
    cap = reference[0][-1]
    below = int(math.ceil((cap - reference[0][0]) / _FACTOR_STEP)) + 1
    above = int(round(_FADE / _FACTOR_STEP))
    axis = Axis(cap - below * _FACTOR_STEP, _FACTOR_STEP, below + above + 1)
    grid = axis.nodes
    factor = np.exp(-param.thermo.adiabat_coefficient * np.interp(grid, *reference))
    values = factor + np.clip((grid - cap) / _FADE, 0.0, 1.0) * (1.0 - factor)
    return axis, values, np.append(np.diff(values), 0.0)


def _factor(param, base_theta):
    """exp(-c P_ref) (see the module docstring), back to 1 over _FADE K above theta_cap."""
    axis, values, rises = _factor_table(param)
    idx, frac = axis.locate(base_theta)
    return values[idx] + frac * rises[idx]


def theta(param, potential_temperature, shift, water):
    """The table coordinate theta (degC) of paths with these inputs (degC, degC, ppm)."""
    tp = np.asarray(potential_temperature, float)
    lowered = np.asarray(shift, float) - deep_depression(param, np.asarray(water, float))
    if _reference_onsets(param) is None:
        return tp - lowered
    return tp - lowered * _factor(param, tp - lowered * _base_factor(param))


def potential_temperature(param, theta_value, shift, water, iterations=80):
    """The potential temperature (degC) of the path at ``theta_value`` (inverse of ``theta``).

    By bisection: theta rises with Tp, and the factor lies between exp(-c P_base) and 1.
    """
    target = np.asarray(theta_value, float)
    lowered = np.asarray(shift, float) - deep_depression(param, np.asarray(water, float))
    if _reference_onsets(param) is None:
        return target + lowered
    ends = (target + lowered * _base_factor(param), target + lowered)
    low, high = np.minimum(*ends), np.maximum(*ends)
    for _ in range(iterations):
        mid = 0.5 * (low + high)
        below = theta(param, mid, shift, water) < target
        low, high = np.where(below, mid, low), np.where(below, high, mid)
    return 0.5 * (low + high)


def theta_cap(param) -> float:
    """theta (degC) at which the solid adiabat meets the shifted wet solidus at the base."""
    return (float(param.solidus(MAX_PRESSURE)) + 273.15) * _base_factor(param) - 273.15


def theta_axis(param, low: float, high: float, step: float) -> GradedAxis:
    """Nodes covering ``[low, high]`` (degC): every ``step`` K, one on ``theta_cap`` and the
    finer ``_BANDS`` below it, where the onset reaches the base continuously."""
    if _reference_onsets(param) is None:  # no node tied to the base: multiples of step
        first, last = step * math.floor(low / step), step * math.ceil(high / step)
        return GradedAxis(tuple(float(x) for x in np.arange(first, last + 0.5 * step, step)))
    cap = theta_cap(param)
    first = cap - step * math.ceil((cap - low) / step - 1e-9)
    last = cap + step * math.ceil((high - cap) / step - 1e-9)
    nodes = set(np.round(np.arange(first, last + 0.5 * step, step), 9))
    inner = 0.0
    for width, spacing in _BANDS:
        band = cap - spacing * np.arange(int(round(width / spacing)) + 1)
        band = band[(band <= cap - inner) & (band >= first) & (band <= last)]
        nodes.update(np.round(band, 9))
        inner = width
    return GradedAxis(tuple(float(x) for x in sorted(nodes)))
