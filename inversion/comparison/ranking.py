"""Posterior probabilities of the scenarios and the Kass & Raftery (1995) scale.

With prior odds o_k and evidences Z_k, the posterior probability of scenario k among
the compared ones is P_k = o_k Z_k / sum_j o_j Z_j (Bayes' rule over the scenarios; Kass
& Raftery 1995, J. Am. Stat. Assoc. 90, 773, eq. 1-2). Its error bar is propagated from
the ln Z errors by Monte Carlo: ln Z_k ~ Normal(ln Z_k, sd_k), independent between
scenarios (each has its own nested-sampling run).

Kass & Raftery (1995, sect. 3.2) read the Bayes factor B on the scale of 2 ln B:
0-2 not worth more than a bare mention, 2-6 positive, 6-10 strong, above 10 very strong.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.special import logsumexp

from ..study.seeds import generator

__all__ = ["KASS_RAFTERY", "evidence_words", "scenario_probabilities"]

#: (upper limit of 2 ln B, words), Kass & Raftery (1995), sect. 3.2.
KASS_RAFTERY = (
    (2.0, "not worth more than a bare mention"),
    (6.0, "positive"),
    (10.0, "strong"),
    (np.inf, "very strong"),
)
# Draws of the ln Z errors behind the 68 % range of each probability. 20 000 puts the
# Monte Carlo error of a 16 or 84 % quantile near 0.002 in probability (4000 gave about
# 0.004, as large as the rounding of the reported percentages); it costs milliseconds.
_DRAWS = 20_000


def scenario_probabilities(log_evidence: Sequence[float], sd: Sequence[float],
                           prior_odds: Sequence[float], *, seed: int = 0,
                           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Posterior probability of each scenario and its central 68 % range.

    Parameters
    ----------
    log_evidence, sd : sequences of float
        ln Z of each scenario and its standard error.
    prior_odds : sequence of float
        Prior weight of each scenario (> 0; normalised here).
    seed : int
        Seed of the Monte Carlo propagation of the errors.

    Returns
    -------
    probability, low, high : numpy.ndarray
        Shape ``(k,)``: P_k at the ln Z estimates, and the 16 % and 84 % quantiles of
        P_k when each ln Z varies within its error.

    Examples
    --------
    >>> p, lo, hi = scenario_probabilities([0.0, -np.log(3.0)], [0.0, 0.0], [1.0, 1.0])
    >>> p.round(3).tolist()
    [0.75, 0.25]
    """
    log_z = np.asarray(log_evidence, float)
    sd = np.asarray(sd, float)
    log_odds = np.log(np.asarray(prior_odds, float))
    weight = log_z + log_odds
    probability = np.exp(weight - logsumexp(weight))
    rng = generator(seed, "ranking_spread")
    sampled = weight + sd * rng.standard_normal((_DRAWS, log_z.size))
    spread = np.exp(sampled - logsumexp(sampled, axis=1, keepdims=True))
    low, high = np.quantile(spread, [0.16, 0.84], axis=0)
    return probability, low, high


def evidence_words(log_bayes_factor: float) -> str:
    """Kass & Raftery (1995) words for a Bayes factor B >= 1 given as ln B.

    Examples
    --------
    >>> evidence_words(0.5), evidence_words(2.0), evidence_words(4.0), evidence_words(9.0)
    ('not worth more than a bare mention', 'positive', 'strong', 'very strong')
    """
    two_ln_b = 2.0 * abs(float(log_bayes_factor))
    for limit, words in KASS_RAFTERY:
        if two_ln_b <= limit:
            return words
    return KASS_RAFTERY[-1][1]
