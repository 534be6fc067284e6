"""Joint mode: combine the sites' Tp likelihoods into the area-wide answer.

Sites are independent given the area-wide parameters, so with L_i(t) the marginal
likelihood of site i at potential temperature t (its own lid and other parameters
integrated out, `inversion.survey.job`):

shared Tp (one temperature for the whole area)
    p(t | D) is proportional to pi(t) prod_i L_i(t).
hierarchical (site temperatures t_i ~ N(mu, tau^2), truncated to the Tp axis)
    p(mu, tau | D) is proportional to pi(mu) pi(tau) prod_i I_i(mu, tau), with
    I_i(mu, tau) = integral of L_i(t) N(t; mu, tau^2) dt over the axis
    (e.g. Gelman et al. 2013, Bayesian Data Analysis, section 5.4).

Each log L_i is tabulated on the same equally spaced axis and is smooth in t, so sums of
them are interpolated by cubic splines between the nodes; the area posteriors are then
grid posteriors (`inversion.fitting.grid`, parameter units). For the second pass
every site gets a log-factor on t that carries what the other sites say:
log prod_{j != i} L_j(t) (shared) or log E[N(t; mu, tau^2) / I_i(mu, tau)] - log pi(t)
over the area posterior (hierarchical); multiplied into the site's own likelihood it
gives the site's posterior within the joint model.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy.interpolate import CubicSpline

from ..fitting.grid import MASS_CUT, GridPosterior, grid_posterior
from .job import TP

__all__ = ["TENSION_P", "AreaPosterior", "alone_quantiles", "combine_hierarchical",
           "combine_shared", "tension_p", "tp_axis"]

#: A site is flagged as in tension with the rest of the area when the two-sided p-value
#: of `tension_p` is below this (about 3 sigma of a normal, common practice).
TENSION_P = 0.003

_TAIL = 1e-7  # prior mass left out beyond each end of the Tp axis
_AREA_POINTS = {1: 4_000, 2: 6_400}  # grid size of the area posterior by dimension
_REFINE = 4  # hierarchical: cells of the fine t axis per interval of the shared axis
_CHUNK = 256  # (mu, tau) points per block of the hierarchical integral (memory bound)
_WEIGHT_CUT = 1e-12  # area nodes below this share of the largest weight are left out


def tp_axis(prior, nodes: int) -> np.ndarray:
    """Equally spaced Tp nodes (degC) spanning the prior but for 1e-7 at each end."""
    low, high = (float(prior.ppf(q)) for q in (_TAIL, 1.0 - _TAIL))
    return np.linspace(low, high, nodes)


@dataclass(frozen=True)
class AreaPosterior:
    """The area-wide posterior and, per combined site, its second-pass inputs.

    Attributes
    ----------
    posterior : GridPosterior
        Over ``potential_temperature`` (shared) or ``potential_temperature`` (the area
        mean) and ``tp_spread`` (hierarchical).
    hierarchical : bool
    factors : list of (numpy.ndarray, numpy.ndarray)
        Per site (in the order given): Tp nodes (degC) and the log-factor on them.
    boxes : list of (float, float)
        Per site: the Tp range (degC) holding its posterior mass.
    tension : list of float
        Per site: the two-sided p-value of `tension_p` against the rest of the area.
    """

    posterior: GridPosterior
    hierarchical: bool
    factors: list
    boxes: list
    tension: list

    @property
    def sites(self) -> int:
        """Number of sites combined."""
        return len(self.factors)


def alone_quantiles(axis: np.ndarray, profile, prior, q) -> np.ndarray:
    """Quantiles (degC) of one site's Tp posterior on its own, pi(t) L_i(t), from its
    tabulated log-likelihood (trapezoid rule for the CDF on the equally spaced axis)."""
    log_p = _clean([profile])[0] + np.asarray(prior.logpdf(axis), float)
    density = np.exp(log_p - np.max(log_p))
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (density[1:] + density[:-1]))])
    return np.interp(np.asarray(q, float) * cdf[-1], cdf, axis)


def _clean(profiles) -> np.ndarray:
    """Profiles as an array; -inf (off the model's domain) becomes a finite floor."""
    profiles = np.atleast_2d(np.asarray(profiles, float))
    finite = np.where(np.isfinite(profiles), profiles, np.nan)
    floor = np.nanmax(finite, axis=1, keepdims=True) - 1e4  # e^-10000: nothing left
    return np.where(np.isfinite(profiles), np.maximum(profiles, floor), floor)


def _on_axis(spline: CubicSpline, low: float, high: float):
    def log_like(theta: np.ndarray) -> np.ndarray:
        t = theta[:, 0]
        return np.where((t >= low) & (t <= high), spline(t), -np.inf)
    return log_like


def combine_shared(axis: np.ndarray, profiles, prior) -> AreaPosterior:
    """One Tp for every site: pi(t) prod_i L_i(t) (see the module docstring).

    Parameters
    ----------
    axis : numpy.ndarray
        Shared Tp nodes, degC, shape ``(m,)`` (`tp_axis`).
    profiles : array_like
        log L_i at the nodes, shape ``(n_sites, m)``.
    prior : inversion.study.priors.Prior
        The study's Tp prior.
    """
    profiles = _clean(profiles)
    total = profiles.sum(axis=0)
    post = grid_posterior(_on_axis(CubicSpline(axis, total), axis[0], axis[-1]), [TP],
                          [prior], max_points=_AREA_POINTS[1])
    box = post.grid.axes[0].span
    factors = [(axis, total - own) for own in profiles]
    log_prior = np.asarray(prior.logpdf(axis), float)
    tension = [tension_p(own, rest + log_prior) for own, (_, rest)
               in zip(profiles, factors, strict=True)]
    return AreaPosterior(post, False, factors, [box] * len(profiles), tension)


def tension_p(own: np.ndarray, reference: np.ndarray) -> float:
    """Two-sided p-value that a site's Tp and the rest of the area's agree.

    With T_site distributed as the site's own Tp likelihood (normalised, flat over the
    axis) and T_rest as the reference density (shared mode: the area posterior from the
    other sites; hierarchical: the predictive density of a site's Tp under the area
    posterior), p = 2 min(P(T_site < T_rest), P(T_site > T_rest)), the probability
    comparison of two independent densities on the same equally spaced axis (a tie
    counts half). A site is flagged when p < `TENSION_P`.

    Parameters
    ----------
    own, reference : numpy.ndarray
        Log densities (any offset) on the same equally spaced nodes, shape ``(m,)``.
    """
    q = np.exp(own - np.max(own))
    r = np.exp(reference - np.max(reference))
    q, r = q / q.sum(), r / r.sum()
    below = np.concatenate([[0.0], np.cumsum(r)[:-1]])  # P(T_rest < node)
    greater = float(np.sum(q * (below + 0.5 * r)))  # P(T_site > T_rest)
    return float(min(1.0, 2.0 * min(greater, 1.0 - greater)))


def combine_hierarchical(axis: np.ndarray, profiles, prior, spread_prior) -> AreaPosterior:
    """Site temperatures around an area mean: posterior of (mean, spread).

    Parameters are those of `combine_shared`, plus the prior of the spread (degC).
    """
    profiles = _clean(profiles)
    model = _Hierarchy(axis, profiles)
    post = grid_posterior(model.log_likelihood, [TP, "tp_spread"], [prior, spread_prior],
                          max_points=_AREA_POINTS[2])
    factors, boxes = model.site_factors(post, prior)
    predictive = model.predictive(post)
    tension = [tension_p(own, predictive) for own in model.log_l]
    return AreaPosterior(post, True, factors, boxes, tension)


class _Hierarchy:
    """The integrals I_i(mu, tau) on a fine t axis (cell masses of the normal)."""

    def __init__(self, axis: np.ndarray, profiles: np.ndarray) -> None:
        low, high = float(axis[0]), float(axis[-1])
        cells = _REFINE * (axis.size - 1)
        self.edges = np.linspace(low, high, cells + 1)
        self.t = 0.5 * (self.edges[1:] + self.edges[:-1])
        log_l = CubicSpline(axis, profiles, axis=1)(self.t)  # (n_sites, cells)
        self.offset = log_l.max(axis=1, keepdims=True)
        self.log_l = log_l
        self.scaled = np.exp(log_l - self.offset)

    def kernel(self, mu: np.ndarray, tau: np.ndarray) -> np.ndarray:
        """Probability of each t cell under N(mu, tau^2) truncated to the axis, (cells, n)."""
        cdf = special.ndtr((self.edges[:, None] - mu[None, :]) / tau[None, :])
        mass = np.diff(cdf, axis=0)
        return mass / mass.sum(axis=0, keepdims=True)

    def log_integrals(self, mu: np.ndarray, tau: np.ndarray) -> np.ndarray:
        """log I_i(mu, tau) for every site and point, shape ``(n_sites, n)``."""
        with np.errstate(divide="ignore"):
            return np.log(self.scaled @ self.kernel(mu, tau)) + self.offset

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        out = np.empty(theta.shape[0])
        for start in range(0, theta.shape[0], _CHUNK):
            mu, tau = theta[start:start + _CHUNK].T
            out[start:start + _CHUNK] = self.log_integrals(mu, tau).sum(axis=0)
        return out

    def predictive(self, post: GridPosterior) -> np.ndarray:
        """log of the area posterior's predictive density of one site's Tp on the fine
        axis: sum over area nodes m of w_m N(t; mu_m, tau_m^2) (truncated to the axis)."""
        weights = post.weights().ravel()
        keep = weights > _WEIGHT_CUT * weights.max()
        points, w = post.grid.points()[keep], weights[keep]
        total = np.zeros(self.t.size)
        for s in range(0, points.shape[0], _CHUNK):
            total += self.kernel(*points[s:s + _CHUNK].T) @ w[s:s + _CHUNK]
        with np.errstate(divide="ignore"):
            return np.log(total)

    def site_factors(self, post: GridPosterior, prior) -> tuple[list, list]:
        """Per site: log E[N(t; mu, tau^2) / I_i] - log pi(t) on t, and its Tp box."""
        weights = post.weights().ravel()
        keep = weights > _WEIGHT_CUT * weights.max()
        points = post.grid.points()[keep]
        chunks = range(0, points.shape[0], _CHUNK)
        # a_im = log w_m - log I_i(m), scaled per site so that the sums cannot overflow
        log_a = np.log(weights[keep])[None, :] - np.concatenate(
            [self.log_integrals(*points[s:s + _CHUNK].T) for s in chunks], axis=1)
        scale = log_a.max(axis=1, keepdims=True)
        total = np.zeros(self.log_l.shape)
        for s in chunks:  # sum_m K(t; m) a_im, one matrix product per block of points
            block = np.exp(log_a[:, s:s + _CHUNK] - scale)
            total += (self.kernel(*points[s:s + _CHUNK].T) @ block.T).T
        width = self.edges[1] - self.edges[0]
        with np.errstate(divide="ignore"):
            log_g = np.log(total) + scale - np.log(width)
        boxes = [self._box(own + g, prior) for own, g in zip(self.log_l, log_g, strict=True)]
        factor = log_g - np.asarray(prior.logpdf(self.t), float)[None, :]
        factor = np.maximum(factor, np.max(factor, axis=1, keepdims=True) - 1e4)
        return [(self.t, f) for f in factor], boxes

    def _box(self, log_density: np.ndarray, prior) -> tuple[float, float]:
        keep = np.flatnonzero(log_density >= np.max(log_density) - MASS_CUT)
        low = self.edges[max(keep[0] - 2, 0)]
        high = self.edges[min(keep[-1] + 3, self.edges.size - 1)]
        p_low, p_high = prior.bounds
        return max(float(low), p_low), min(float(high), p_high)
