"""Rare-earth elements of the pooled melt: incremental non-modal fractional melting.

The melting path is cut into intervals of equal pressure. In each the residue gives up
the melt made there (the rise of F; none where F falls) as a fractional melt, with the
exact step of Shaw (1970): the bulk coefficient D0 of the residue at the start of the
step and the reaction-weighted coefficient P stay as they are over the step. The melts
are pooled with the weights that give melt_column its mean F and mean pressure (column:
dF; triangle: dF (P - P_top)). Equations and assumptions: docs/model.md, "Rare-earth
elements along the melting path".
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache, cached_property

import numpy as np

from ..column import MELTING_REGIONS, MeltColumn
from .lithology import facies_segments
from .tables import ELEMENTS, chondrite, partition_coefficients, source_composition

__all__ = ["DEFAULT_INTERVALS", "DEFAULT_TRANSITION", "TraceElements",
           "melt_along_path", "pooled_trace_elements"]

# Spinel to garnet lherzolite, GPa (value from memory): near-solidus transition in CMAS
# at 2.6-2.7 GPa at 1500 degC (Klemme & O'Neill 2000, abstract); garnet-in near 2.8 GPa
# at the solidus of fertile peridotite (Robinson & Wood 1998, not checked); docs/model.md.
DEFAULT_TRANSITION = (2.5, 3.0)
# equal-pressure intervals of the path: the convergence test (tests/test_trace_melting.py)
# puts every pooled concentration within 0.5 % of a 1024-interval path for Tp 1250-1650
# degC and lids 0-120 km (largest: 0.05 % column, 0.46 % triangle, whose weights take P
# linear in X within an interval)
DEFAULT_INTERVALS = 12

_BAND = 4  # intervals across the spinel-garnet transition, besides the equal ones
_PIECES = 3  # pieces of a step, cut at breaks of the mineralogy (two lie 0.006 apart)
_LAST = 1.0 - 1e-12  # largest share of the residue one step may melt


@dataclass(frozen=True)
class TraceElements:
    """Rare-earth elements of the pooled melt and of its residue, ppm.

    Attributes
    ----------
    elements : the element names, the order of the last axis.
    melt : (..., 10) ppm, the pooled (accumulated) melt.
    residue : (..., 10) ppm, the residue left by that melt (triangle: of all streamlines).
    melt_mass : (...,) mass of the pooled melt per unit mass of source
        (column: the melt extracted; triangle: the Plank & Langmuir mean F, as summed
        on the intervals). melt_mass * melt + (1 - melt_mass) * residue = source.
    source : (..., 10) ppm, the source.
    """

    elements: tuple[str, ...]
    melt: np.ndarray
    residue: np.ndarray
    melt_mass: np.ndarray
    source: np.ndarray

    def _column(self, name: str) -> int:
        if name not in self.elements:
            raise ValueError(f"unknown element {name!r}; "
                             f"choose one of {', '.join(self.elements)}")
        return self.elements.index(name)

    def ratio(self, numerator: str, denominator: str, *,
              normalised: bool = False) -> np.ndarray:
        """Mass ratio of two elements in the melt, shape (...); ``normalised``: of the
        chondrite-normalised concentrations (Sun & McDonough 1989)."""
        c = self.normalised if normalised else self.melt
        return c[..., self._column(numerator)] / c[..., self._column(denominator)]

    @cached_property
    def normalised(self) -> np.ndarray:
        """The melt over CI chondrite (Sun & McDonough 1989), shape (..., e)."""
        return self.melt / _chondrite_of(self.elements)

    @property
    def la_yb(self) -> np.ndarray:
        return self.ratio("La", "Yb")

    @property
    def sm_yb(self) -> np.ndarray:
        return self.ratio("Sm", "Yb")

    @property
    def dy_yb(self) -> np.ndarray:
        return self.ratio("Dy", "Yb")


@cache
def _chondrite_of(elements: tuple[str, ...]) -> np.ndarray:
    """CI chondrite of ``elements`` (read-only, computed once per tuple)."""
    out = chondrite()[[ELEMENTS.index(e) for e in elements]]
    out.flags.writeable = False
    return out


def pooled_trace_elements(
    column: MeltColumn,
    *,
    source="workman_hart_2005",
    transition: tuple[float, float] = DEFAULT_TRANSITION,
    num: int = DEFAULT_INTERVALS,
) -> TraceElements:
    """Rare-earth elements of the melt pooled from the melting path of ``column``.

    Incremental non-modal fractional melting (Shaw 1970, GCA 34, eq. for the residue
    C_s/C_0 = (1 - P F / D0)^(1/P) / (1 - F), applied per interval) of spinel lherzolite
    above and garnet lherzolite below the ``transition``, mixed linearly in pressure
    across it; melts pooled as melt_column pools them (docs/model.md).

    Parameters
    ----------
    column : MeltColumn from :func:`lidmelt.forward.melt_column`, shape (...).
    source : a name in ``tables.SOURCES`` ("workman_hart_2005", DMM;
        "salters_stracke_2004", DM), a dict of the 10 elements (ppm), or an array
        broadcasting to (..., 10) in ``ELEMENTS`` order (ppm, > 0).
    transition : (p_lo, p_hi), GPa, 0 <= p_lo < p_hi: spinel lherzolite above p_lo,
        garnet lherzolite below p_hi.
    num : equal-pressure intervals from the top of melting to the onset (>= 1); the
        transition's ends, where inside, split two of them.

    Returns
    -------
    TraceElements with arrays of shape (..., 10) and (...).
    """
    if int(num) != num or num < 1:
        raise ValueError(f"num must be a whole number >= 1, not {num!r}")
    lo, hi = _transition(transition)
    top = column.top_pressure[..., None]
    bottom = np.maximum(column.onset_pressure, column.top_pressure)[..., None]
    edges = top + (bottom - top) * np.linspace(0.0, 1.0, int(num) + 1)
    # the transition's ends are edges too, so the garnet share is linear in every
    # interval, and it is cut finer: the coefficients of Yb and Lu change tenfold across it
    ends = np.clip(np.linspace(lo, hi, _BAND + 1), top, bottom)
    edges = np.sort(np.concatenate([edges, ends], axis=-1), axis=-1)
    _, fraction = column.profile(edges)
    return melt_along_path(edges, fraction, melting_region=column._query.melting_region,
                           source=source, transition=transition)


def melt_along_path(
    pressure,
    melt_fraction,
    *,
    melting_region: str = "column",
    source="workman_hart_2005",
    transition: tuple[float, float] = DEFAULT_TRANSITION,
    coefficients=None,
    segments=None,
) -> TraceElements:
    """Pooled rare-earth elements of a melting path given at interval edges.

    Parameters
    ----------
    pressure : (..., n+1) GPa, interval edges from the top of melting (index 0) down to
        the onset (index -1), increasing.
    melt_fraction : (..., n+1), F at the edges (the onset's value counts as made in the
        deepest interval, as in ``MeltColumn.path``).
    melting_region, source, transition : as for :func:`pooled_trace_elements`.
    coefficients : optional (5, 10) mineral/melt coefficients (``tables.MINERALS`` x
        elements); default the packaged table.
    segments : optional ``{"spinel": FaciesSegments, "garnet": FaciesSegments}``;
        default the packaged mineralogy.
    """
    if melting_region not in MELTING_REGIONS:
        raise ValueError(f"unknown melting_region {melting_region!r}; "
                         "choose 'column' or 'triangle'")
    lo, hi = _transition(transition)
    d = partition_coefficients() if coefficients is None else np.asarray(coefficients, float)
    segs = facies_segments() if segments is None else segments
    # rising order: index 0 the deepest interval
    p = np.asarray(pressure, float)[..., ::-1]
    f_edges = np.array(melt_fraction, float)[..., ::-1]
    f_edges[..., 0] = 0.0
    made = np.maximum(np.diff(f_edges, axis=-1), 0.0)
    c0 = _source(source)
    garnet = np.clip((p - lo) / (hi - lo), 0.0, 1.0)  # at the edges
    steps = _steps(made, garnet, d, segs)
    return _pool(c0, steps, made, p, melting_region, _first_melt(p[..., 0], lo, hi, d, segs))


def _transition(transition):
    lo, hi = (float(v) for v in transition)
    if not (np.isfinite(lo) and np.isfinite(hi) and 0.0 <= lo < hi):
        raise ValueError(f"transition must be (p_lo, p_hi) GPa with 0 <= p_lo < p_hi, "
                         f"not {transition!r}")
    return lo, hi


def _source(source) -> np.ndarray:
    if isinstance(source, str):
        return source_composition(source)
    if isinstance(source, dict):
        missing = [e for e in ELEMENTS if e not in source]
        if missing:
            raise ValueError(f"source has no value for {missing[0]}")
        source = [source[e] for e in ELEMENTS]
    c0 = np.asarray(source, float)
    if c0.shape[-1:] != (len(ELEMENTS),) or not np.all(np.isfinite(c0)) or np.any(c0 <= 0):
        raise ValueError(f"source must hold {len(ELEMENTS)} finite concentrations > 0 (ppm) "
                         f"in the order {', '.join(ELEMENTS)}")
    return c0


def _bulk(segs, d, x):
    """Bulk D0 (1 - x) and Shaw's P of both facies at extraction ``x``, (..., e) each."""
    out = []
    for name in ("spinel", "garnet"):
        s = segs[name]
        m_b, q_b = s.bulk(d)
        b = np.searchsorted(s.start, x, side="right") - 1
        dx = (x - s.start[b])[..., None]
        out.append((np.maximum(m_b[b] - dx * q_b[b], 1e-300), q_b[b]))
    return out


