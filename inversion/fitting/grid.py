"""Posteriors and evidence by quadrature on a tensor grid, for problems with few parameters.

With at most three free parameters the vectorised forward model makes a grid posterior
exact to quadrature accuracy and much cheaper than MCMC. The integrals are taken in the
probability space of the priors: with u_j = F_j(theta_j) (each prior's CDF) the prior
becomes uniform on the unit cube, and

    Z = integral of L(theta) pi(theta) d theta = integral over [0, 1]^d of L(ppf(u)) du,

so normalised priors of every family (truncated or not) need no density factor and no
Jacobian. The midpoint rule is used on a box of the cube that holds the posterior mass;
outside it the integrand is negligible by construction (`find_box`). The error of ln Z is
estimated as the difference between the grid and a grid of half the resolution (the
midpoint rule converges at least quadratically, so this over-states the error).

Two users: the evidence cross-check of scenario comparison and the per-site posteriors
and marginal likelihoods of a survey (which integrates site-level parameters out for
each node of an area-wide axis, see `Grid.log_integrate`).

Examples
--------
>>> from lidmelt.inversion.study.priors import Normal
>>> axis = prior_axis("x", Normal(0.0, 1.0), (0.0, 1.0), 400)
>>> grid = Grid((axis,))
>>> # a unit-variance Gaussian likelihood against a N(0, 1) prior: Z = N(0.5; 0, 2)
>>> log_like = -0.5 * (grid.points()[:, 0] - 0.5) ** 2 - 0.5 * np.log(2 * np.pi)
>>> round(float(grid.log_integrate(log_like.reshape(grid.shape))), 4)
-1.328
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

__all__ = [
    "Axis",
    "Grid",
    "GridPosterior",
    "evaluate",
    "find_box",
    "grid_posterior",
    "prior_axis",
]

#: Nodes with log-posterior below the maximum minus this hold negligible mass (e^-25).
MASS_CUT = 25.0
#: Default size of the final grid (points): 50 per axis in 3-D, ln Z to about 0.005 on the demo.
MAX_POINTS = 125_000
# Points per call of the log-likelihood: ~2000 keeps the forward model's arrays in cache
# (on the demo, 2048-point calls ran 5-9x faster than 65536-point ones).
_CHUNK = 2048


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
        Log of the prior probability each node stands for, shape ``(m,)``; the weights
        sum to the prior mass of the axis' span.
    u : numpy.ndarray or None
        Node positions in prior probability (CDF) space, shape ``(m,)``, for axes made by
        `prior_axis`.
    prior : object or None
        The prior behind a `prior_axis` (for `GridPosterior.quantile`).
    """

    name: str
    values: np.ndarray
    log_weights: np.ndarray
    u: np.ndarray | None = None
    prior: object | None = None

    @property
    def size(self) -> int:
        return int(self.values.size)


def prior_axis(name: str, prior, box: tuple[float, float], nodes: int) -> Axis:
    """Midpoint-rule axis over ``box = (u_low, u_high)`` of a prior's probability space.

    Parameters
    ----------
    name : str
    prior : inversion.study.priors.Prior
        Needs ``ppf``.
    box : (float, float)
        Part of [0, 1] to cover.
    nodes : int
        Number of equal cells (one node at the centre of each).
    """
    low, high = float(box[0]), float(box[1])
    if not 0.0 <= low < high <= 1.0:
        raise ValueError(f"box {box!r} must satisfy 0 <= low < high <= 1")
    width = (high - low) / nodes
    u = low + width * (np.arange(nodes) + 0.5)
    values = np.asarray(prior.ppf(u), dtype=float)
    return Axis(name, values, np.full(nodes, np.log(width)), u=u, prior=prior)


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


def evaluate(log_f: Callable[[np.ndarray], np.ndarray], grid: Grid,
             chunk: int = _CHUNK) -> np.ndarray:
    """Evaluate a vectorised function of ``(n, ndim)`` points on every node of `grid`.

    Returns the values reshaped to ``grid.shape`` (NaN is turned into ``-inf``).
    """
    points = grid.points()
    out = np.empty(points.shape[0])
    for start in range(0, points.shape[0], chunk):
        out[start:start + chunk] = log_f(points[start:start + chunk])
    return np.where(np.isnan(out), -np.inf, out).reshape(grid.shape)


