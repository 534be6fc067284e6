"""Posteriors and evidence by quadrature on a tensor grid, for problems with few parameters.

With at most three free parameters the vectorised forward model makes a grid posterior
exact to quadrature accuracy and much cheaper than MCMC. Every axis is built one way
(`parameter_axis`): the midpoint rule in parameter units (log units for a log-uniform
prior), each node weighted by pi(theta) times its cell volume, so that

    Z = integral of L(theta) pi(theta) d theta ~= sum_i L(theta_i) pi(theta_i) |cell_i|.

Parameter units rather than the prior's probability space (u = F(theta)): a posterior
pushed deep into the tail of a normal prior fills a sliver of probability space that no
regular grid there resolves, while it is smooth in parameter units.

The grid covers a box that holds the posterior mass: `find_box` zooms in on it from the
prior's range, and `widen_box` pushes out every face that is not a bound of the prior
while its edge nodes still hold mass, so a box drawn too tight cannot truncate the
integral unnoticed. The error of ln Z is estimated as the difference between the grid
and a grid of half the resolution (the midpoint rule converges quadratically, so this
over-states the error).

Users: the evidence cross-check of scenario comparison (`inversion.comparison.quadrature`)
and the per-site posteriors and marginal likelihoods of a survey (which integrates
site-level parameters out for each node of an area-wide axis, see `Grid.log_integrate`).

Examples
--------
>>> from lidmelt.inversion.study.priors import Normal
>>> axis = parameter_axis("x", Normal(0.0, 1.0), (-8.0, 8.0), 400)
>>> grid = Grid((axis,))
>>> # a unit-variance Gaussian likelihood against a N(0, 1) prior: Z = N(0.5; 0, 2)
>>> log_like = -0.5 * (grid.points()[:, 0] - 0.5) ** 2 - 0.5 * np.log(2 * np.pi)
>>> round(float(grid.log_integrate(log_like.reshape(grid.shape))), 4)
-1.328
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

from ..study.priors import LogUniform

__all__ = [
    "Axis",
    "Grid",
    "GridPosterior",
    "coordinate",
    "evaluate",
    "find_box",
    "grid_posterior",
    "parameter_axis",
    "parameter_grid",
    "prior_span",
    "widen_box",
]

#: Nodes with log-posterior below the maximum minus this hold negligible mass (e^-25).
MASS_CUT = 25.0
#: A box face is far enough out when the grid's edge nodes there hold less than e^-15
#: of the fullest node's posterior mass along that axis (far below the quadrature error).
EDGE_CUT = 15.0
#: Default size of the final grid (points): 50 per axis in 3-D, ln Z to about 0.005 on the demo.
MAX_POINTS = 125_000
#: Prior mass left out beyond each end of an unbounded prior's starting range (a normal
#: prior: about 7 sd); `widen_box` still moves a face out when mass lies beyond it.
TAIL = 1e-12
_WIDENINGS = 4  # at most this many outward moves of a face
# Points per call of the log-likelihood: ~2000 keeps the forward model's arrays in cache
# (on the demo, 2048-point calls ran 5-9x faster than 65536-point ones).
_CHUNK = 2048


def coordinate(prior) -> tuple[Callable, Callable, bool]:
    """Integration coordinate t(theta), its inverse, and whether it is log units.

    Log units for a log-uniform prior (its density is flat in ln theta), else the
    parameter itself.
    """
    if isinstance(prior, LogUniform):
        return np.log, np.exp, True
    return (lambda x: np.asarray(x, float)), (lambda t: np.asarray(t, float)), False


def prior_span(prior) -> tuple[float, float]:
    """The prior's bounds, with an infinite end replaced by its 1e-12 quantile (`TAIL`)."""
    low, high = (float(b) for b in prior.bounds)
    if not math.isfinite(low):
        low = float(prior.ppf(TAIL))
    if not math.isfinite(high):
        high = float(prior.ppf(1.0 - TAIL))
    return low, high


def _clip(prior, low: float, high: float) -> tuple[float, float]:
    p_low, p_high = prior.bounds
    return (max(float(low), p_low), min(float(high), p_high))


