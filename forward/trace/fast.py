"""The fast route to the pooled rare-earth elements: closed forms per mineralogy segment.

In fractional melting the element mass m left in the residue (per unit mass of source)
obeys dm/dX = -m / M(X, w), with X the melt extracted, w the garnet share and
M = (1 - w) M_sp(X) + w M_gt(X) the minerals' masses times their partition coefficients
(`lithology`). Within one facies (w = 0 or 1) M is linear in X between the breaks of the
mineralogy, so ln m is a closed form of X alone (Shaw 1970):

    L(X) = integral_0^X dX'/M = sum over segments of -ln(1 - Q dX / M_b) / Q

and the path enters only through X at the facies' ends. Across the spinel-garnet
transition X is the quadratic in pressure through its values at the ends and the middle,
and the integral is a Gauss-Legendre sum (3 nodes on each half).

- Column: the pooled melt is the melt extracted, (C0 - m_top) / X_top: F is read only at
  the transition's ends; X_top is melt_column's largest F.
- Triangle: C = integral (C0 - m(P)) dP / integral X(P) dP over top..onset
  (docs/model.md, "Rare-earth elements along the melting path"), by Gauss-Legendre
  nodes in each of the three pressure ranges (spinel, transition, garnet).

Accuracy against the interval route at 256 intervals: tests/test_trace_fast.py and
docs/model.md, "The fast route".
"""

from __future__ import annotations

from functools import cache

import numpy as np

from ..adiabat import margin_trust
from ..column import MELTING_REGIONS, MeltColumn
from .lithology import facies_segments
from .melting import (
    DEFAULT_TRANSITION,
    TraceElements,
    _first_melt,
    _source,
    _transition,
)
from .tables import ELEMENTS, partition_coefficients

__all__ = ["fast_trace_elements"]

_CUTS = 2  # X read at the transition's ends and middle: quadratic in P across it
_TRANSITION_NODES = 3  # Gauss nodes per half of the transition
_TRIANGLE_NODES = 3  # Gauss nodes in the triangle's spinel range
_GARNET_NODES = 6  # Gauss nodes in the triangle's garnet range


@cache
def _facies_tables():
    """Per facies: segment starts (k,), M_b and Q_b (k, e), L at the starts (k, e)."""
    d = partition_coefficients()
    out = {}
    for name, seg in facies_segments().items():
        m_b, q_b = seg.bulk(d)
        width = np.diff(seg.start)[:, None]
        pieces = _segment_log(m_b[:-1], q_b[:-1], width)
        cum = np.vstack([np.zeros((1, m_b.shape[1])), np.cumsum(pieces, axis=0)])
        out[name] = (seg.start, m_b, q_b, cum)
    return out


def _segment_log(m_b, q_b, dx):
    """integral of dX / (M_b - Q_b X) from 0 to dx: -ln(1 - Q dx/M)/Q (dx/M as Q -> 0)."""
    u = np.minimum(q_b * dx / m_b, 1.0 - 1e-12)
    small = np.abs(u) < 1e-8
    safe_q = np.where(small, 1.0, q_b)
    return np.where(small, dx / m_b * (1.0 + 0.5 * u), -np.log1p(-u) / safe_q)


def _cumulative(name, x):
    """L(x) of a facies (``x`` shape (...,)) -> (..., e)."""
    start, m_b, q_b, cum = _facies_tables()[name]
    b = np.searchsorted(start, x, side="right") - 1
    return cum[b] + _segment_log(m_b[b], q_b[b], (x - start[b])[..., None])


@cache
def _hinges(name):
    """M(x) of a facies as hinge functions: M = c0 - x q0 + sum_k dq_k max(x - s_k, 0).

    Returns the breaks s (k,) and the matrix (2 + k, e) of [c0, -q0, dq_k]: M is
    continuous, and its slope changes by dq_k = Q_{k-1} - Q_k at each break.
    """
    start, m_b, q_b, _ = _facies_tables()[name]
    return start[1:], np.vstack([m_b[:1], -q_b[:1], q_b[:-1] - q_b[1:]])


