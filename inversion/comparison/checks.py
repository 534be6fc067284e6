"""Checks of each scenario's posterior that the comparison report warns about.

* `fit_check`: does the scenario fit the data at all? The posterior predictive check of
  `inversion.results.checks` (discrepancy -2 log L of each observation block; Gelman, Meng &
  Stern 1996, Statistica Sinica 6, 733), over draws of the scenario's posterior; the
  scenario is reported as not fitting when a block's p-value is below `NO_FIT_P`. A
  small p means the observed data are far less likely than data the scenario itself
  would produce.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["NO_FIT_P", "FitCheck", "fit_check", "replicate_data"]

#: A scenario with a predictive p-value below this is reported as not fitting the data.
NO_FIT_P = 0.01
_REPLICATES = 200


@dataclass(frozen=True)
class FitCheck:
    """Result of the posterior predictive check.

    Attributes
    ----------
    p_value : float
        The smallest p-value over the observation blocks.
    replicates : int
        Draws used.
    worst_block : str
        The block with that p-value ("" when no draw makes melt).
    """

    p_value: float
    replicates: int
    worst_block: str = ""

    @property
    def fits(self) -> bool:
        return bool(self.p_value >= NO_FIT_P)


def fit_check(logpost, draws: np.ndarray, rng: np.random.Generator,
              replicates: int = _REPLICATES) -> FitCheck:
    """Posterior predictive p-value of each block's -2 log L (`inversion.results.checks`).

    Parameters
    ----------
    logpost : inversion.LogPosterior
        The scenario (its study's observation sets simulate the replicated data).
    draws : numpy.ndarray
        Posterior draws, shape ``(n, ndim)`` (``ndim`` may be 0).
    rng : numpy.random.Generator
    replicates : int
        How many draws to use (chosen at random when there are more).

    A draw that makes no melt counts as not reproducing the data (the observed melt
    products cannot be simulated there): each block's p-value is scaled by the share of
    draws that melt.
    """
    from ..results.checks import check_blocks

    drawn = list(_columns(logpost, draws, rng, replicates))
    melting = [(theta, c) for theta, c in drawn if bool(np.all(c.produces_melt))]
    if not melting:
        return FitCheck(0.0, replicates)
    errors = [logpost.block_errors(theta[None, :]) for theta, _ in melting]
    blocks = check_blocks(logpost.study.observations, [c for _, c in melting], rng, errors)
    worst = min(blocks, key=lambda b: b.p_value)
    return FitCheck(worst.p_value * len(melting) / len(drawn), replicates, worst.name)


def _columns(logpost, draws: np.ndarray, rng: np.random.Generator, replicates: int):
    """Yield ``(theta, melting column at theta)`` for random posterior draws (with
    replacement only when there are fewer than `replicates`)."""
    ndim = len(logpost.names)
    draws = np.zeros((1, 0)) if ndim == 0 else np.asarray(draws, float).reshape(-1, ndim)
    pick = rng.choice(draws.shape[0], size=replicates, replace=draws.shape[0] < replicates)
    for theta in draws[pick]:
        yield theta, logpost.column(theta[None, :])


def replicate_data(logpost, draws: np.ndarray, rng: np.random.Generator, replicates: int):
    """Yield ``(theta, observation sets simulated at theta)`` for random posterior draws;
    the sets are None where theta makes no melt."""
    for theta, column in _columns(logpost, draws, rng, replicates):
        if not bool(np.all(column.produces_melt)):
            yield theta, None
            continue
        errors = logpost.block_errors(theta[None, :])  # free model errors at this draw
        yield theta, [block.simulate(column, rng, errors=e)
                      for block, e in zip(logpost.study.observations, errors, strict=True)]
