"""The evidence of one scenario with its error bar, and the quadrature cross-check.

    Z = integral of L(theta) pi(theta) d theta,

with every prior normalised over its (truncated) support, so that Z is comparable
between scenarios. `scenario_evidence` is what `compare` calls for each scenario:

* no free parameter: Z is the likelihood at the fixed values (exact, error 0);
* otherwise nested sampling (`nested.nested_evidence`) gives ln Z and its standard
  error, and where the scenario has at most `MAX_QUADRATURE_DIM` free parameters a grid
  quadrature over the box holding the nested samples (`quadrature.quadrature_evidence`)
  gives an independent second value; the two are flagged as disagreeing when they differ
  by more than `DISAGREEMENT_SIGMAS` times their combined standard error.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .nested import nested_evidence
from .quadrature import MAX_QUADRATURE_DIM, box_from_samples, quadrature_evidence

__all__ = ["DISAGREEMENT_SIGMAS", "EvidenceEstimate", "scenario_evidence"]

#: Nested and quadrature ln Z disagree when |difference| exceeds this many combined
#: standard errors. At 1 a third of correct runs would be flagged; 3 flags about 0.3 %.
DISAGREEMENT_SIGMAS = 3.0


@dataclass(frozen=True)
class EvidenceEstimate:
    """ln Z of one scenario, how it was found and its cross-check.

    Attributes
    ----------
    log_evidence : float
        ln Z (nested sampling; or the log-likelihood with no free parameter).
    sd : float
        Standard error of `log_evidence` (0 when exact).
    method : str
        ``"nested sampling"`` or ``"likelihood (no free parameter)"``.
    quadrature : float or None
        ln Z by grid quadrature (None where not computed: more than 3 free parameters
        or none).
    quadrature_error : float or None
        Upper estimate of the quadrature error.
    n_like : int
        Likelihood evaluations of the nested sampler.
    seconds_nested, seconds_quadrature : float
        Wall time of each part.
    """

    log_evidence: float
    sd: float
    method: str
    quadrature: float | None = None
    quadrature_error: float | None = None
    n_like: int = 0
    seconds_nested: float = 0.0
    seconds_quadrature: float = 0.0

    @property
    def combined_error(self) -> float | None:
        """Combined standard error of nested and quadrature ln Z (None without both)."""
        if self.quadrature is None:
            return None
        return math.hypot(self.sd, self.quadrature_error or 0.0)

    @property
    def disagrees(self) -> bool:
        """Whether the two estimates differ by more than `DISAGREEMENT_SIGMAS` errors."""
        if self.quadrature is None:
            return False
        difference = abs(self.log_evidence - self.quadrature)
        return bool(difference > DISAGREEMENT_SIGMAS * self.combined_error)

    def to_dict(self) -> dict:
        return {name: getattr(self, name) for name in self.__dataclass_fields__}


def scenario_evidence(logpost, *, live_points: int = 500, effective_samples: int = 3000,
                      grid_points: int = 125_000, seed: int = 1) -> EvidenceEstimate:
    """ln Z with an error bar for one scenario (see the module docstring).

    Parameters
    ----------
    logpost : LogPosterior-like
        ``names``, ``priors`` (``ppf``, ``cdf``, ``logpdf``), ``log_likelihood``
        (``(n, ndim)`` -> ``(n,)``). `inversion.LogPosterior` of the scenario's study is
        one; the tests pass a conjugate Gaussian problem through the same function.
    live_points, effective_samples : int
        Nested-sampling settings (`ComparisonSettings`).
    grid_points : int
        Quadrature grid size.
    seed : int
        Nested-sampling seed.

    Returns
    -------
    EvidenceEstimate
    """
    if len(logpost.names) == 0:
        value = float(logpost.log_likelihood(np.zeros((1, 0)))[0])
        return EvidenceEstimate(value, 0.0, "likelihood (no free parameter)")
    nested = nested_evidence(logpost, live_points=live_points,
                             effective_samples=effective_samples, seed=seed)
    quadrature = None
    if len(logpost.names) <= MAX_QUADRATURE_DIM:
        box = box_from_samples(logpost.priors, nested.points, nested.log_weights)
        quadrature = quadrature_evidence(logpost, box, grid_points=grid_points)
    return EvidenceEstimate(
        nested.log_evidence, nested.sd, "nested sampling",
        quadrature=None if quadrature is None else quadrature.log_evidence,
        quadrature_error=None if quadrature is None else quadrature.error,
        n_like=nested.n_like, seconds_nested=nested.seconds,
        seconds_quadrature=0.0 if quadrature is None else quadrature.seconds)
