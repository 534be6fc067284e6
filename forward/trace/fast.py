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

Arrays are laid out elements first, (e, nodes, points): numpy runs a broadcast operation
as one inner loop per contiguous run of its last axis, so the long points axis goes last.
Accuracy against the interval route at 256 intervals: tests/test_rare_earths.py and
docs/model.md, "The fast route".
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from functools import cache

import numpy as np

from ..adiabat import margin_trust
from ..column import MELTING_REGIONS, MeltColumn
from .lithology import facies_segments
from .melting import DEFAULT_TRANSITION, TraceElements, _source, _transition
from .tables import ELEMENTS, partition_coefficients

__all__ = ["fast_trace_elements"]

_CUTS = 2  # X read at the transition's ends and middle: quadratic in P across it
_CUT_SHARES = np.linspace(0.0, 1.0, _CUTS + 1)[:, None]
_TRANSITION_NODES = 3  # Gauss nodes per half of the transition
_TRIANGLE_NODES = 3  # Gauss nodes in the triangle's spinel range
_GARNET_NODES = 6  # Gauss nodes in the triangle's garnet range
_BLOCK = 1024  # points per block (benchmarks/trace_speed.py)
_ALMOST_ONE = 1.0 - 1e-12  # the largest share of a segment's bulk mass one piece removes


@dataclass(frozen=True)
class _Facies:
    """One facies' closed forms for some elements (``k`` segments, ``e`` elements).

    Within segment b, M = M_b - Q_b (X - X_b), so L(X) = L_b - ln(1 - R_b (X - X_b)) / Q_b
    with R_b = Q_b / M_b. ``closed`` packs (3, e, k): R_b, 1 / Q_b and L_b, gathered in
    one take; ``hinges`` (2 + k - 1, e) is M as hinge functions,
    M = c0 - X q0 + sum_k dq_k max(X - s_k, 0), rows [c0, -q0, dq_k] (M is continuous;
    its slope changes by dq_k at each break s_k); ``first`` (e,) is M at X = 0.
    """

    start: np.ndarray
    closed: np.ndarray
    hinges: np.ndarray
    first: np.ndarray


@cache
def _facies(elements: tuple[int, ...]) -> dict[str, _Facies]:
    """The closed forms of both facies for the element columns ``elements``."""
    d = partition_coefficients()[:, list(elements)]
    out = {}
    for name, seg in facies_segments().items():
        m_b, q_b = seg.bulk(d)
        # Q_b = 0 exactly (none of the element leaves with the reaction) has the limit
        # L = dX / M; a Q of 1e-10 M gives it to 1e-10 through log1p's exact small-u form
        q_b = np.where(np.abs(q_b) < 1e-10 * m_b, 1e-10 * m_b, q_b)
        r_b = q_b / m_b
        width = np.diff(seg.start)[:, None]
        pieces = -np.log1p(-np.minimum(r_b[:-1] * width, _ALMOST_ONE)) / q_b[:-1]
        cum = np.vstack([np.zeros((1, m_b.shape[1])), np.cumsum(pieces, axis=0)])
        closed = np.ascontiguousarray(np.stack([r_b, 1.0 / q_b, cum]).transpose(0, 2, 1))
        hinges = np.vstack([m_b[:1], -q_b[:1], q_b[:-1] - q_b[1:]])
        out[name] = _Facies(seg.start, closed, hinges, m_b[0])
    for f in out.values():
        for a in (f.start, f.closed, f.hinges, f.first):
            a.flags.writeable = False
    return out


def _cumulative(facies: _Facies, x):
    """L(x) = integral_0^x dX / M of a facies, ``x`` (m, N) -> (e, m, N)."""
    b = np.searchsorted(facies.start, x, side="right") - 1
    closed = np.take(facies.closed, b, axis=-1)  # (3, e, m, N)
    u = np.minimum(closed[0] * (x - facies.start[b]), _ALMOST_ONE)
    return closed[2] - np.log1p(-u) * closed[1]


