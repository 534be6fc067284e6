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

from dataclasses import dataclass

import numpy as np

from ._path_facts import path_facts

__all__ = ["CornerStates", "aligned_state", "blended_sigma", "corner_fractions", "corner_states",
           "corner_values"]


@dataclass(frozen=True)
class CornerStates:
    """The neighbouring table paths of some points, each read at its aligned pressure.

    Arrays have shape ``(k, ...)``: k corners, then the points' shape. ``pressure`` is
    ``P_k`` (GPa, the corner path's own pressure), ``back`` is ``P0 / P0_k`` (maps
    corner pressures and int F dP to the point's), ``own`` the corner's onset (GPa);
    ``sigma``, ``int_f``, ``int_pf`` its stored state there.
    """

    weights: np.ndarray
    flats: np.ndarray
    own: np.ndarray
    back: np.ndarray
    pressure: np.ndarray
    sigma: np.ndarray
    int_f: np.ndarray
    int_pf: np.ndarray


def corner_states(param, table, corners, onset, pressure) -> CornerStates:
    """The corner paths of points with refined onsets ``onset`` at ``pressure`` (GPa).

    ``pressure`` and ``onset`` broadcast against the corners' point shape, with
    ``pressure <= onset``.
    """
    flats, weights = corners
    onset = np.asarray(onset, float)
    flats, own, p_k = _aligned_pressures(table, flats, onset, pressure)
    values = corner_values(param, table, flats, own, p_k)
    back = onset * path_facts(param, table).inverse_onset[flats]
    return CornerStates(np.broadcast_to(weights, p_k.shape), flats, own, back, p_k,
                        values[..., 0], values[..., 1], values[..., 2])


def corner_fractions(param, table, corners, onset, pressure):
    """Melt fraction at ``pressure`` blended over the corner paths (arguments as for
    :func:`corner_states`); reads only the stored sigma, so it costs a third of them."""
    flats, weights = corners
    flats, own, p_k = _aligned_pressures(table, flats, np.asarray(onset, float), pressure)
    sigma = corner_values(param, table, flats, own, p_k, sigma_only=True)
    return np.einsum("k...,k...->...", np.broadcast_to(weights, p_k.shape),
                     param.dry_fraction(sigma, p_k))


def _aligned_pressures(table, flats, onset, pressure):
    """Corner paths, their onsets and the aligned pressures ``P_k``, all of one shape."""
    own = table.onset.reshape(-1)[flats]
    inverse = np.where(onset > 0.0, 1.0 / np.where(onset > 0.0, onset, 1.0), 0.0)
    ratio = np.where(onset > 0.0, own * inverse, 1.0)
    pressure = np.asarray(pressure, float)
    # at the onset exactly the corner's own onset (no rounding melt where the lid is deeper)
    p_k = np.where(pressure >= onset, own, np.minimum(pressure * ratio, own))
    return np.broadcast_to(flats, p_k.shape), np.broadcast_to(own, p_k.shape), p_k


def aligned_state(param, table, corners, onset, pressure):
    """Interpolated ``(sigma, I1, I2)`` at ``pressure`` on the paths starting at ``onset``.

    sigma blends the corners' supersolidus excess ``sigma - T_sol(P_k)``; I1 and I2
    (int F dP and int P F dP from ``pressure`` to the onset) are mapped back to the
    point's pressures.
    """
    c = corner_states(param, table, corners, onset, pressure)
    sigma = blended_sigma(param, c, pressure)
    weighted = c.weights * c.back
    i1 = np.einsum("k...,k...->...", weighted, c.int_f)
    i2 = np.einsum("k...,k...->...", weighted * c.back, c.int_pf)
    return sigma, np.maximum(i1, 0.0), np.maximum(i2, 0.0)


def blended_sigma(param, c: CornerStates, pressure):
    """The points' sigma (degC) at ``pressure``: the corners' supersolidus excess blended."""
    excess = c.sigma - param.solidus(c.pressure)
    return param.solidus(pressure) + np.einsum("k...,k...->...", c.weights, excess)


def corner_values(param, table, flats, own, p_k, *, sigma_only: bool = False):
    """Stored states of paths ``flats`` (onsets ``own``) at ``p_k``, shape ``(..., 3)``
    (``sigma_only``: sigma alone, shape ``(...)``).

    Linear in sqrt(P) between nodes; in the cell holding a path's onset, toward the
    exact state at the onset (sigma on the solidus, no melt) rather than the node below.
    """
    facts = path_facts(param, table)
    axis = table.sqrt_pressure
    u = np.sqrt(p_k)
    idx, frac = axis.locate(u)
    rows = table.state.reshape(-1, 3)
    index = flats * axis.size + idx
    if sigma_only:  # from the flat array: a strided view would be copied whole by take
        rows, index = table.state.reshape(-1, 1), index * 3
        lower, upper = np.take(rows, index, axis=0), np.take(rows, index + 3, axis=0)
    else:
        lower, upper = np.take(rows, index, axis=0), np.take(rows, index + 1, axis=0)
    blended = (lower + frac[..., None].astype(np.float32) * (upper - lower)).astype(float)
    edge = np.nonzero(facts.onset_cell[flats] == idx)
    if edge[0].size:  # in double precision, so that the onset state is exact (F = 0)
        u_low = axis.start + axis.step * idx[edge]
        span = np.sqrt(own[edge]) - u_low
        at = np.clip((u[edge] - u_low) / np.where(span > 0.0, span, 1.0), 0.0, 1.0)
        exact = np.stack([param.solidus(own[edge]), np.zeros(span.shape),
                          np.zeros(span.shape)], axis=-1)[..., :rows.shape[-1]]
        start = lower[edge].astype(float)
        blended[edge] = start + at[..., None] * (exact - start)
    return blended[..., 0] if sigma_only else blended