def _shaw_log(x_start, x_end, w_a, w_b, d, segs):
    """One Shaw (1970) step from ``x_start`` to ``x_end``: ``(log ratio, integral, D0)``.

    Flat inputs (N,), outputs (N, e). ``log ratio`` is log(C_s after / C_s before);
    ``integral`` is the integral over the step of the residue's element mass, dX, per
    unit of that mass at the start: (1 - X_s) D0 [1 - (1 - P f / D0)^((1 + P)/P)] / (1 + P)
    with f the share of the residue melted. The residue's bulk D0 and Shaw's P are those
    at ``x_start``, kept over the step: exact while no mineral runs out within it and the
    garnet share (``w_a``, ``w_b`` at the step's deep and shallow ends) is constant. Where
    it changes, D0 is the logarithmic mean of its values at the two ends, the exact mean
    of 1/D for D linear across the step.
    """
    remaining = np.maximum(1.0 - x_start, 1e-300)[:, None]
    f = np.clip((x_end - x_start)[:, None] / remaining, 0.0, _LAST)
    (m_sp, q_sp), (m_gt, q_gt) = _bulk(segs, d, np.minimum(x_start, 1.0))
    d0 = (m_sp + w_a[:, None] * (m_gt - m_sp)) / remaining
    varies = np.nonzero(np.abs(w_b - w_a) > 1e-9)[0]
    if varies.size:  # garnet share linear across the step: log-mean of D
        d_a = d0[varies]
        d_b = (m_sp[varies] + w_b[varies, None] * (m_gt[varies] - m_sp[varies])) \
            / remaining[varies]
        ratio = d_b / d_a
        even = np.abs(ratio - 1.0) < 1e-6
        d0[varies] = np.where(even, 0.5 * (d_a + d_b), (d_b - d_a) / np.log(
            np.where(even, 2.0, ratio)))
    big_p = q_sp + (0.5 * (w_a + w_b))[:, None] * (q_gt - q_sp)
    big_p[np.abs(big_p) < 1e-12] = 1e-12
    log_base = np.log1p(-np.minimum(big_p * f / d0, _LAST)) / big_p
    integral = remaining * d0 * -np.expm1(log_base * (1.0 + big_p)) / (1.0 + big_p)
    return log_base - np.log1p(-f), integral, d0


