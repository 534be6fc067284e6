"""Predictive comparison: Pareto-smoothed importance-sampling leave-one-out (PSIS-LOO).

For each observation row i, elpd_i = log p(y_i | y_-i) is estimated from posterior draws
by importance weights 1 / p(y_i | theta_s), Pareto-smoothed (Vehtari, Gelman & Gabry
2017, Stat. Comput. 27, 1413; computed with ArviZ's ``loo``). elpd_loo = sum_i elpd_i,
its standard error is sqrt(n var(elpd_i)), and p_loo (the effective number of
parameters) is the sum of log p(y_i | y) - elpd_i. A Pareto shape k above 0.7 for a row
means the estimate for that row is unreliable (Vehtari et al. 2017).
Unlike the evidence, LOO hardly depends on the prior width once the data dominate.

The draws are the emcee chain after burn-in (the one burn-in of `Posterior.discard`, so
LOO sees the draws the summaries and figures see), each walker treated as a chain and
thinned by the longest autocorrelation time, so that the draws are roughly independent.

A row whose log-likelihood is the same at every draw (`constant_rows`; e.g. a pressure
equilibrated at the top of melting under a fixed lid) has an exact LOO term, log L_i,
and no Pareto k (NaN). Numbers that are not finite are written to JSON as null.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["CONSTANT_SPREAD", "MAX_DRAWS", "PARETO_K_WARN", "LooEstimate", "constant_rows", "elpd_differences",
           "loo_fixed", "loo_from_draws", "posterior_draws"]

#: Rows with a Pareto shape above this have an unreliable LOO term.
PARETO_K_WARN = 0.7
#: A row whose log-likelihood spreads over at most this many nats across the draws is
#: constant (`constant_rows`): its LOO term is exact.
CONSTANT_SPREAD = 1e-6
#: At most this many posterior draws enter LOO (more adds little to its precision).
MAX_DRAWS = 4000


@dataclass(frozen=True)
class LooEstimate:
    """PSIS-LOO of one scenario.

    Attributes
    ----------
    elpd_loo, se, p_loo : float
        Expected log pointwise predictive density, its standard error and the effective
        number of parameters.
    pareto_k_max : float
        Largest Pareto shape over the rows that have one (NaN when no row has: with no
        free parameter, or when every row's log-likelihood is the same at every draw,
        the leave-one-out predictive is the likelihood itself, exactly).
    pointwise : numpy.ndarray
        elpd_i of every observation row, shape ``(rows,)``.
    pareto_k : numpy.ndarray
        Pareto shape of every row, shape ``(rows,)``; NaN for an exact row (no free
        parameter, or a constant log-likelihood: `constant_rows`).
    n_draws : int
        Posterior draws used.
    seconds : float
        Wall time.
    """

    elpd_loo: float
    se: float
    p_loo: float
    pareto_k_max: float
    pointwise: np.ndarray
    pareto_k: np.ndarray
    n_draws: int
    seconds: float = 0.0

    @property
    def unreliable_rows(self) -> np.ndarray:
        """Indices of the rows with Pareto k above `PARETO_K_WARN`."""
        return np.flatnonzero(np.asarray(self.pareto_k) > PARETO_K_WARN)

    def to_dict(self) -> dict:
        """JSON-ready numbers; a number that is not finite (NaN: exact or not
        estimated; inf) is written as None (JSON null), as JSON has neither."""
        return {"elpd_loo": _finite(self.elpd_loo), "se": _finite(self.se),
                "p_loo": _finite(self.p_loo), "pareto_k_max": _finite(self.pareto_k_max),
                "pointwise": [_finite(v) for v in self.pointwise],
                "pareto_k": [_finite(k) for k in self.pareto_k],
                "n_draws": self.n_draws, "seconds": self.seconds}

    @classmethod
    def from_dict(cls, data: dict) -> LooEstimate:
        """Inverse of `to_dict` (null, as JSON writes NaN, reads back as NaN)."""
        def number(value):
            return math.nan if value is None else float(value)

        return cls(number(data["elpd_loo"]), number(data["se"]), number(data["p_loo"]),
                   number(data["pareto_k_max"]),
                   np.array([number(v) for v in data["pointwise"]]),
                   np.array([number(k) for k in data["pareto_k"]]), int(data["n_draws"]),
                   number(data.get("seconds", 0.0)))


def _finite(value) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None


def posterior_draws(posterior, max_draws: int = MAX_DRAWS) -> np.ndarray:
    """Roughly independent draws of a fitted posterior, shape ``(walkers, draws, ndim)``.

    The chain after burn-in, thinned by the longest autocorrelation time (rounded up),
    and more if that leaves over `max_draws` draws in all.
    """
    kept = posterior.chain[posterior.discard:]
    steps, walkers = kept.shape[:2]
    tau = np.asarray(posterior.tau, float)
    thin = max(1, math.ceil(float(np.nanmax(tau))) if np.any(np.isfinite(tau)) else 1,
               math.ceil(steps * walkers / max_draws))
    return np.swapaxes(kept[::thin], 0, 1)


def loo_from_draws(logpost, draws: np.ndarray) -> LooEstimate:
    """PSIS-LOO from posterior draws, with ArviZ.

    Parameters
    ----------
    logpost : LogPosterior-like
        Needs ``pointwise_log_likelihood`` (``(n, ndim)`` -> ``(n, rows)``).
    draws : numpy.ndarray
        Shape ``(chains, draws, ndim)``.
    """
    started = time.perf_counter()
    chains, n, ndim = draws.shape
    pointwise = logpost.pointwise_log_likelihood(draws.reshape(-1, ndim))
    pointwise = np.asarray(pointwise, float).reshape(chains, n, -1)
    exact = constant_rows(pointwise.reshape(chains * n, -1))
    loo_i = pointwise.mean(axis=(0, 1))  # a constant row: elpd_i = log L_i exactly
    k = np.full(loo_i.size, np.nan)  # and no importance weights, so no Pareto k
    p_loo = 0.0
    if not exact.all():
        az = _arviz()
        posterior = {f"theta_{j}": draws[..., j] for j in range(ndim)}
        with warnings.catch_warnings():
            # k > 0.7 is reported by lidmelt; "more chains than draws" is how walkers are
            warnings.simplefilter("ignore", UserWarning)
            data = az.from_dict(posterior=posterior,
                                log_likelihood={"rows": pointwise[..., ~exact]})
            result = az.loo(data, pointwise=True)
        loo_i[~exact] = np.asarray(result.loo_i, float)
        k[~exact] = np.asarray(result.pareto_k, float)
        p_loo = float(result.p_loo)  # constant rows add lppd_i - elpd_i = 0
    se = float(np.sqrt(loo_i.size * np.var(loo_i)))  # as arviz.loo
    k_max = float(np.max(k[~exact])) if not exact.all() else math.nan
    return LooEstimate(float(loo_i.sum()), se, p_loo, k_max, loo_i, k, chains * n,
                       time.perf_counter() - started)


def constant_rows(pointwise: np.ndarray) -> np.ndarray:
    """Rows whose log-likelihood is the same at every draw, shape ``(rows,)`` of bool.

    Such a row (a pressure that equilibrates at the top of melting under a fixed lid,
    say) has p(y_i | y_-i) = p(y_i | theta) for every theta, so its LOO term is exactly
    log L_i and has no importance weights to smooth: PSIS would fit a Pareto tail to
    identical weights and return k = inf. "The same" is a spread of at most
    `CONSTANT_SPREAD` nats: the LOO term, which lies between the row's smallest and
    largest log-likelihood, is then its mean to within that, far below any difference
    that matters in elpd.

    Parameters
    ----------
    pointwise : numpy.ndarray
        Shape ``(draws, rows)``.
    """
    pointwise = np.asarray(pointwise, float)
    finite = np.all(np.isfinite(pointwise), axis=0)
    spread = np.ptp(np.where(np.isfinite(pointwise), pointwise, 0.0), axis=0)
    return finite & (spread <= CONSTANT_SPREAD)


def loo_fixed(logpost) -> LooEstimate:
    """LOO of a scenario without free parameters: elpd_i = log L_i, exactly."""
    pointwise = np.asarray(logpost.pointwise_log_likelihood(np.zeros((1, 0)))[0], float)
    rows = pointwise.size
    se = float(np.sqrt(rows * np.var(pointwise)))  # as arviz.loo
    return LooEstimate(float(pointwise.sum()), se, 0.0, math.nan, pointwise,
                       np.full(rows, math.nan), 1)


def elpd_differences(loos: dict[str, LooEstimate]) -> pd.DataFrame:
    """elpd_loo of each scenario against the best, with the standard error of the difference.

    dse = sqrt(n var_i(elpd_i,best - elpd_i,other)) over the n shared rows (Vehtari et
    al. 2017), the formula of ``arviz.compare``, which needs draws for every scenario;
    this also takes the scenarios without free parameters.

    Returns
    -------
    pandas.DataFrame
        Index: scenario names, best first; columns ``elpd_loo``, ``elpd_diff`` (>= 0,
        best minus this) and ``dse``.
    """
    order = sorted(loos, key=lambda name: -loos[name].elpd_loo)
    best = loos[order[0]].pointwise
    rows = []
    for name in order:
        diff = best - loos[name].pointwise
        dse = float(np.sqrt(diff.size * np.var(diff)))
        rows.append({"scenario": name, "elpd_loo": loos[name].elpd_loo,
                     "elpd_diff": float(diff.sum()), "dse": dse})
    return pd.DataFrame(rows).set_index("scenario")


def _arviz():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)  # ArviZ announces its 1.0 refactor
        import arviz

    return arviz
