"""Residual mineralogy of spinel and garnet lherzolite as melt is extracted.

Each facies is followed on its own as a function of X, the mass of melt extracted per
unit mass of source. Mineral masses fall along the melting reaction p (mass of each
mineral per unit mass of melt): m_i(X) = m_i(X_b) - p_i (X - X_b) within a segment. When
a mineral runs out, the reaction is renormalised over the minerals still present: the
minerals that crystallise keep their coefficients, and those still consumed are scaled up
so the coefficients again sum to 1; with none left to consume, the residue melts in its
own proportions (modal melting). So the mineralogy is piecewise linear in X with at most
one break per mineral (docs/model.md, "Rare-earth elements along the melting path").

With partition coefficients D (mineral x element), the segment's bulk quantities are
linear in X too: (1 - X) D0(X) = M_b - (X - X_b) Q_b with M_b = m(X_b) . D and
Q_b = p_b . D, the reaction-weighted coefficient (Shaw's P).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

import numpy as np

from .tables import mineralogy, partition_coefficients

__all__ = ["FaciesSegments", "facies_segments", "segments_for"]

_TINY = 1e-12


@dataclass(frozen=True)
class FaciesSegments:
    """Piecewise-linear mineralogy of one facies; ``k`` segments, ``n`` minerals.

    start : (k,) X at which each segment begins (the first at 0).
    masses : (k, n) mineral masses per unit source mass at the segment start.
    reaction : (k, n) melting reaction within the segment (sums to 1).
    """

    start: np.ndarray
    masses: np.ndarray
    reaction: np.ndarray

    def masses_at(self, x) -> np.ndarray:
        """Mineral masses (per unit source mass) at extraction ``x``, shape (..., n)."""
        x = np.asarray(x, float)
        b = np.searchsorted(self.start, x, side="right") - 1
        return np.maximum(self.masses[b] - (x - self.start[b])[..., None] * self.reaction[b],
                          0.0)

    def bulk(self, coefficients) -> tuple[np.ndarray, np.ndarray]:
        """``(M, Q)`` per segment, shape (k, e), for coefficients of shape (n, e)."""
        return self.masses @ coefficients, self.reaction @ coefficients


def _next_reaction(reaction, present, masses):
    """The reaction once the minerals not ``present`` are gone (rule in the module doc)."""
    kept = np.where(present, reaction, 0.0)
    consumed = kept > 0.0
    if not consumed.any():  # nothing left that the reaction consumes: modal melting
        return np.where(present, masses, 0.0) / np.sum(np.where(present, masses, 0.0))
    crystallised = np.where(consumed, 0.0, kept)
    scale = (1.0 - crystallised.sum()) / kept[consumed].sum()
    return np.where(consumed, kept * scale, crystallised)


def segments_for(mode, reaction) -> FaciesSegments:
    """Build the segments of a facies from its source ``mode`` and ``reaction`` (sum 1)."""
    mode, reaction = np.asarray(mode, float), np.asarray(reaction, float)
    present = mode > _TINY
    p = _next_reaction(reaction, present, mode)
    starts, masses, reactions = [0.0], [mode.copy()], [p]
    x, m = 0.0, mode.copy()
    while True:
        falling = present & (p > 0.0)
        if not falling.any():
            break
        left = np.where(falling, m / np.where(falling, p, 1.0), np.inf)
        step = float(left.min())
        if x + step >= 1.0:  # the residue is used up before another mineral runs out
            break
        x, m = x + step, np.maximum(m - step * p, 0.0)
        present = present & (left > step * (1.0 + 1e-9)) & (m > _TINY)
        m = np.where(present, m, 0.0)
        p = _next_reaction(reaction, present, m)
        starts.append(x)
        masses.append(m.copy())
        reactions.append(p)
    return FaciesSegments(np.array(starts), np.array(masses), np.array(reactions))


@cache
def facies_segments() -> dict[str, FaciesSegments]:
    """The packaged spinel and garnet lherzolite (``tables.mineralogy``), as segments."""
    return {facies: segments_for(mode, reaction)
            for facies, (mode, reaction) in mineralogy().items()}


def default_coefficients() -> np.ndarray:
    """The packaged partition coefficients, shape (5 minerals, 10 elements)."""
    return partition_coefficients()