@cache
def _both_hinges(elements: tuple[int, ...]):
    """Both facies' M as one hinge product: breaks (K, 1), matrix (2e, K), rows (2e, 1) x2.

    The first e rows are spinel lherzolite's, the last e garnet lherzolite's.
    """
    sp, gt = _facies(elements)["spinel"], _facies(elements)["garnet"]
    e = sp.hinges.shape[1]
    ks, kg = sp.hinges.shape[0] - 2, gt.hinges.shape[0] - 2
    matrix = np.zeros((2 * e, ks + kg))
    matrix[:e, :ks], matrix[e:, ks:] = sp.hinges[2:].T, gt.hinges[2:].T
    breaks = np.concatenate([facies_segments()["spinel"].start[1:],
                             facies_segments()["garnet"].start[1:]])[:, None]
    slope = np.concatenate([sp.hinges[1], gt.hinges[1]])[:, None]
    base = np.concatenate([sp.hinges[0], gt.hinges[0]])[:, None]
    return breaks, matrix, slope, base


def _bulk_masses(elements, x):
    """M(x) of spinel and garnet lherzolite, ``x`` (m, N) -> (e, m, N) each."""
    breaks, matrix, slope, base = _both_hinges(elements)
    flat = x.reshape(1, -1)
    out = matrix @ np.maximum(flat - breaks, 0.0) + slope * flat + base
    out = np.maximum(out, 1e-300).reshape((matrix.shape[0],) + x.shape)
    e = matrix.shape[0] // 2
    return out[:e], out[e:]


def _transition_log(elements, x_ends, w_ends):
    """integral of dX / M(X, w) across each half of the transition, (e, 2, N).

    ``x_ends``, ``w_ends`` (3, N): X and w at its deep end, middle and shallow end. X is
    the quadratic in pressure through the three (its rise only) and w is linear.
    """
    x0, x1, x2 = x_ends
    b, c = 4.0 * x1 - 3.0 * x0 - x2, 2.0 * (x0 - 2.0 * x1 + x2)
    t, g = _gauss(_TRANSITION_NODES)
    s = np.concatenate([0.5 * t, 0.5 + 0.5 * t])[:, None]  # each half, deep to shallow
    x = x0 + (b + c * s) * s  # (2 nodes, N)
    slope = np.maximum(b + 2.0 * c * s, 0.0)
    w = w_ends[0] + (w_ends[2] - w_ends[0]) * s
    spinel, garnet = _bulk_masses(elements, x)
    values = slope / (spinel + w * (garnet - spinel))  # (e, 2 nodes, N)
    halves = values.reshape(values.shape[0], 2, _TRANSITION_NODES, -1)
    return 0.5 * np.matmul(g, halves)


@dataclass(frozen=True)
class _Points:
    """What the fast route reads of a MeltColumn, for N points (flattened)."""

    param: object
    table: object
    flats: np.ndarray  # (k, N) table paths around each point
    weights: np.ndarray  # (k, N)
    trust: np.ndarray  # (N,) margin_trust of the point's solidus margin
    onset: np.ndarray  # (N,) onset pressure, GPa
    top: np.ndarray  # (N,) top of melting, GPa
    largest: np.ndarray  # (N,) the largest F on the path

    @classmethod
    def of(cls, column: MeltColumn) -> "_Points":
        from ..column import _margin

        q = column._query
        flats, weights = q.corners
        k = flats.shape[0]
        return cls(q.param, q.table, flats.reshape(k, -1), weights.reshape(k, -1),
                   np.reshape(margin_trust(_margin(q)), -1) * np.ones(column.top_pressure.size),
                   column.onset_pressure.reshape(-1), column.top_pressure.reshape(-1),
                   column.max_melt_fraction.reshape(-1))

    def part(self, lo: int, hi: int) -> "_Points":
        return _Points(self.param, self.table, self.flats[:, lo:hi], self.weights[:, lo:hi],
                       *(a[lo:hi] for a in (self.trust, self.onset, self.top, self.largest)))

    def fractions(self, pressure):
        """Melt fraction at ``pressure`` (GPa, (m, N), at or above the onset): F only."""
        from .._aligned import corner_fractions

        return self.trust * corner_fractions(
            self.param, self.table, (self.flats[:, None], self.weights[:, None]),
            self.onset, np.minimum(pressure, self.onset))


