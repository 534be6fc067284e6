"""The quadrature cross-check of the evidence, for scenarios with at most 3 free parameters.

    Z = integral of L(theta) pi(theta) d theta

is taken with the midpoint rule on a tensor grid in parameter space (log space for a
log-uniform prior), node weights pi(theta_i) * cell volume, over a box that holds the
posterior mass: the axes of `inversion.fitting.grid` (`parameter_axis`), the one builder
that the survey's grid posteriors use too. Parameter space rather than the prior's
probability space because a posterior pushed into the tail of a prior, as when a lid
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

import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

from ..fitting.grid import MASS_CUT, coordinate, evaluate, parameter_grid, widen_box

__all__ = ["MAX_QUADRATURE_DIM", "QuadratureResult", "box_from_samples",
           "quadrature_evidence"]

#: Largest number of free parameters integrated on a grid (cost grows as nodes^ndim).
MAX_QUADRATURE_DIM = 3
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
        to_t, from_t, _ = coordinate(prior)
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
        grid = parameter_grid(logpost.names, priors, box, nodes)
        log_mass = evaluate(logpost.log_likelihood, grid) + grid.log_weights()
        wider = widen_box(log_mass, grid, box)
        if wider == box:
            break
        box = wider
    log_z = float(logsumexp(log_mass))
    half = parameter_grid(logpost.names, priors, box, nodes // 2)
    log_z_half = half.log_integrate(evaluate(logpost.log_likelihood, half))
    return QuadratureResult(log_z, abs(log_z - log_z_half), box, grid.size,
                            time.perf_counter() - started)


def _clip(prior, low: float, high: float) -> tuple[float, float]:
    p_low, p_high = prior.bounds
    return (max(float(low), p_low), min(float(high), p_high))
