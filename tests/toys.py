"""Small problems with exact answers, behind the interface of inversion.LogPosterior."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["GaussianToy"]


class GaussianToy:
    """y_i ~ N(mu, s^2) with a prior on mu (or mu held at `fixed`).

    Offers what the comparison's evidence and LOO functions use of a LogPosterior:
    ``names``, ``priors``, ``rows``, ``log_likelihood`` and ``pointwise_log_likelihood``
    (points of shape ``(n, ndim)``).
    """

    def __init__(self, y, s, prior=None, *, fixed: float | None = None) -> None:
        self.y, self.s, self.fixed = np.asarray(y, float), float(s), fixed
        self.names, self.priors = ((), []) if fixed is not None else (("mu",), [prior])
        self.rows = [("toy", str(i)) for i in range(self.y.size)]

    def pointwise_log_likelihood(self, theta):
        theta = np.atleast_2d(np.asarray(theta, float))
        mu = np.full((theta.shape[0], 1), self.fixed) if self.fixed is not None \
            else theta[:, :1]
        z = (self.y[None, :] - mu) / self.s
        return -0.5 * z**2 - math.log(self.s) - 0.5 * math.log(2 * math.pi)

    def log_likelihood(self, theta):
        return self.pointwise_log_likelihood(theta).sum(axis=1)
