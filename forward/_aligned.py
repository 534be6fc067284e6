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
"""

from __future__ import annotations

import numpy as np

from ._path_facts import path_facts

__all__ = ["aligned_state"]


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