def _steps(made, garnet, d, segs):
    """Per interval: log of the residue's change, the step melt over C_s at the start,
    and the residue's element mass integrated over the step (dX) per unit at the start.

    A step that passes a break of the mineralogy (a mineral running out in either facies)
    is taken as up to ``_PIECES`` Shaw steps, from break to break; so each is exact for a
    path whose intervals hold fewer breaks than that. Arrays (..., n, e).
    """
    shape = made.shape
    x = (np.cumsum(made, axis=-1) - made).ravel()  # extracted before each step
    x_end = x + made.ravel()
    w_a, w_b = garnet[..., :-1].ravel(), garnet[..., 1:].ravel()
    breaks = np.unique(np.concatenate([s.start[1:] for s in segs.values()] + [[np.inf]]))
    nxt = breaks[np.searchsorted(breaks, x, side="right")]
    at = np.minimum(nxt, x_end)
    log_residue, integral, d0 = _shaw_log(x, at, w_a, w_b, d, segs)
    for piece_no in range(1, _PIECES):  # the rest, from break to break, where any
        go = np.nonzero(at < x_end)[0]
        if not go.size:
            break
        start = at[go]
        last = piece_no == _PIECES - 1
        end = x_end[go] if last else np.minimum(
            breaks[np.searchsorted(breaks, start, side="right")], x_end[go])
        piece, piece_integral, _ = _shaw_log(start, end, w_a[go], w_b[go], d, segs)
        # residue element mass at the piece's start, per unit at the step's start
        start_mass = np.exp(log_residue[go]) * ((1.0 - start)
                                                / np.maximum(1.0 - x[go], 1e-300))[:, None]
        integral[go] += start_mass * piece_integral
        log_residue[go] += piece
        at[go] = end
    # step melt from the step's mass balance; C0/D0 where (almost) nothing melts
    made_flat = x_end - x
    enough = made_flat > 1e-9 * (1.0 - x)
    gain = 1.0 / d0
    left = (1.0 - x[enough])[:, None] - np.exp(log_residue[enough]) \
        * (1.0 - x_end[enough])[:, None]
    gain[enough] = left / made_flat[enough, None]
    e = d.shape[-1]
    return (log_residue.reshape(*shape, e), gain.reshape(*shape, e),
            integral.reshape(*shape, e))