@dataclass(frozen=True)
class Axis:
    """One quadrature axis: nodes in parameter units and their log quadrature weights.

    Attributes
    ----------
    name : str
        Parameter name.
    values : numpy.ndarray
        Node positions, parameter units, shape ``(m,)``, increasing.
    log_weights : numpy.ndarray
        Log of the prior mass each node stands for, log(pi(theta_i) |cell_i|), shape
        ``(m,)``; zeros for a plain axis of nodes (e.g. a shared Tp axis).
    edges : numpy.ndarray or None
        Cell edges in the integration coordinate (`coordinate`), shape ``(m + 1,)``, for
        axes made by `parameter_axis`.
    prior : object or None
        The prior behind a `parameter_axis`.
    """

    name: str
    values: np.ndarray
    log_weights: np.ndarray
    edges: np.ndarray | None = None
    prior: object | None = None

    @property
    def size(self) -> int:
        return int(self.values.size)

    def to_values(self, t) -> np.ndarray:
        """Integration coordinate -> parameter units."""
        return np.asarray(coordinate(self.prior)[1](np.asarray(t, float)), float)

    @property
    def span(self) -> tuple[float, float]:
        """The covered range in parameter units (outer cell edges)."""
        low, high = self.to_values(self.edges[[0, -1]])
        return float(low), float(high)


def parameter_axis(name: str, prior, span: tuple[float, float], nodes: int) -> Axis:
    """Midpoint-rule axis over `span` (parameter units) with weights pi(theta) |cell|.

    Parameters
    ----------
    name : str
    prior : inversion.study.priors.Prior
        Needs ``logpdf`` (and ``bounds`` for the callers that clip to them).
    span : (float, float)
        ``(low, high)``, finite, parameter units.
    nodes : int
        Number of equal cells in the integration coordinate (one node at each centre).

    Notes
    -----
    With t = ln theta (log-uniform prior), d theta = theta d t, so the weight is
    pi(theta) theta |cell in t|.
    """
    to_t, from_t, in_log = coordinate(prior)
    t_low, t_high = (float(v) for v in to_t(np.asarray(span, float)))
    if not (math.isfinite(t_low) and math.isfinite(t_high) and t_low < t_high):
        raise ValueError(f"span {span!r} of {name} must be finite and increasing")
    width = (t_high - t_low) / nodes
    edges = t_low + width * np.arange(nodes + 1)
    theta = np.asarray(from_t(0.5 * (edges[1:] + edges[:-1])), float)
    log_jacobian = np.log(theta) if in_log else 0.0
    with np.errstate(divide="ignore"):
        log_w = np.asarray(prior.logpdf(theta), float) + log_jacobian + math.log(width)
    return Axis(name, theta, log_w, edges=edges, prior=prior)


@dataclass(frozen=True)
class Grid:
    """Tensor product of axes; points in C order (the last axis varies fastest)."""

    axes: tuple[Axis, ...]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(axis.name for axis in self.axes)

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(axis.size for axis in self.axes)

    @property
    def size(self) -> int:
        return int(np.prod(self.shape))

    def points(self) -> np.ndarray:
        """All nodes, shape ``(size, ndim)``, columns in axis order."""
        mesh = np.meshgrid(*(axis.values for axis in self.axes), indexing="ij")
        return np.stack([m.ravel() for m in mesh], axis=-1)

    def log_weights(self) -> np.ndarray:
        """Log quadrature weight of every node, shape `shape`."""
        total = np.zeros(self.shape)
        for j, axis in enumerate(self.axes):
            total = total + np.expand_dims(axis.log_weights, [k for k in range(len(self.axes))
                                                             if k != j])
        return total

    def log_integrate(self, log_f: np.ndarray, over: Sequence[str] | None = None):
        """log of the prior-weighted integral of exp(`log_f`) over the named axes.

        Parameters
        ----------
        log_f : numpy.ndarray
            Shape `shape` (values at the nodes; ``-inf`` allowed).
        over : sequence of str, optional
            Axes to integrate out (default: all, giving a float).

        Returns
        -------
        float or numpy.ndarray
            Shape of the remaining axes, in their order.
        """
        over = self.names if over is None else tuple(over)
        index = tuple(self.names.index(name) for name in over)
        total = np.asarray(log_f, dtype=float) + self.log_weights()
        result = logsumexp(total, axis=index)
        return float(result) if np.ndim(result) == 0 else result


def parameter_grid(names: Sequence[str], priors: Sequence, box: Sequence, nodes: int) -> Grid:
    """`Grid` of `parameter_axis` axes over `box` (one ``(low, high)`` per parameter)."""
    return Grid(tuple(parameter_axis(n, p, b, nodes)
                      for n, p, b in zip(names, priors, box, strict=True)))