def _bulk_mass(name, x):
    """M(x) of a facies (``x`` shape (...,)) -> (..., e); one small matrix product."""
    breaks, matrix = _hinges(name)
    hinge = np.maximum(x.reshape(-1, 1) - breaks, 0.0)
    # as one 2-D product: numpy loops over the leading axes of a stacked one
    out = hinge @ matrix[2:] + x.reshape(-1, 1) * matrix[1] + matrix[0]
    return np.maximum(out.reshape(x.shape + (matrix.shape[-1],)), 1e-300)


def _transition_log(x_ends, w_ends, nodes):
    """integral of dX / M(X, w) across each half of the transition, (..., 2, e).

    ``x_ends``, ``w_ends`` (..., 3): X and w at its deep end, middle and shallow end. X
    is the quadratic in pressure through the three (its rise only) and w is linear.
    """
    x0, x1, x2 = (x_ends[..., i, None] for i in range(3))
    b, c = 4.0 * x1 - 3.0 * x0 - x2, 2.0 * (x0 - 2.0 * x1 + x2)
    t, g = _gauss(nodes)
    s = np.stack([0.5 * t, 0.5 + 0.5 * t])  # (2, nodes): each half, deep to shallow
    x = x0[..., None] + (b[..., None] + c[..., None] * s) * s  # (..., 2, nodes)
    slope = np.maximum(b[..., None] + 2.0 * c[..., None] * s, 0.0)
    w = (w_ends[..., :1, None] + (w_ends[..., 2:, None] - w_ends[..., :1, None]) * s)[..., None]
    mass = (1.0 - w) * _bulk_mass("spinel", x) + w * _bulk_mass("garnet", x)
    return 0.5 * np.einsum("j,...kj,...kje->...ke", g, slope, 1.0 / mass)


def _fractions(column: MeltColumn, pressure):
    """Melt fraction at ``pressure`` (GPa, (..., m), at or above the onset): F only."""
    from .._aligned import corner_states
    from ..column import _margin

    q = column._query
    flats, weights = q.corners
    onset = column.onset_pressure[..., None]
    c = corner_states(q.param, q.table, (flats[..., None], weights[..., None]), onset,
                      np.minimum(pressure, onset))
    frac = np.einsum("k...,k...->...", c.weights, q.param.dry_fraction(c.sigma, c.pressure))
    return margin_trust(_margin(q))[..., None] * frac


def fast_trace_elements(
    column: MeltColumn,
    *,
    source="workman_hart_2005",
    transition: tuple[float, float] = DEFAULT_TRANSITION,
) -> TraceElements:
    """Rare-earth elements of the pooled melt by closed forms (the fast route).

    The same model as :func:`pooled_trace_elements` (Shaw 1970 fractional melting of
    spinel and garnet lherzolite, pooled as melt_column pools), evaluated per mineralogy
    segment in closed form instead of on pressure intervals (module docstring;
    docs/model.md, "The fast route"). Within 1 % (column) and 6.5 % (triangle; hot
    mantle melting from the model base) of the interval route at 256 intervals; speed in
    benchmarks/trace_speed.py.

    Parameters
    ----------
    column : MeltColumn, shape (...).
    source, transition : as for :func:`pooled_trace_elements`.

    Returns
    -------
    TraceElements with arrays of shape (..., 10) and (...).
    """
    region = column._query.melting_region
    if region not in MELTING_REGIONS:
        raise ValueError(f"unknown melting_region {region!r}")
    lo, hi = _transition(transition)
    c0 = _source(source)
    top, onset = column.top_pressure, np.maximum(column.onset_pressure, column.top_pressure)
    # the transition's ends and _CUTS - 1 pressures between, clipped to the path
    ends = np.linspace(np.clip(lo, top, onset), np.clip(hi, top, onset), _CUTS + 1, axis=-1)
    f_ends = _fractions(column, ends)
    # melt extracted there, rising from the onset; none at the onset itself (melt present
    # there counts as made just above, as in the interval route)
    x_ends = np.where(ends < onset[..., None], f_ends, 0.0)
    x_ends = np.maximum.accumulate(x_ends[..., ::-1], axis=-1)[..., ::-1]
    w_ends = np.clip((ends - lo) / (hi - lo), 0.0, 1.0)
    x_g, x_s = x_ends[..., -1], x_ends[..., 0]
    log_g = _cumulative("garnet", x_g)  # garnet field, onset to the transition
    halves = _transition_log(x_ends[..., ::-1], w_ends[..., ::-1], _TRANSITION_NODES)
    # the integral from the garnet end up to the shallow end, the middle and the deep end
    up_to = np.stack([halves.sum(axis=-2), halves[..., 0, :], np.zeros_like(halves[..., 0, :])],
                     axis=-2)
    log_t = up_to[..., 0, :]
    d = partition_coefficients()
    first = _first_melt(column.onset_pressure, lo, hi, d, facies_segments())
    if region == "column":
        # none where the column is degenerate (top at the onset): the first drop of melt
        x_top = np.where(top < onset, np.maximum(column.max_melt_fraction, x_s), 0.0)
        log_m = -(log_g + log_t + _cumulative("spinel", x_top) - _cumulative("spinel", x_s))
        has = (x_top > 0.0)[..., None]
        safe = np.where(has[..., 0], x_top, 1.0)[..., None]
        melt = np.where(has, -np.expm1(log_m) / safe, first)
        residue = np.exp(log_m) / (1.0 - np.minimum(x_top, 1.0 - 1e-12))[..., None]
        mass = np.minimum(x_top, 1.0)
    else:
        melt, residue, mass = _triangle(column, top, onset, ends, x_ends,
                                        log_g[..., None, :] + up_to, first)
    c0b = np.broadcast_to(c0, melt.shape)
    return TraceElements(ELEMENTS, melt * c0b, residue * c0b, mass, c0b)


