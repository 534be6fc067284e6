"""Does the model fit the data? Posterior predictive checks of every observation block.

For each posterior draw theta_s a replicated data set y_rep is drawn from the block's own
likelihood (`ObservationSet.simulate`: the same sigmas, model errors (free ones at the
draw's values) and equilibration rule), and the discrepancy

    D(y, theta) = -2 log L_block(y | theta)

is compared between the replicated and the observed data. For Gaussian rows this is the
chi-square sum((y_i - mu_i(theta))^2 / sigma_i^2) plus a constant that cancels; for the
"path" equilibration it is the deviance of the mixture along the melting path. The
posterior predictive p-value (Gelman, Meng & Stern 1996) is

    p = Pr[D(y_rep, theta) >= D(y, theta) | y],

estimated by the fraction of draws where the replicate is at least as discrepant. A p near
0 says the data are more scattered about the model than their uncertainties allow (or
systematically off); a p near 1 that the uncertainties are too large.

The standardized residual of each row is (y_i - mean of y_rep,i) / sd of y_rep,i, so it
carries the measurement error, the model error, the posterior spread and (for "path")
the spread along the melting path. Rows beyond 3 are flagged.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..study.seeds import generator

__all__ = ["FLAG_LIMIT", "BlockCheck", "check_blocks", "posterior_checks"]

#: Standardized residuals beyond this magnitude are flagged.
FLAG_LIMIT = 3.0
_DRAWS = 400


@dataclass(frozen=True)
class BlockCheck:
    """Posterior predictive check of one observation block.

    Attributes
    ----------
    name, kind : str
        The block's label and study-file kind.
    p_value : float
        Posterior predictive p-value of the discrepancy -2 log L (chi-square for
        Gaussian rows).
    ndraws : int
        Posterior draws used.
    ids : tuple of str
        Row labels.
    residuals : dict of str to ndarray
        Standardized residual per row of each observed column (``"value"`` and, for
        pressure blocks with temperatures, ``"temperature"``), shape (rows,).
    """

    name: str
    kind: str
    p_value: float
    ndraws: int
    ids: tuple[str, ...]
    residuals: dict[str, np.ndarray]

    def flagged(self, limit: float = FLAG_LIMIT) -> list[tuple[str, str, float]]:
        """``(row label, column, residual)`` of every residual beyond `limit`."""
        out = []
        for column, values in self.residuals.items():
            for row, value in zip(self.ids, values, strict=True):
                if abs(value) > limit:
                    out.append((row, column, float(value)))
        return out


def check_blocks(blocks: Sequence, columns: Sequence, rng: np.random.Generator,
                 errors: Sequence | None = None) -> list[BlockCheck]:
    """Posterior predictive checks of `blocks` over single-draw melting columns.

    Parameters
    ----------
    blocks : sequence of ObservationSet
        The observation blocks of a study.
    columns : sequence of forward.MeltColumn
        One melting column per posterior draw, each for a single parameter vector.
    rng : numpy.random.Generator
        Source of the replicated data (the only one used).
    errors : sequence, optional
        Per draw, one dict per block of its free model errors (option -> value), as
        `LogPosterior.block_errors` gives them; needed when a block has a free one.

    Returns
    -------
    list of BlockCheck
        One per block, in order.
    """
    if errors is None:
        errors = [[{} for _ in blocks] for _ in columns]
    return [_check_one(block, columns, rng, [draw[b] for draw in errors])
            for b, block in enumerate(blocks)]


def _check_one(block, columns, rng, errors) -> BlockCheck:
    observed = _data_columns(block.observed())
    replicated = {key: np.empty((len(columns), len(block))) for key in observed}
    exceed = 0
    for s, column in enumerate(columns):
        replicate = block.simulate(column, rng, errors=errors[s])
        d_obs = -2.0 * float(np.ravel(block.log_likelihood(column, errors=errors[s]))[0])
        d_rep = -2.0 * float(np.ravel(replicate.log_likelihood(column, errors=errors[s]))[0])
        exceed += d_rep >= d_obs
        for key, values in _data_columns(replicate.observed()).items():
            replicated[key][s] = values
    residuals = {key: (observed[key] - replicated[key].mean(axis=0))
                 / replicated[key].std(axis=0, ddof=1) for key in observed}
    return BlockCheck(name=block.name, kind=block.kind, p_value=exceed / len(columns),
                      ndraws=len(columns), ids=block.ids, residuals=residuals)


def _data_columns(observed: dict) -> dict[str, np.ndarray]:
    """The measured columns of `ObservationSet.observed` (not their sigmas)."""
    return {k: np.asarray(v, float) for k, v in observed.items() if "sigma" not in k}


def posterior_checks(posterior, ndraws: int = _DRAWS) -> list[BlockCheck]:
    """`check_blocks` for a fitted posterior, reproducible from its seed.

    Uses `ndraws` kept posterior positions (`Posterior.predictive_draws`) and a random
    stream of its own spawned from the run's master seed.
    """
    theta = posterior.predictive_draws(ndraws)
    columns = [posterior.logpost.column(theta[i:i + 1]) for i in range(theta.shape[0])]
    errors = [posterior.logpost.block_errors(theta[i:i + 1]) for i in range(theta.shape[0])]
    rng = generator(posterior.seed, "predictive_check")
    return check_blocks(posterior.study.observations, columns, rng, errors)
