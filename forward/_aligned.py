"""Onset-aligned interpolation between tabulated melting paths.

A query point lies between 2-8 tabulated paths (``PathTable.corners``) whose onsets
differ from each other and from the point's refined onset P0. Read at the same
pressure, a path that starts deeper carries melt below the point's onset, so the
interpolated melt would not vanish where the lid reaches the onset. Instead each
corner path k is read at its own share of the way to its onset, ``P_k = P P0_k / P0``
(the surface and the onsets line up), its supersolidus excess ``sigma - T_sol(P_k)``
is interpolated, and its integrals are mapped back to the point's pressures (factors
P0 / P0_k for int F dP and (P0 / P0_k)^2 for int P F dP). Within the pressure cell that
holds a path's onset the path is interpolated toward its exact state at the onset
(on the solidus, no melt), so at P = P0 the point has F = 0 and no melt: every output
then goes to zero continuously as the lid base reaches the onset.

Per-path facts (turning pressures, which paths melt) are derived from a table's stored
states once per table; neither the table nor its cache file changes.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

import numpy as np

from .adiabat import MAX_PRESSURE

__all__ = ["PathFacts", "aligned_state", "path_facts"]

_CHUNK = 2048  # paths per block: bounds the temporary arrays of the melt fraction
_MEMO: dict[int, tuple[weakref.ref, PathFacts]] = {}


@dataclass(frozen=True)
class PathFacts:
    """Per-path facts of a table, flat arrays over its paths.

    ``turn``: pressure (GPa) of the path's largest melt fraction, the shallowest node
    holding it (0 where F rises all the way to the surface; water-saturated melt
    refreezing near the surface puts it deeper), the onset (closest approach) for a path
    that never melts. ``onset_cell``: index of the pressure cell holding the onset of a
    path that melts and starts above the model base, else -1.
    """

    turn: np.ndarray
    onset_cell: np.ndarray
    inverse_onset: np.ndarray  # 1/GPa, 0 where the onset is at the surface


def path_facts(param, table) -> PathFacts:
    """The ``PathFacts`` of ``table`` (computed on first use, then remembered)."""
    hit = _MEMO.get(id(table))
    if hit is not None and hit[0]() is table:
        return hit[1]
    facts = _compute(param, table)
    _MEMO[id(table)] = (weakref.ref(table, lambda _, key=id(table): _MEMO.pop(key, None)),
                        facts)
    return facts


def _compute(param, table) -> PathFacts:
    axis = table.sqrt_pressure
    pressure = axis.nodes ** 2
    state = table.state.reshape(-1, axis.size, 3)
    onset = table.onset.reshape(-1)
    melts = state[:, 0, 1] > 0.0  # some melt by the surface
    turn = np.empty(onset.size)
    for start in range(0, onset.size, _CHUNK):
        block = slice(start, start + _CHUNK)
        frac = param.dry_melt_fraction(state[block, :, 0].astype(float), pressure).fraction
        frac = np.where(pressure[None, :] <= onset[block, None], frac, -1.0)
        best = np.argmax(frac, axis=1)  # first = shallowest of equal maxima
        turn[block] = np.where(melts[block], pressure[best], onset[block])
    cell = axis.locate(np.sqrt(onset))[0]
    inside = melts & (onset < MAX_PRESSURE)
    inverse = np.where(onset > 0.0, 1.0 / np.where(onset > 0.0, onset, 1.0), 0.0)
    return PathFacts(turn, np.where(inside, cell, -1), inverse)


def aligned_state(param, table, corners, onset, pressure):
    """``(sigma, I1, I2)`` at ``pressure`` (GPa) on the paths starting at ``onset`` (GPa).

    ``corners`` from ``table.corners``; ``pressure`` and ``onset`` broadcast against the
    corners' path shape, ``pressure <= onset``. I1 and I2 are int F dP and int P F dP
    from ``pressure`` to the onset.
    """
    flats, weights = corners
    facts = path_facts(param, table)
    own = table.onset.reshape(-1)[flats]
    onset = np.asarray(onset, float)
    inverse = np.where(onset > 0.0, 1.0 / np.where(onset > 0.0, onset, 1.0), 0.0)
    ratio = np.where(onset > 0.0, own * inverse, 1.0)
    p_k = np.minimum(np.asarray(pressure, float) * ratio, own)
    flats, own = np.broadcast_to(flats, p_k.shape), np.broadcast_to(own, p_k.shape)
    values = _cell_values(param, table, facts, flats, own, p_k)
    excess = values[..., 0] - param.solidus(p_k)
    back = onset * facts.inverse_onset[flats]  # dP / dP_k
    sigma = param.solidus(pressure) + np.einsum("k...,k...->...", weights, excess)
    weighted = weights * back
    i1 = np.einsum("k...,k...->...", weighted, values[..., 1])
    i2 = np.einsum("k...,k...->...", weighted * back, values[..., 2])
    return sigma, np.maximum(i1, 0.0), np.maximum(i2, 0.0)


def _cell_values(param, table, facts, flats, own, p_k):
    """Stored states interpolated linearly in sqrt(P) at ``p_k``, shape ``(..., 3)``."""
    axis = table.sqrt_pressure
    u = np.sqrt(p_k)
    idx, frac = axis.locate(u)
    rows = table.state.reshape(-1, 3)
    index = flats * axis.size + idx
    lower = np.take(rows, index, axis=0)
    upper = np.take(rows, index + 1, axis=0)
    edge = np.nonzero(facts.onset_cell[flats] == idx)
    if edge[0].size:  # interpolate toward the exact onset state, not the node below it
        u_low = axis.start + axis.step * idx[edge]
        u_onset = np.sqrt(own[edge])
        span = u_onset - u_low
        frac[edge] = np.clip((u[edge] - u_low) / np.where(span > 0.0, span, 1.0), 0.0, 1.0)
        upper[edge] = np.stack([param.solidus(own[edge]), np.zeros(span.shape),
                                np.zeros(span.shape)], axis=-1)
    blended = lower + frac[..., None].astype(np.float32) * (upper - lower)
    return blended.astype(float)
