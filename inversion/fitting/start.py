"""Starting positions for the walkers and the maximum a posteriori (MAP) point.

Optimisation works in standardised coordinates u = (theta - centre) / scale, so that
Nelder-Mead's initial simplex has a sensible size for parameters as different as Tp
(~1400 degC) and the solidus offset (~0 degC).
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from ..errors import InputError

__all__ = ["N_SEARCHES", "find_map", "map_start", "prior_scale", "prior_start",
           "starting_draws"]

# Stand-in for -log p = +inf in the optimiser (Nelder-Mead copes badly with inf).
_HUGE = 1e300


def prior_scale(priors) -> tuple[np.ndarray, np.ndarray]:
    """Median and half the central 68 % width of each prior, each shape (ndim,)."""
    centre = np.array([float(p.ppf(0.5)) for p in priors])
    scale = np.array([0.5 * float(p.ppf(0.84) - p.ppf(0.16)) for p in priors])
    return centre, np.maximum(scale, 1e-12)


def prior_start(logpost, nwalkers: int, rng: np.random.Generator, *,
                max_rounds: int = 200) -> np.ndarray:
    """Draw walker positions from the prior, redrawing any with zero posterior density.

    Parameters
    ----------
    logpost : LogPosterior
        The vectorised log-posterior (provides `_priors` via `priors`).
    nwalkers : int
        Number of positions.
    rng : numpy.random.Generator
        Source of randomness.
    max_rounds : int
        Redraw rounds before giving up.

    Returns
    -------
    ndarray, shape (nwalkers, ndim)

    Raises
    ------
    InputError
        When no finite-density point is found (e.g. priors outside the model domain).
    """
    priors = logpost.priors
    theta = np.column_stack([p.sample(rng, nwalkers) for p in priors])
    for _ in range(max_rounds):
        bad = ~np.isfinite(_log_prob(logpost, theta))
        if not np.any(bad):
            return theta
        theta[bad] = np.column_stack([p.sample(rng, int(bad.sum())) for p in priors])
    raise InputError(
        "no starting point with finite posterior density was found in the priors; check "
        "that the prior ranges lie inside the forward model's valid domain",
        key="parameters",
    )


def find_map(logpost, starts: np.ndarray, scale: np.ndarray) -> tuple[np.ndarray, float]:
    """Maximise the log-posterior with Nelder-Mead from each start; return the best.

    Parameters
    ----------
    logpost : LogPosterior
        The vectorised log-posterior.
    starts : ndarray, shape (m, ndim)
        Starting points (finite density).
    scale : ndarray, shape (ndim,)
        Typical size of each parameter's uncertainty (sets the simplex).

    Returns
    -------
    theta : ndarray, shape (ndim,)
        The best point found.
    log_posterior : float
        The log-posterior there.
    """
    best_theta, best_value = None, -np.inf
    for start in np.atleast_2d(starts):

        def objective(u, start=start):
            value = _log_prob(logpost, (start + u * scale)[None, :])[0]
            return -value if np.isfinite(value) else _HUGE

        res = optimize.minimize(
            objective, np.zeros_like(start), method="Nelder-Mead",
            # xatol in units of `scale`: 1e-3 of a standard deviation is ample for a MAP.
            options={"xatol": 1e-3, "fatol": 1e-5, "maxiter": 250 * start.size},
        )
        theta = start + res.x * scale
        value = _log_prob(logpost, theta[None, :])[0]
        if value > best_value:
            best_theta, best_value = theta, float(value)
    return best_theta, best_value


#: Nelder-Mead searches of the MAP start, each from a different good prior draw.
N_SEARCHES = 6


def map_start(logpost, nwalkers: int, rng: np.random.Generator, *,
              nsearch: int = 256, nstarts: int = N_SEARCHES) -> tuple[np.ndarray, np.ndarray]:
    """Walkers in a small ball around the MAP, found by a multi-start search.

    Of `nsearch` prior draws (one vectorised call), the best draw and the next best that
    lie at least one prior half-width (68 %) from every draw already chosen start
    `nstarts` Nelder-Mead searches (`starting_draws`); the ball is put around the best
    optimum found. One search from the single best draw can climb a minor mode: a
    4-parameter study (Tp, lid, solidus offset, active upwelling) drawn from the prior
    left walkers stranded in one and ran to the step cap (split R-hat 4.3), which
    several searches from separate basins avoid. The ball has a radius of 1 % of each
    prior's 68 % half-width: small enough to start in the mode, large enough for the
    ensemble moves to spread out within a few autocorrelation times.

    Returns
    -------
    initial : ndarray, shape (nwalkers, ndim)
    map_theta : ndarray, shape (ndim,)
    """
    _, scale = prior_scale(logpost.priors)
    candidates = prior_start(logpost, nsearch, rng)
    starts = starting_draws(candidates, _log_prob(logpost, candidates), scale, nstarts)
    map_theta, _ = find_map(logpost, starts, 0.1 * scale)
    initial = map_theta + 0.01 * scale * rng.standard_normal((nwalkers, map_theta.size))
    for _ in range(200):
        bad = ~np.isfinite(_log_prob(logpost, initial))
        if not np.any(bad):
            break
        # Near a support edge: pull the offending walkers halfway back to the MAP.
        initial[bad] = 0.5 * (initial[bad] + map_theta)
    return initial, map_theta


def starting_draws(candidates: np.ndarray, values: np.ndarray, scale: np.ndarray,
                   n: int) -> np.ndarray:
    """Up to `n` good, well separated draws: best first, then greedily the best draw at
    least one `scale` (standardised distance 1) from every draw already chosen.

    Parameters
    ----------
    candidates : ndarray, shape (m, ndim)
    values : ndarray, shape (m,)
        Log-posterior of each candidate.
    scale : ndarray, shape (ndim,)
    n : int

    Returns
    -------
    ndarray, shape (k, ndim), k <= n
    """
    order = np.argsort(-np.asarray(values), kind="stable")
    chosen = [candidates[order[0]]]
    for i in order[1:]:
        if len(chosen) >= n:
            break
        u = (candidates[i] - np.asarray(chosen)) / scale
        if np.min(np.sqrt(np.sum(u**2, axis=1))) >= 1.0:
            chosen.append(candidates[i])
    return np.asarray(chosen)


def _log_prob(logpost, theta: np.ndarray) -> np.ndarray:
    out = np.asarray(logpost(theta))
    return out[:, 0] if out.ndim == 2 else out