def find_box(log_like: Callable[[np.ndarray], np.ndarray], names: Sequence[str],
             priors: Sequence, *, nodes: int = 24, rounds: int = 6,
             start: Sequence[tuple[float, float]] | None = None) -> list[tuple[float, float]]:
    """Box of prior probability space that holds the posterior mass.

    Zooms in from `start` (default the whole unit cube): each round evaluates a coarse
    grid, keeps the cells whose log-posterior is within `MASS_CUT` of the largest, and
    takes their extent plus two cells on each side; it stops when the box stops
    shrinking. A posterior narrower than a coarse cell is still found, because the
    mass cut is wide and the margin keeps the neighbouring cells.

    Returns
    -------
    list of (float, float)
        One ``(u_low, u_high)`` per parameter.
    """
    box = [tuple(b) for b in (start or [(0.0, 1.0)] * len(names))]
    for _ in range(rounds):
        grid = Grid(tuple(prior_axis(n, p, b, nodes) for n, p, b in zip(names, priors, box)))
        values = evaluate(log_like, grid)
        if not np.isfinite(values).any():
            return box
        keep = values >= values.max() - MASS_CUT
        new_box = []
        for j, (low, high) in enumerate(box):
            other = tuple(k for k in range(len(box)) if k != j)
            used = np.flatnonzero(keep.any(axis=other))
            cell = (high - low) / nodes
            new_box.append((max(0.0, low + (used[0] - 2) * cell),
                            min(1.0, low + (used[-1] + 3) * cell)))
        shrink = max((h - l) / (bh - bl) for (l, h), (bl, bh) in zip(new_box, box))
        box = new_box
        if shrink > 0.7:
            break
    return box


@dataclass(frozen=True)
class GridPosterior:
    """A posterior tabulated on a grid in prior probability space.

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
        """Posterior quantiles of one parameter (linear CDF within each cell)."""
        axis = self.grid.axes[self.names.index(name)]
        _, mass = self.marginal(name)
        half = (axis.u[1] - axis.u[0]) / 2 if axis.size > 1 else 0.0
        edges = np.concatenate([[axis.u[0] - half], axis.u + half])
        cdf = np.concatenate([[0.0], np.cumsum(mass)])
        u = np.interp(np.asarray(q, float) * cdf[-1], cdf, edges)
        return np.asarray(axis.prior.ppf(u), dtype=float)

    def mean(self, name: str) -> float:
        values, mass = self.marginal(name)
        return float(np.sum(values * mass) / np.sum(mass))

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        """Posterior draws, shape ``(size, ndim)``: a node by its weight, then a uniform
        position within its cell (in probability space)."""
        weights = self.weights().ravel()
        index = rng.choice(weights.size, size=size, p=weights / weights.sum())
        cells = np.unravel_index(index, self.grid.shape)
        out = np.empty((size, len(self.names)))
        for j, axis in enumerate(self.grid.axes):
            width = axis.u[1] - axis.u[0] if axis.size > 1 else 0.0
            u = axis.u[cells[j]] + width * (rng.random(size) - 0.5)
            out[:, j] = axis.prior.ppf(np.clip(u, 0.0, 1.0))
        return out

    def map_point(self) -> dict[str, float]:
        """The node of largest posterior density (in parameter space)."""
        density = self.log_likelihood + sum(
            np.expand_dims(np.asarray(a.prior.logpdf(a.values), float),
                           [k for k in range(len(self.names)) if k != j])
            for j, a in enumerate(self.grid.axes))
        index = np.unravel_index(np.nanargmax(density), self.grid.shape)
        return {a.name: float(a.values[i]) for a, i in zip(self.grid.axes, index)}


def grid_posterior(log_like: Callable[[np.ndarray], np.ndarray], names: Sequence[str],
                   priors: Sequence, *, max_points: int = MAX_POINTS,
                   box: Sequence[tuple[float, float]] | None = None) -> GridPosterior:
    """Posterior and ln Z of a problem with few parameters, by grid quadrature.

    Parameters
    ----------
    log_like : callable
        ``(n, ndim)`` parameter values -> ``(n,)`` log-likelihood (``-inf`` allowed).
        `inversion.LogPosterior.log_likelihood` is one.
    names, priors : sequences
        Free parameters and their priors (with ``ppf``, ``logpdf``), in column order.
    max_points : int
        Size of the final grid (its resolution per axis is ``max_points ** (1/ndim)``).
    box : sequence of (float, float), optional
        Box of prior probability space holding the posterior mass (e.g. from nested
        samples); found by `find_box` when omitted.

    Returns
    -------
    GridPosterior
    """
    names, priors = tuple(names), tuple(priors)
    if not names:
        raise ValueError("a grid posterior needs at least one free parameter")
    box = list(box) if box is not None else find_box(log_like, names, priors)
    nodes = max(8, int(round(max_points ** (1.0 / len(names)))))
    grid = Grid(tuple(prior_axis(n, p, b, nodes) for n, p, b in zip(names, priors, box)))
    values = evaluate(log_like, grid)
    log_z = grid.log_integrate(values)
    # the same box at half the resolution: every other cell, twice as wide
    half = Grid(tuple(prior_axis(n, p, b, nodes // 2) for n, p, b in zip(names, priors, box)))
    log_z_half = half.log_integrate(evaluate(log_like, half))
    return GridPosterior(grid, values, log_z, abs(log_z - log_z_half))