def _triangle(column, top, onset, ends, x_ends, log_cuts, first):
    """Pooled melt, residue (over C0) and melt mass of the triangle, by quadrature.

    Streamlines turning in the spinel and garnet ranges: Gauss-Legendre nodes, F read
    there; in the transition: Simpson's rule over its ends and middle (``log_cuts``: -ln m there).
    """
    x_g, x_s = x_ends[..., -1], x_ends[..., 0]
    t, g = _gauss(_TRIANGLE_NODES)
    tg, gg = _gauss(_GARNET_NODES)
    p_s = top[..., None] + (ends[..., :1] - top[..., None]) * t  # spinel range
    p_g = ends[..., -1:] + (onset - ends[..., -1])[..., None] * tg  # garnet range
    f = _fractions(column, np.concatenate([p_s, p_g], axis=-1))
    n = _TRIANGLE_NODES
    # X: the running largest F from the onset up (a path partly molten at the model base
    # first refreezes), at most x_g
    x_gn = np.minimum(np.maximum.accumulate(f[..., n:][..., ::-1], axis=-1)[..., ::-1],
                      x_g[..., None])
    x_sn = np.maximum(f[..., :n], x_s[..., None])  # running largest F above the transition
    m_s = -log_cuts[..., :1, :] - (_cumulative("spinel", x_sn)
                                   - _cumulative("spinel", x_s)[..., None, :])
    m_g = -_cumulative("garnet", x_gn)
    gt = np.array([1.0, 4.0, 1.0]) / 6.0  # Simpson's rule over the transition
    widths = (ends[..., 0] - top, ends[..., -1] - ends[..., 0], onset - ends[..., -1])
    weights = (g, gt, gg)
    logs = (m_s, -log_cuts, m_g)
    melt_sum = sum(wd[..., None] * np.einsum("j,...je->...e", gw, -np.expm1(m))
                   for wd, gw, m in zip(widths, weights, logs, strict=True))
    x_sum = sum(wd * np.einsum("j,...j->...", gw, x)
                for wd, gw, x in zip(widths, weights, (x_sn, x_ends, x_gn), strict=True))
    span = onset - top
    has = (x_sum > 0.0)[..., None]
    melt = np.where(has, melt_sum / np.where(has[..., 0], x_sum, 1.0)[..., None], first)
    left = span - x_sum
    res_sum = span[..., None] - melt_sum  # the element mass left in the residues
    residue = np.where((left > 0.0)[..., None],
                       res_sum / np.where(left > 0.0, left, 1.0)[..., None], 1.0)
    mass = np.where(span > 0.0, x_sum / np.where(span > 0.0, span, 1.0), 0.0)
    return melt, residue, mass


@cache
def _gauss(nodes):
    """Gauss-Legendre nodes and weights on [0, 1] (computed once per size, read-only)."""
    t, g = np.polynomial.legendre.leggauss(nodes)
    out = 0.5 * (t + 1.0), 0.5 * g
    for a in out:
        a.flags.writeable = False
    return out
