"""The quadrature cross-check of the evidence, for scenarios with at most 3 free parameters.

    Z = integral of L(theta) pi(theta) d theta

is taken with the midpoint rule on a tensor grid in parameter space (log space for a
log-uniform prior), node weights pi(theta_i) * cell volume, over a box that holds the
posterior mass. Parameter space rather than the prior's probability space
(`inversion.fitting.grid`) because a posterior pushed into the tail of a prior, as when a lid
held at 100 km drives the solidus offset to its bound, fills a sliver of probability
space that no regular grid there resolves, while it is smooth in parameter units.

The box comes from the nested samples (`box_from_samples`); if the integrand is still not
negligible at a face of the box that is not a bound of the prior, that face is moved out
and the grid recomputed, so a box drawn too tight cannot truncate the integral unnoticed.
The error is estimated as the change from a grid of half the resolution (the midpoint
rule converges quadratically, so this over-states it). This route shares nothing with
nested sampling but the likelihood, which makes it an independent check.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

from ..fitting.grid import MASS_CUT, Axis, Grid, evaluate
from ..study.priors import LogUniform

__all__ = ["MAX_QUADRATURE_DIM", "QuadratureResult", "box_from_samples",
           "quadrature_evidence"]

#: Largest number of free parameters integrated on a grid (cost grows as nodes^ndim).
MAX_QUADRATURE_DIM = 3
#: A box face is far enough out when the grid's edge nodes there hold less than e^-15
#: of the fullest node's posterior mass along that axis (far below the quadrature error).
EDGE_CUT = 15.0
#: Nodes per axis at most: on the demo, 141 nodes per axis gave ln Z of a 2-parameter
#: scenario to 2e-4 (change from half the resolution), so more only costs time.
MAX_NODES = 200
_MARGIN = 0.25  # pad the nested samples' extent by this share of it on each side
_WIDENINGS = 4


@dataclass(frozen=True)
class QuadratureResult:
    """ln Z by grid quadrature.

    Attributes
    ----------
    log_evidence : float
    error : float
        |ln Z - ln Z on a grid of half the resolution| (an upper estimate).
    box : list of (float, float)
        The integrated box, one ``(low, high)`` per parameter, parameter units.
    points : int
        Nodes of the final grid.
    seconds : float
        Wall time.
    """

    log_evidence: float
    error: float
    box: list
    points: int
    seconds: float


def box_from_samples(priors: Sequence, points: np.ndarray, log_weights: np.ndarray,
                     ) -> list[tuple[float, float]]:
    """Box around the weighted posterior points, in parameter units.

    Points within `inversion.fitting.grid.MASS_CUT` (e^-25) of the heaviest are kept; their extent
    (in log units for a log-uniform prior) is padded by a quarter of itself on each side
    and clipped to the prior's support.

    Parameters
    ----------
    priors : sequence
        One prior per column of `points`.
    points : numpy.ndarray
        Shape ``(m, ndim)``, parameter units.
    log_weights : numpy.ndarray
        Shape ``(m,)``.
    """
    keep = log_weights >= np.max(log_weights) - MASS_CUT
    box = []
    for j, prior in enumerate(priors):
        to_t, from_t = _coordinate(prior)
        t = to_t(points[keep, j])
        low, high = float(np.min(t)), float(np.max(t))
        pad = max(_MARGIN * (high - low), 1e-9 * max(1.0, abs(low)))
        box.append(_clip(prior, float(from_t(low - pad)), float(from_t(high + pad))))
    return box


def quadrature_evidence(logpost, box: Sequence[tuple[float, float]], *,
                        grid_points: int = 125_000) -> QuadratureResult:
    """ln Z of `logpost` on a grid over `box`, widened until no face truncates the mass.

    Parameters
    ----------
    logpost : LogPosterior-like
        ``names``, ``priors`` (with ``logpdf`` and ``bounds``) and ``log_likelihood``.
    box : sequence of (float, float)
        Starting box in parameter units, e.g. from `box_from_samples`.
    grid_points : int
        Nodes of the grid (per axis: ``grid_points ** (1 / ndim)``, at most `MAX_NODES`).
    """
    started = time.perf_counter()
    priors = list(logpost.priors)
    nodes = min(MAX_NODES, max(8, int(round(grid_points ** (1.0 / len(priors))))))
    box = [_clip(p, *b) for p, b in zip(priors, box, strict=True)]
    for _ in range(_WIDENINGS + 1):
        grid = _grid(logpost.names, priors, box, nodes)
        log_mass = evaluate(logpost.log_likelihood, grid) + grid.log_weights()
        wider = _widen(log_mass, priors, box)
        if wider == box:
            break
        box = wider
    log_z = float(logsumexp(log_mass))
    half = _grid(logpost.names, priors, box, nodes // 2)
    log_z_half = half.log_integrate(evaluate(logpost.log_likelihood, half))
    return QuadratureResult(log_z, abs(log_z - log_z_half), box, grid.size,
                            time.perf_counter() - started)


def _coordinate(prior):
    """Integration coordinate t(theta) and its inverse: log for log-uniform priors."""
    if isinstance(prior, LogUniform):
        return np.log, np.exp
    return (lambda x: np.asarray(x, float)), (lambda t: np.asarray(t, float))


def _clip(prior, low: float, high: float) -> tuple[float, float]:
    p_low, p_high = prior.bounds
    return (max(float(low), p_low), min(float(high), p_high))


def _axis(name: str, prior, span: tuple[float, float], nodes: int) -> Axis:
    """Midpoint nodes over `span` in the prior's coordinate; weights pi(theta) d theta."""
    to_t, from_t = _coordinate(prior)
    t_low, t_high = (float(v) for v in to_t(np.asarray(span, float)))
    width = (t_high - t_low) / nodes
    t = t_low + width * (np.arange(nodes) + 0.5)
    theta = np.asarray(from_t(t), float)
    # d theta = (d theta / d t) d t; for t = ln theta, d theta / d t = theta
    log_jacobian = np.log(theta) if isinstance(prior, LogUniform) else 0.0
    log_w = np.asarray(prior.logpdf(theta), float) + log_jacobian + math.log(width)
    return Axis(name, theta, log_w)


def _grid(names, priors, box, nodes: int) -> Grid:
    return Grid(tuple(_axis(n, p, b, nodes) for n, p, b in zip(names, priors, box,
                                                                strict=True)))


def _widen(log_mass: np.ndarray, priors, box: list) -> list:
    """The box with every face that still holds posterior mass moved out by its width."""
    out = []
    for j, (prior, (low, high)) in enumerate(zip(priors, box, strict=True)):
        other = tuple(k for k in range(len(box)) if k != j)
        marginal = logsumexp(log_mass, axis=other) if other else log_mass
        cut = float(np.max(marginal)) - EDGE_CUT
        p_low, p_high = prior.bounds
        to_t, from_t = _coordinate(prior)
        t_low, t_high = (float(v) for v in to_t(np.asarray([low, high], float)))
        width = t_high - t_low
        if low > p_low and marginal[0] > cut:
            low = float(from_t(t_low - width))
        if high < p_high and marginal[-1] > cut:
            high = float(from_t(t_high + width))
        out.append(_clip(prior, low, high))
    return out