def evaluate(log_f: Callable[[np.ndarray], np.ndarray], grid: Grid,
             chunk: int = _CHUNK) -> np.ndarray:
    """Evaluate a vectorised function of ``(n, ndim)`` points on every node of `grid`.

    Returns the values reshaped to ``grid.shape`` (NaN is turned into ``-inf``).
    """
    points = grid.points()
    out = np.empty(points.shape[0])
    with np.errstate(all="ignore"):  # off-domain points give -inf or NaN, handled here
        for start in range(0, points.shape[0], chunk):
            out[start:start + chunk] = log_f(points[start:start + chunk])
    return np.where(np.isnan(out), -np.inf, out).reshape(grid.shape)


def find_box(log_like: Callable[[np.ndarray], np.ndarray], names: Sequence[str],
             priors: Sequence, *, nodes: int = 24, rounds: int = 6,
             start: Sequence[tuple[float, float] | None] | None = None,
             ) -> list[tuple[float, float]]:
    """Box (parameter units) that holds the posterior mass.

    Zooms in from `start` (default, and for a None entry, `prior_span`): each round
    evaluates a coarse grid, keeps the cells whose log posterior mass is within
    `MASS_CUT` of the largest, and takes their extent plus two cells on each side; a
    kept cell at a face that is not a bound of the prior moves that face out by the
    box's width instead. It stops when the box stops shrinking. A posterior narrower
    than a coarse cell is still found, because the mass cut is wide and the margin keeps
    the neighbouring cells.

    Returns
    -------
    list of (float, float)
        One ``(low, high)`` per parameter, parameter units.
    """
    start = list(start) if start is not None else [None] * len(names)
    box = [_clip(p, *(b if b is not None else prior_span(p))) for p, b in zip(priors, start)]
    for _ in range(rounds):
        grid = parameter_grid(names, priors, box, nodes)
        values = evaluate(log_like, grid) + grid.log_weights()
        if not np.isfinite(values).any():
            return box
        keep = values >= values.max() - MASS_CUT
        new_box, moved = [], False
        for j, axis in enumerate(grid.axes):
            other = tuple(k for k in range(len(box)) if k != j)
            used = np.flatnonzero(keep.any(axis=other))
            edges, (p_low, p_high) = axis.edges, priors[j].bounds
            width = edges[-1] - edges[0]
            low = edges[max(used[0] - 2, 0)]
            high = edges[min(used[-1] + 3, nodes)]
            if used[0] == 0 and box[j][0] > p_low:
                low, moved = edges[0] - width, True
            if used[-1] == nodes - 1 and box[j][1] < p_high:
                high, moved = edges[-1] + width, True
            new_box.append(_clip(priors[j], *(float(v) for v in axis.to_values([low, high]))))
        shrink = max(_width(p, b) / _width(p, a) for p, a, b in zip(priors, box, new_box))
        box = new_box
        if shrink > 0.7 and not moved:
            break
    return box


def _width(prior, box) -> float:
    to_t = coordinate(prior)[0]
    low, high = (float(v) for v in to_t(np.asarray(box, float)))
    return high - low


def widen_box(log_mass: np.ndarray, grid: Grid, box: Sequence[tuple[float, float]],
              ) -> list[tuple[float, float]]:
    """`box` (the grid's) with every face that still holds posterior mass moved out.

    A face moves out by the box's width (in the integration coordinate) when the edge
    nodes there hold more than e^-`EDGE_CUT` of the largest node of the marginal, unless
    it is a bound of the prior.

    Parameters
    ----------
    log_mass : numpy.ndarray
        log(L pi |cell|) at the nodes, shape ``grid.shape``.
    grid : Grid
        Made of `parameter_axis` axes.
    box : sequence of (float, float)
        The box the grid was made on (parameter units); faces not moved are kept as given.
    """
    out = []
    for j, (axis, (low, high)) in enumerate(zip(grid.axes, box, strict=True)):
        other = tuple(k for k in range(len(grid.axes)) if k != j)
        marginal = logsumexp(log_mass, axis=other) if other else log_mass
        cut = float(np.max(marginal)) - EDGE_CUT
        p_low, p_high = axis.prior.bounds
        width = axis.edges[-1] - axis.edges[0]
        if low > p_low and marginal[0] > cut:
            low = float(axis.to_values(axis.edges[0] - width))
        if high < p_high and marginal[-1] > cut:
            high = float(axis.to_values(axis.edges[-1] + width))
        out.append(_clip(axis.prior, low, high))
    return out