def fast_trace_elements(
    column: MeltColumn,
    *,
    source="workman_hart_2005",
    transition: tuple[float, float] = DEFAULT_TRANSITION,
    elements: Sequence[str] | None = None,
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
    elements : optional names from ``ELEMENTS`` to compute (default all ten); they come
        back in ``ELEMENTS`` order. Each element is independent, so a subset costs less.

    Returns
    -------
    TraceElements with arrays of shape (..., e) and (...), e the number of elements.
    """
    region = column._query.melting_region
    if region not in MELTING_REGIONS:
        raise ValueError(f"unknown melting_region {region!r}")
    lo, hi = _transition(transition)
    picked = _element_columns(elements)
    c0 = _source(source)[..., list(picked)]
    shape = np.shape(column.top_pressure)
    points = _Points.of(column)
    e, size = len(picked), points.top.size
    if size <= _BLOCK:
        melt, residue, mass = _pooled(points, region, lo, hi, picked)
    else:  # in blocks: whole-array temporaries of many MB each cost fresh pages every call
        melt, residue, mass = np.empty((e, size)), np.empty((e, size)), np.empty(size)
        for start in range(0, size, _BLOCK):
            stop = min(start + _BLOCK, size)
            melt[:, start:stop], residue[:, start:stop], mass[start:stop] = _pooled(
                points.part(start, stop), region, lo, hi, picked)
    if c0.ndim == 1:  # one source: scaled while elements lead (long inner loops)
        melt, residue = melt * c0[:, None], residue * c0[:, None]
    melt, residue = (np.moveaxis(a, 0, -1).reshape(shape + (e,)) for a in (melt, residue))
    c0b = np.broadcast_to(c0, melt.shape)
    if c0.ndim > 1:
        melt, residue = melt * c0b, residue * c0b
    return TraceElements(tuple(ELEMENTS[i] for i in picked), melt, residue,
                         mass.reshape(shape), c0b)


def _pooled(points: _Points, region, lo, hi, picked):
    """Pooled melt and residue over C0, (e, N), and melt mass (N,) of some points."""
    top, onset = points.top, np.maximum(points.onset, points.top)
    # the transition's ends and _CUTS - 1 pressures between, clipped to the path
    shallow = np.clip(lo, top, onset)
    ends = shallow + (np.clip(hi, top, onset) - shallow) * _CUT_SHARES
    pressure = ends if region == "column" else np.concatenate(
        [ends, _triangle_nodes(top, onset, ends)])  # read the table once
    f = points.fractions(pressure)
    # melt extracted there, rising from the onset; none at the onset itself (melt present
    # there counts as made just above, as in the interval route)
    x_ends = np.where(ends < onset, f[:_CUTS + 1], 0.0)
    x_ends = np.maximum.accumulate(x_ends[::-1], axis=0)[::-1]
    w_ends = np.clip((ends - lo) / (hi - lo), 0.0, 1.0)
    halves = _transition_log(picked, x_ends[::-1], w_ends[::-1])
    facies = _facies(picked)
    sp, gt = facies["spinel"].first[:, None], facies["garnet"].first[:, None]
    w_onset = np.clip((points.onset - lo) / (hi - lo), 0.0, 1.0)
    first = 1.0 / (sp + w_onset * (gt - sp))  # C/C0 of the first drop of melt, (e, N)
    if region == "column":
        return _column(points.largest, facies, top, onset, x_ends, halves, first)
    return _triangle(facies, top, onset, ends, x_ends, f[_CUTS + 1:], halves, first)


def _element_columns(elements) -> tuple[int, ...]:
    if elements is None:
        return tuple(range(len(ELEMENTS)))
    unknown = [e for e in elements if e not in ELEMENTS]
    if unknown or not len(elements):
        raise ValueError(f"elements must be names from {', '.join(ELEMENTS)}, "
                         f"not {list(elements)!r}")
    return tuple(sorted({ELEMENTS.index(e) for e in elements}))


def _column(largest, facies, top, onset, x_ends, halves, first):
    """Pooled melt, residue (over C0, (e, N)) and melt mass (N,) of the column."""
    x_s = x_ends[0]
    # none where the column is degenerate (top at the onset): the first drop of melt
    x_top = np.where(top < onset, np.maximum(largest, x_s), 0.0)
    log_g = _cumulative(facies["garnet"], x_ends[2:])[:, 0]  # onset to the transition
    spinel = _cumulative(facies["spinel"], np.stack([x_top, x_s]))
    log_m = -(log_g + halves[:, 0] + halves[:, 1] + spinel[:, 0] - spinel[:, 1])
    has = x_top > 0.0
    melt = np.where(has, -np.expm1(log_m) / np.where(has, x_top, 1.0), first)
    residue = np.exp(log_m) / (1.0 - np.minimum(x_top, 1.0 - 1e-12))
    return melt, residue, np.minimum(x_top, 1.0)


def _triangle_nodes(top, onset, ends):
    """Gauss-Legendre pressures of the triangle's spinel and garnet ranges, (m, N)."""
    t, _ = _gauss(_TRIANGLE_NODES)
    tg, _ = _gauss(_GARNET_NODES)
    p_s = top + (ends[0] - top) * t[:, None]  # spinel range
    p_g = ends[-1] + (onset - ends[-1]) * tg[:, None]  # garnet range
    return np.concatenate([p_s, p_g])


def _triangle(facies, top, onset, ends, x_ends, f, halves, first):
    """Pooled melt, residue (over C0, (e, N)) and melt mass (N,) of the triangle.

    Streamlines turning in the spinel and garnet ranges: Gauss-Legendre nodes (``f``, F
    there); in the transition: Simpson's rule over its ends and middle (``halves``: the
    integral of dX / M over its deep and shallow halves).
    """
    x_g, x_s = x_ends[-1], x_ends[0]
    n = _TRIANGLE_NODES
    # X: the running largest F from the onset up (a path partly molten at the model base
    # first refreezes), at most x_g
    x_gn = np.minimum(np.maximum.accumulate(f[n:][::-1], axis=0)[::-1], x_g)
    x_sn = np.maximum(f[:n], x_s)  # running largest F above the transition
    spinel = _cumulative(facies["spinel"], np.concatenate([x_sn, x_s[None]]))
    garnet = _cumulative(facies["garnet"], np.concatenate([x_gn, x_g[None]]))
    # -ln m at the transition's shallow end, middle and deep end
    cuts = garnet[:, -1:] + np.stack([halves[:, 0] + halves[:, 1], halves[:, 0],
                                      np.zeros_like(halves[:, 0])], axis=1)
    logs = (-cuts[:, :1] - (spinel[:, :n] - spinel[:, n:]), -cuts, -garnet[:, :-1])
    gt = np.array([1.0, 4.0, 1.0]) / 6.0  # Simpson's rule over the transition
    widths = (ends[0] - top, ends[-1] - ends[0], onset - ends[-1])
    weights = (_gauss(n)[1], gt, _gauss(_GARNET_NODES)[1])
    melt_sum = sum(wd * np.matmul(gw, -np.expm1(m))
                   for wd, gw, m in zip(widths, weights, logs, strict=True))
    x_sum = sum(wd * (gw @ x)
                for wd, gw, x in zip(widths, weights, (x_sn, x_ends, x_gn), strict=True))
    span = onset - top
    has = x_sum > 0.0
    melt = np.where(has, melt_sum / np.where(has, x_sum, 1.0), first)
    left = span - x_sum
    residue = np.where(left > 0.0, (span - melt_sum) / np.where(left > 0.0, left, 1.0), 1.0)
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
