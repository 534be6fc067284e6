"""P-T of basalt samples tabulated over two correction choices, for lookup inside a fit.

A fit that samples the target Fo and/or Fe3+/ΣFe needs each sample's (P, T) and error
covariance at every walker's values. Olivine addition costs about a millisecond per
composition, far too much per likelihood call, so the chain is evaluated once on a
grid over the correction choices and interpolated (docs/model.md, "Basalt chemistry
inside the posterior"):

- the central (P, T) on a fine grid (default 9 x 9 nodes over the prior supports);
- the covariance from the analytical errors (`estimate_linearised`, which agrees with
  Monte Carlo within 4 % in σ_P and 1.5 % in σ_T; docs/model.md, "Error propagation")
  on a coarse grid (3 x 3), because it varies slowly with the corrections;
- bilinear interpolation of P, T and of the covariance entries (a convex combination of
  covariance matrices is a covariance matrix), then the method's calibration
  variances added.

An axis whose choice is fixed has a single node. Pure numpy, no I/O.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .olivine import KdModel
from .propagation import Uncertainties, _method, estimate_linearised, pt_of_analyses

__all__ = ["PTGrid", "build_pt_grid", "nodes"]


def nodes(low: float, high: float, count: int) -> NDArray[np.float64]:
    """`count` equally spaced nodes from `low` to `high` (one node when they are equal)."""
    return np.array([low]) if high == low else np.linspace(low, high, count)


@dataclass(frozen=True)
class PTGrid:
    """(P, T) and their covariance of each sample over (Fo, Fe3+/ΣFe) nodes.

    Attributes
    ----------
    fo, fe3 : ndarray, shape ``(a,)``, ``(b,)``
        Nodes of the target Fo and Fe3+/ΣFe of the fine grid.
    pt : ndarray, shape ``(a, b, n, 2)``
        P (GPa) and T (degC) of the n samples at each node; NaN where refused.
    cov_fo, cov_fe3 : ndarray, shape ``(c,)``, ``(d,)``
        Nodes of the coarse covariance grid.
    cov : ndarray, shape ``(c, d, n, 3)``
        var P (GPa²), cov PT (GPa degC), var T (degC²) from the analytical errors.
    calibration : tuple of float
        The method's calibration variances (GPa², degC²), added in `at`.
    reason : ndarray of object, shape ``(a, b, n)``
        Refusal reason of each node and sample, ``""`` where accepted.
    olivine_fraction : ndarray, shape ``(a, b, n)``
        Olivine added per unit mass of primary melt.
    """

    fo: NDArray[np.float64]
    fe3: NDArray[np.float64]
    pt: NDArray[np.float64]
    cov_fo: NDArray[np.float64]
    cov_fe3: NDArray[np.float64]
    cov: NDArray[np.float64]
    calibration: tuple[float, float]
    reason: NDArray[np.object_]
    olivine_fraction: NDArray[np.float64]

    def first_refusal(self) -> tuple[int, str, float, float] | None:
        """``(sample, reason, Fo, Fe3+/ΣFe)`` of the first refused sample, or None.

        Samples in order; a sample is refused if any node is (the fit may visit it).
        """
        bad = (self.reason != "") | ~np.isfinite(self.pt).all(axis=-1)
        if not bad.any():
            return None
        sample = int(np.flatnonzero(bad.any(axis=(0, 1)))[0])
        i, j = (int(k[0]) for k in np.nonzero(bad[:, :, sample]))
        why = self.reason[i, j, sample] or "the thermobarometer gives no value"
        return sample, str(why), float(self.fo[i]), float(self.fe3[j])

    def at(self, fo: ArrayLike, fe3: ArrayLike) -> tuple[NDArray, ...]:
        """Interpolated P, T and covariance (incl. calibration) at m correction values.

        Parameters
        ----------
        fo, fe3 : array_like, shape ``(m,)`` (or scalars)
            Target Fo and Fe3+/ΣFe, inside the node ranges (clipped to them).

        Returns
        -------
        p, t, var_p, cov_pt, var_t : ndarray, shape ``(m, n)``
            GPa, degC, GPa², GPa degC, degC².
        """
        fo, fe3 = np.broadcast_arrays(np.atleast_1d(np.asarray(fo, float)),
                                      np.atleast_1d(np.asarray(fe3, float)))
        pt = _bilinear(self.fo, self.fe3, self.pt, fo, fe3)
        cov = _bilinear(self.cov_fo, self.cov_fe3, self.cov, fo, fe3)
        cal_p, cal_t = self.calibration
        return (pt[..., 0], pt[..., 1], cov[..., 0] + cal_p, cov[..., 1],
                cov[..., 2] + cal_t)


def _weights(grid: NDArray, x: NDArray) -> tuple[NDArray, NDArray, NDArray]:
    """Lower node index and the weights of the lower and upper node for each x."""
    if grid.size == 1:
        zero = np.zeros(x.shape, dtype=int)
        return zero, np.ones(x.shape), np.zeros(x.shape)
    x = np.clip(x, grid[0], grid[-1])
    i = np.clip(np.searchsorted(grid, x, side="right") - 1, 0, grid.size - 2)
    w = (x - grid[i]) / (grid[i + 1] - grid[i])
    return i, 1.0 - w, w


def _bilinear(gx: NDArray, gy: NDArray, values: NDArray, x: NDArray, y: NDArray) -> NDArray:
    """Bilinear interpolation of ``values[a, b, ...]`` at points (x, y): ``(m, ...)``."""
    i, wx0, wx1 = _weights(gx, x)
    j, wy0, wy1 = _weights(gy, y)
    i1 = np.minimum(i + 1, gx.size - 1)
    j1 = np.minimum(j + 1, gy.size - 1)
    extra = (slice(None),) + (None,) * (values.ndim - 2)
    return ((wx0 * wy0)[extra] * values[i, j] + (wx0 * wy1)[extra] * values[i, j1]
            + (wx1 * wy0)[extra] * values[i1, j] + (wx1 * wy1)[extra] * values[i1, j1])


def build_pt_grid(analysis: ArrayLike, *, fo_nodes: ArrayLike, fe3_nodes: ArrayLike,
                  h2o: ArrayLike = 0.0, co2: ArrayLike = 0.0,
                  kd_model: KdModel | None = None, method: str = "lee2009",
                  uncertainties: Uncertainties | None = None,
                  covariance_nodes: int = 3) -> PTGrid:
    """Evaluate (P, T) and its analytical covariance of n samples on a correction grid.

    Parameters
    ----------
    analysis : array_like, shape ``(n, 10)``
        wt%, `ANALYSIS_OXIDES` order.
    fo_nodes, fe3_nodes : array_like, shape ``(a,)``, ``(b,)``
        Increasing nodes of the target Fo and of Fe3+/ΣFe (one node: a fixed choice).
    h2o, co2 : array_like, broadcastable to ``(n,)``
        Volatiles, wt% (CO2 only dilutes the melt).
    kd_model : KdModel, optional
        Default constant 0.30 (Roeder & Emslie 1970).
    method : str
        A key of `METHODS`.
    uncertainties : Uncertainties, optional
        Analytical errors (oxides, H2O); the correction choices get none here.
    covariance_nodes : int
        Nodes per varying axis of the coarse covariance grid.

    Returns
    -------
    PTGrid
    """
    analysis = np.asarray(analysis, dtype=float)
    n = len(analysis)
    fo, fe3 = np.asarray(fo_nodes, float), np.asarray(fe3_nodes, float)
    h2o = np.broadcast_to(np.asarray(h2o, float), (n,))
    co2 = np.broadcast_to(np.asarray(co2, float), (n,))
    method = _method(method)
    shape = (fo.size, fe3.size, n)
    p, t, frac, reason = pt_of_analyses(
        np.broadcast_to(analysis, shape + (10,)), h2o=h2o, co2=co2,
        fe3_fraction=fe3[None, :, None], target_fo=fo[:, None, None],
        kd_model=kd_model, method=method)
    cov_fo = nodes(fo[0], fo[-1], covariance_nodes)
    cov_fe3 = nodes(fe3[0], fe3[-1], covariance_nodes)
    m = cov_fo.size * cov_fe3.size
    with np.errstate(invalid="ignore"):  # no analytical error: correlation 0/0, set to 0
        estimate = estimate_linearised(
            np.tile(analysis, (m, 1)), h2o=np.tile(h2o, m),
            fe3_fraction=np.tile(np.repeat(cov_fe3, n), cov_fo.size),
            target_fo=np.repeat(cov_fo, cov_fe3.size * n), kd_model=kd_model,
            method=method, uncertainties=_tiled(uncertainties, m), calibration=False,
            co2=np.tile(co2, m)[:, None])
    var_p = estimate.sigma_p_gpa ** 2
    var_t = estimate.sigma_t_c ** 2
    with np.errstate(invalid="ignore"):
        cov_pt = estimate.correlation * estimate.sigma_p_gpa * estimate.sigma_t_c
    cov = np.stack([var_p, np.nan_to_num(cov_pt), var_t], axis=-1)
    cov = cov.reshape(cov_fo.size, cov_fe3.size, n, 3)
    return PTGrid(fo=fo, fe3=fe3, pt=np.stack([p, t], axis=-1), cov_fo=cov_fo,
                  cov_fe3=cov_fe3, cov=cov,
                  calibration=(method.sigma_p_gpa ** 2, method.sigma_t_c ** 2),
                  reason=reason, olivine_fraction=frac)


def _tiled(unc: Uncertainties | None, m: int) -> Uncertainties | None:
    """`unc` for m stacked copies of the samples (per-sample oxide sigmas tiled)."""
    if unc is None or np.ndim(unc.oxide_sigma) < 2:
        return unc
    return Uncertainties(oxide_sigma=np.tile(np.asarray(unc.oxide_sigma, float), (m, 1)),
                         relative_sigma=unc.relative_sigma, h2o_sigma=unc.h2o_sigma)