@dataclass(frozen=True)
class GridPosterior:
    """A posterior tabulated on a grid of `parameter_axis` axes.

    Attributes
    ----------
    grid : Grid
    log_likelihood : numpy.ndarray
        Shape ``grid.shape``.
    log_evidence : float
        ln Z (the mass outside the grid's box is neglected, see `find_box`).
    log_evidence_error : float
        |ln Z - ln Z at half the resolution|, an upper estimate of the quadrature error.
    """

    grid: Grid
    log_likelihood: np.ndarray
    log_evidence: float
    log_evidence_error: float

    @property
    def names(self) -> tuple[str, ...]:
        return self.grid.names

    def weights(self) -> np.ndarray:
        """Posterior probability of every node, shape ``grid.shape``, summing to 1."""
        log_p = self.log_likelihood + self.grid.log_weights() - self.log_evidence
        return np.exp(log_p)

    def marginal(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """Node values and posterior probability of each node along one axis."""
        j = self.names.index(name)
        other = tuple(k for k in range(len(self.names)) if k != j)
        return self.grid.axes[j].values, self.weights().sum(axis=other)

    def quantile(self, name: str, q) -> np.ndarray:
        """Posterior quantiles of one parameter (CDF linear within each cell, in the
        integration coordinate)."""
        axis = self.grid.axes[self.names.index(name)]
        _, mass = self.marginal(name)
        cdf = np.concatenate([[0.0], np.cumsum(mass)])
        t = np.interp(np.asarray(q, float) * cdf[-1], cdf, axis.edges)
        return axis.to_values(t)

    def mean(self, name: str) -> float:
        values, mass = self.marginal(name)
        return float(np.sum(values * mass) / np.sum(mass))

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        """Posterior draws, shape ``(size, ndim)``: a node by its weight, then a uniform
        position within its cell (in the integration coordinate)."""
        weights = self.weights().ravel()
        index = rng.choice(weights.size, size=size, p=weights / weights.sum())
        cells = np.unravel_index(index, self.grid.shape)
        out = np.empty((size, len(self.names)))
        for j, axis in enumerate(self.grid.axes):
            low, high = axis.edges[cells[j]], axis.edges[cells[j] + 1]
            out[:, j] = axis.to_values(low + (high - low) * rng.random(size))
        return out

    def map_point(self) -> dict[str, float]:
        """The node of largest posterior density (in parameter space)."""
        with np.errstate(divide="ignore"):
            density = self.log_likelihood + sum(
                np.expand_dims(np.asarray(a.prior.logpdf(a.values), float),
                               [k for k in range(len(self.names)) if k != j])
                for j, a in enumerate(self.grid.axes))
        index = np.unravel_index(np.nanargmax(density), self.grid.shape)
        return {a.name: float(a.values[i]) for a, i in zip(self.grid.axes, index)}


def grid_posterior(log_like: Callable[[np.ndarray], np.ndarray], names: Sequence[str],
                   priors: Sequence, *, max_points: int = MAX_POINTS,
                   box: Sequence[tuple[float, float] | None] | None = None,
                   max_nodes: int | None = None) -> GridPosterior:
    """Posterior and ln Z of a problem with few parameters, by grid quadrature.

    Parameters
    ----------
    log_like : callable
        ``(n, ndim)`` parameter values -> ``(n,)`` log-likelihood (``-inf`` allowed).
        `inversion.LogPosterior.log_likelihood` is one.
    names, priors : sequences
        Free parameters and their priors (with ``logpdf``, ``bounds``, ``ppf``), in
        column order.
    max_points : int
        Size of the final grid (its resolution per axis is ``max_points ** (1/ndim)``).
    box : sequence of (float, float), optional
        Starting box in parameter units (e.g. from nested samples; a None entry: the
        prior's range); `find_box` zooms in from it.
    max_nodes : int, optional
        Cap on the nodes per axis.

    Returns
    -------
    GridPosterior
        On the box `find_box` gave, widened (`widen_box`) while a face held mass.
    """
    names, priors = tuple(names), tuple(priors)
    if not names:
        raise ValueError("a grid posterior needs at least one free parameter")
    box = find_box(log_like, names, priors, start=box)
    nodes = max(8, int(round(max_points ** (1.0 / len(names)))))
    nodes = min(nodes, max_nodes) if max_nodes else nodes
    for _ in range(_WIDENINGS + 1):
        grid = parameter_grid(names, priors, box, nodes)
        values = evaluate(log_like, grid)
        wider = widen_box(values + grid.log_weights(), grid, box)
        if wider == box or not np.isfinite(values).any():
            break
        box = wider
    log_z = grid.log_integrate(values)
    # the same box at half the resolution: every other cell, twice as wide
    half = parameter_grid(names, priors, box, nodes // 2)
    log_z_half = half.log_integrate(evaluate(log_like, half))
    return GridPosterior(grid, values, log_z, abs(log_z - log_z_half))
