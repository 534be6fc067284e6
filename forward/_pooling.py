"""Pooling the melt of a melting path: melt fractions and melt-weighted mean pressures.

Melt made at a pressure is the rise of F there; where F falls (melt refreezing) none is
made. A path rises from its onset P0 to its largest melt fraction F_m at P_m (the top
of melting, or the turning pressure where water-saturated melt refreezes above it). A
path that starts partly molten at the model base (F0 at P0) may first refreeze, down
to F_low at P_low, before it rises. With I1, I2 the integrals of F and P F from a
pressure to the onset, integration by parts of the production gives, for the 1-D
column (weight 1) and the ridge triangle (weight P - Pf, Pf the top; docs/model.md,
"Melting regions"):

    column:   made = F0 + [F]_low^m,  moment = P0 F0 + [P F]_low^m + [I1]_low^m
    triangle: made = w(P0) F0 + [w F]_low^m + [I1]_low^m,
              moment = h(P0) F0 + [h F]_low^m + 2 [I2]_low^m - Pf [I1]_low^m

with w = P - Pf, h = P (P - Pf) and [x]_low^m = x(P_m) - x(P_low). Where P_low = P0 and
F_low = F0 these reduce to made = F_m, moment = P_m F_m + I1(P_m) (column) and to
made = w(P_m) F_m + I1(P_m), moment = h(P_m) F_m + 2 I2(P_m) - Pf I1(P_m) (triangle).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._aligned import aligned_state
from ._path_facts import path_facts

__all__ = ["PathPoint", "extreme_points", "path_point", "pooled_means"]


@dataclass(frozen=True)
class PathPoint:
    """A point on the melting path: pressure (GPa), F, I1 and I2 (GPa, GPa^2)."""

    pressure: np.ndarray
    fraction: np.ndarray
    int_f: np.ndarray
    int_pf: np.ndarray


def path_point(param, table, corners, onset, pressure) -> PathPoint:
    """The interpolated path of the points at ``corners`` at ``pressure`` (GPa)."""
    sigma, int_f, int_pf = aligned_state(param, table, corners, onset, pressure)
    return PathPoint(pressure, param.dry_melt_fraction(sigma, pressure).fraction, int_f, int_pf)


def extreme_points(param, table, corners, onset, top: PathPoint):
    """``(largest, low, start)``: the path at P_m, at P_low and at the onset.

    The neighbouring paths' turning and low pressures are mapped to the point's
    pressures the way ``aligned_state`` reads them (``P = P_k P0 / P0_k``) and averaged.
    Only points whose P_m lies below the top, or whose P_low above the onset, need
    another table look-up.
    """
    facts = path_facts(param, table)
    flats, weights = corners
    own = table.onset.reshape(-1)[flats]

    def mapped(values):
        scaled = np.where(own > 0.0, values[flats] * onset * facts.inverse_onset[flats], onset)
        return np.sum(weights * scaled, axis=0)

    turn = np.clip(mapped(facts.turn), top.pressure, onset)
    low = np.clip(mapped(facts.low), turn, onset)
    largest = _replace_where(param, table, corners, onset, top, turn, turn > top.pressure)
    zero = np.zeros(np.shape(onset))
    at_onset = PathPoint(onset, zero, zero, zero)
    refreezes = low < onset - 1e-9  # (mapping rounds an onset-bound low by ~1e-16)
    low_point = _replace_where(param, table, corners, onset, at_onset, low, refreezes)
    start = _replace_where(param, table, corners, onset, at_onset, onset, refreezes)
    return largest, low_point, start


def _replace_where(param, table, corners, onset, default: PathPoint, pressure, mask):
    """``default``, with the path at ``pressure`` where ``mask`` holds."""
    values = [np.array(v, float, copy=True) for v in (pressure, default.fraction,
                                                      default.int_f, default.int_pf)]
    if np.any(mask):
        flats, weights = corners
        point = path_point(param, table, (flats[:, mask], weights[:, mask]), onset[mask],
                           pressure[mask])
        for target, source in zip(values[1:], (point.fraction, point.int_f, point.int_pf),
                                  strict=True):
            target[mask] = source
    return PathPoint(*values)


def pooled_means(melting_region, onset, top: PathPoint, trust, largest, low, start):
    """``(mean F, mean melting pressure)`` of the pooled melt (module docstring).

    ``trust`` (0..1) scales the melt of points at the edge of melting (see
    ``adiabat.gap_trust``); where no melt is made the mean pressure is the onset, the
    pressure at which melt would begin.
    """
    pf = top.pressure
    interval = onset - pf
    d_i1 = largest.int_f - low.int_f
    if melting_region == "triangle":
        closing = interval <= 1e-9  # as the interval closes: F there
        mean_f = trust * np.where(closing, top.fraction,
                                  top.int_f / np.where(closing, 1.0, interval))
        weight = [(p.pressure - pf) for p in (start, largest, low)]
        made = weight[0] * start.fraction + weight[1] * largest.fraction \
            - weight[2] * low.fraction + d_i1
        moment = sum(sign * p.pressure * w * p.fraction for sign, p, w in
                     zip((1, 1, -1), (start, largest, low), weight, strict=True)) \
            + 2.0 * (largest.int_pf - low.int_pf) - pf * d_i1
    else:
        mean_f = trust * top.fraction
        made = start.fraction + largest.fraction - low.fraction
        moment = start.pressure * start.fraction + largest.pressure * largest.fraction \
            - low.pressure * low.fraction + d_i1
    positive = made > 0.0
    ratio = np.clip(moment / np.where(positive, made, 1.0), pf, onset)
    ratio = np.where(positive, ratio, onset)
    return mean_f, onset + trust * (ratio - onset)