def _first_melt(onset, lo, hi, d, segs):
    """C/C0 of the first drop of melt at the onset, (..., e): the no-melt limit."""
    w = np.clip((onset - lo) / (hi - lo), 0.0, 1.0)[..., None]
    (m_sp, _), (m_gt, _) = _bulk(segs, d, np.zeros(np.shape(onset)))
    return 1.0 / ((1.0 - w) * m_sp + w * m_gt)


def _pool(c0, steps, made, p, melting_region, first):
    """Pooled melt, residue and melt mass (docs/model.md, "Rare-earth elements ...")."""
    log_residue, gain, integral = steps
    cum = np.cumsum(log_residue, axis=-2)
    before = np.exp(cum - log_residue)  # residue concentration before each step over C0
    x = np.cumsum(made, axis=-1) - made
    if melting_region == "triangle":
        # streamlines turn uniformly in P; P is linear in X within a step, so the mean
        # residue mass a step holds is integral / made (mass at its start where none made)
        width = -np.diff(p, axis=-1)  # p runs from the onset up
        start_mass = before * (1.0 - x)[..., None]
        enough = (made > 1e-9 * (1.0 - x))[..., None]
        mean_mass = np.where(enough, start_mass * integral
                             / np.where(enough, made[..., None], 1.0), start_mass)
        span = width.sum(axis=-1)
        total = np.einsum("...k,...k->...", width, x + 0.5 * made)  # int X dP
        melt_sum = np.einsum("...k,...ke->...e", width, 1.0 - mean_mass)
        residue_mass = span - total
        rel_res = np.einsum("...k,...ke->...e", width, mean_mass) / np.where(
            residue_mass > 0.0, residue_mass, 1.0)[..., None]
        inside = span > 0.0
        melt_mass = np.where(inside, total / np.where(inside, span, 1.0), 0.0)
        rel_res = np.where(inside[..., None], rel_res, 1.0)
    else:
        total = made.sum(axis=-1)
        melt_sum = np.einsum("...k,...ke->...e", made, before * gain)
        melt_mass = np.minimum(total, 1.0)
        rel_res = np.exp(cum[..., -1, :])
    has = (total > 0.0)[..., None]
    rel_melt = np.where(has, melt_sum / np.where(has, total[..., None], 1.0), first)
    c0b = np.broadcast_to(c0, rel_melt.shape)
    return TraceElements(ELEMENTS, rel_melt * c0b, rel_res * c0b, melt_mass, c0b)
