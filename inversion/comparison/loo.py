"""Predictive comparison: Pareto-smoothed importance-sampling leave-one-out (PSIS-LOO).

For each observation row i, elpd_i = log p(y_i | y_-i) is estimated from posterior draws
by importance weights 1 / p(y_i | theta_s), Pareto-smoothed (Vehtari, Gelman & Gabry
2017, Stat. Comput. 27, 1413; computed with ArviZ's ``loo``). elpd_loo = sum_i elpd_i,
its standard error is sqrt(n var(elpd_i)), and p_loo (the effective number of
parameters) is the sum of log p(y_i | y) - elpd_i. A Pareto shape k above 0.7 for a row
means the estimate for that row is unreliable (Vehtari et al. 2017).
Unlike the evidence, LOO hardly depends on the prior width once the data dominate.

The draws are the emcee chain after burn-in, each walker treated as a chain and thinned
by the longest autocorrelation time, so that the draws are roughly independent.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["MAX_DRAWS", "PARETO_K_WARN", "LooEstimate", "elpd_differences", "loo_fixed",
           "loo_from_draws", "posterior_draws"]

#: Rows with a Pareto shape above this have an unreliable LOO term.
PARETO_K_WARN = 0.7
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
        Largest Pareto shape over the rows (NaN with no free parameter: the leave-one-out
        predictive is then the likelihood itself, exactly).
    pointwise : numpy.ndarray
        elpd_i of every observation row, shape ``(rows,)``.
    pareto_k : numpy.ndarray
        Pareto shape of every row, shape ``(rows,)`` (NaN with no free parameter).
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
        return {"elpd_loo": self.elpd_loo, "se": self.se, "p_loo": self.p_loo,
                "pareto_k_max": self.pareto_k_max, "pointwise": list(map(float,
                self.pointwise)), "pareto_k": list(map(float, self.pareto_k)),
                "n_draws": self.n_draws, "seconds": self.seconds}

    @classmethod
    def from_dict(cls, data: dict) -> LooEstimate:
        """Inverse of `to_dict` (null, as JSON writes NaN, reads back as NaN)."""
        def number(value):
            return math.nan if value is None else float(value)

        return cls(number(data["elpd_loo"]), number(data["se"]), number(data["p_loo"]),
                   number(data["pareto_k_max"]), np.asarray(data["pointwise"], float),
                   np.array([number(k) for k in data["pareto_k"]]), int(data["n_draws"]),
                   number(data.get("seconds", 0.0)))


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
    az = _arviz()
    chains, n, ndim = draws.shape
    pointwise = logpost.pointwise_log_likelihood(draws.reshape(-1, ndim))
    pointwise = pointwise.reshape(chains, n, -1)
    posterior = {f"theta_{j}": draws[..., j] for j in range(ndim)}
    data = az.from_dict(posterior=posterior, log_likelihood={"rows": pointwise})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # k > 0.7 is reported by lidmelt
        result = az.loo(data, pointwise=True)
    k = np.asarray(result.pareto_k, float)
    return LooEstimate(float(result.elpd_loo), float(result.se), float(result.p_loo),
                       float(np.max(k)), np.asarray(result.loo_i, float), k,
                       chains * n, time.perf_counter() - started)


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
