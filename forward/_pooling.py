"""Pooling the melt of a melting path: melt fractions and melt-weighted mean pressures.

Each neighbouring table path (``_aligned.corner_states``) is pooled on its own, and the
pooled sums are then interpolated: a real path's largest melt fraction and turning
point stay where they are, where the melt fraction of interpolated paths would blur a
thin refreezing layer.

Melt made at a pressure is the rise of F there; where F falls (melt refreezing) none is
made. A path rises from its onset P0 to its largest melt fraction F_m at P_m (the top
of melting, or the turning pressure where water-saturated melt refreezes above it). A
path that starts partly molten at the model base (F0 at P0) may first refreeze, down
to F_low at P_low, before it rises. With I1, I2 the integrals of F and P F from a
pressure to the onset, integration by parts of the production gives, for the 1-D
column (weight 1) and the ridge triangle (weight w = P - Pf, Pf the top; docs/model.md,
"Melting regions"):

    column:   made = F0 + [F]_low^m,  moment = P0 F0 + [P F]_low^m + [I1]_low^m
    triangle: made = w(P0) F0 + [w F]_low^m + [I1]_low^m,
              moment = h(P0) F0 + [h F]_low^m + 2 [I2]_low^m - Pf [I1]_low^m

with h = P (P - Pf) and [x]_low^m = x(P_m) - x(P_low). Where P_low = P0 and F_low = F0
these reduce to made = F_m, moment = P_m F_m + I1(P_m) (column) and to made =
w(P_m) F_m + I1(P_m), moment = h(P_m) F_m + 2 I2(P_m) - Pf I1(P_m) (triangle).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._aligned import corner_states, corner_values
from ._path_facts import path_facts

__all__ = ["Pooled", "pool"]

_VANISHING = 1e-4  # melt fraction below which the mean pressure is drawn to the onset


@dataclass(frozen=True)
class Pooled:
    """Pooled melt of points (arrays in the points' shape; see ``MeltColumn``)."""

    int_f: np.ndarray  # GPa, int F dP over the melting interval
    top_fraction: np.ndarray
    max_fraction: np.ndarray
    mean_fraction: np.ndarray
    mean_pressure: np.ndarray  # GPa


def pool(param, table, corners, onset, top, melting_region, trust) -> Pooled:
    """Pool the melt of the paths at ``corners`` between ``top`` and ``onset`` (GPa).

    ``trust`` (0..1) scales the melt of points at the edge of melting (see
    ``adiabat.margin_trust``); where no melt is made the mean pressure is the onset, the
    pressure at which melt would begin.
    """
    c = corner_states(param, table, corners, onset, top)
    f_top = param.dry_fraction(c.sigma, c.pressure)
    largest, low, start = _extremes(param, table, c, f_top)
    made, moment = _production(melting_region, c, largest, low, start)

    def blend(x):
        return np.einsum("k...,k...->...", c.weights, x)

    int_f = trust * np.maximum(blend(c.back * c.int_f), 0.0)
    total, mean = blend(made), blend(moment)
    positive = total > 0.0
    mean_p = np.where(positive, np.clip(mean / np.where(positive, total, 1.0), top, onset),
                      onset)
    max_f = blend(np.maximum(largest[1], f_top))
    # toward the onset as the melt vanishes, so the mean pressure of a vanishing melt
    # lobe joins the no-melt value continuously (acts below F ~ 1e-4; 1e-6 of the way
    # at F = 0.1)
    fading = max_f * max_f / (max_f * max_f + _VANISHING ** 2)
    mean_p = onset + trust * fading * (mean_p - onset)
    top_f, max_f = trust * blend(f_top), trust * max_f
    interval = onset - top
    if melting_region == "triangle":
        closing = interval <= 1e-9  # as the interval closes: F there
        mean_f = np.where(closing, top_f, int_f / np.where(closing, 1.0, interval))
    else:  # every parcel has been melted to the largest F by the time it leaves
        mean_f = max_f
    return Pooled(int_f, top_f, max_f, mean_f, mean_p)


def _extremes(param, table, c, f_top):
    """``(P, F, I1, I2)`` of each corner path at P_m, at P_low and at its onset.

    Only corners whose P_m lies below their top, or whose P_low above their onset,
    need another look-up in the table; ``low`` and ``start`` are None where no corner
    path refreezes from a partly molten start.
    """
    facts = path_facts(param, table)
    turn = np.clip(facts.turn[c.flats], c.pressure, c.own)
    largest = _at(param, table, c, turn, turn > c.pressure, (f_top, c.int_f, c.int_pf))
    low = np.clip(facts.low[c.flats], turn, c.own)
    refreezes = low < c.own - 1e-9
    if not np.any(refreezes):
        return largest, None, None
    zero = np.zeros(c.own.shape)
    return (largest, _at(param, table, c, low, refreezes, (zero, zero, zero)),
            _at(param, table, c, c.own, refreezes, (zero, zero, zero)))


def _at(param, table, c, pressure, mask, default):
    """Corner states ``(P, F, I1, I2)`` at ``pressure`` where ``mask``, else ``default``."""
    where = np.nonzero(mask)
    if not where[0].size:
        return (pressure, *default)
    frac, int_f, int_pf = (np.array(v, float, copy=True) for v in default)
    values = corner_values(param, table, c.flats[where], c.own[where], pressure[where])
    frac[where] = param.dry_fraction(values[:, 0], pressure[where])
    int_f[where], int_pf[where] = values[:, 1], values[:, 2]
    return pressure, frac, int_f, int_pf


def _production(melting_region, c, largest, low, start):
    """Melt made and its pressure moment per corner, in the point's pressures."""
    p_m, f_m, i1_m, i2_m = largest
    if low is None:  # no refreezing from a partly molten start: P_low = P0, F_low = F0
        low = start = (c.own, 0.0, 0.0, 0.0)
    (p_l, f_l, i1_l, i2_l), (p_0, f_0) = low, start[:2]
    d_i1 = i1_m - i1_l
    if melting_region == "triangle":
        pf = c.pressure  # the top, in the corner path's pressures
        made = (p_0 - pf) * f_0 + (p_m - pf) * f_m - (p_l - pf) * f_l + d_i1
        moment = p_0 * (p_0 - pf) * f_0 + p_m * (p_m - pf) * f_m - p_l * (p_l - pf) * f_l \
            + 2.0 * (i2_m - i2_l) - pf * d_i1
        return c.back * made, c.back ** 2 * moment
    made = f_0 + f_m - f_l
    moment = p_0 * f_0 + p_m * f_m - p_l * f_l + d_i1
    return made, c.back * moment
