"""Pressure and temperature of basalt samples with their error covariance.

The forward chain for one sample is: analysis -> iron split and normalisation ->
olivine addition to the target Fo -> thermobarometer (docs/model.md, "Basalt
chemistry"). Its inputs carry errors:

- analytical: each oxide's 1σ (absolute, relative, or both in quadrature), independent
  between oxides; H2O;
- correction choices: Fe3+/ΣFe, target Fo and the K_D (an additive 1σ on the K_D of
  the chosen model).

Two routes give the mean and covariance of (P, T): Monte Carlo (`estimate_monte_carlo`,
seeded draws pushed through the whole chain) and linearisation (`estimate_linearised`,
a central-difference Jacobian times the input covariance). The method's calibration
errors are then added in quadrature, P and T independently (no correlation is stated
by the publications).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from .olivine import KdModel, add_olivine
from .oxides import melt_from_analysis
from .thermobarometers import METHODS, Thermobarometer

__all__ = ["PTEstimate", "Uncertainties", "estimate_linearised", "estimate_monte_carlo",
           "pt_of_analyses"]


@dataclass(frozen=True)
class Uncertainties:
    """1σ errors of the inputs and of the correction choices.

    Attributes
    ----------
    oxide_sigma : float or array_like, broadcastable to ``(n, 10)``
        Absolute 1σ of each oxide (wt%, `ANALYSIS_OXIDES` order).
    relative_sigma : float
        Relative 1σ of each oxide, added in quadrature to ``oxide_sigma``.
    h2o_sigma : float
        1σ of H2O, wt%.
    fe3_sigma : float
        1σ of Fe3+/ΣFe (draws kept in [0, 0.95]).
    fo_sigma : float
        1σ of the target Fo.
    kd_sigma : float
        1σ of K_D, added to the model's K_D (Roeder & Emslie 1970 give 0.30 ± 0.03).
    """

    oxide_sigma: float | ArrayLike = 0.0
    relative_sigma: float = 0.0
    h2o_sigma: float = 0.0
    fe3_sigma: float = 0.0
    fo_sigma: float = 0.0
    kd_sigma: float = 0.0

    def input_sigma(self, analysis: NDArray, n: int) -> NDArray[np.float64]:
        """1σ of the 14 inputs per sample: 10 oxides, H2O, Fe3+/ΣFe, Fo, K_D shift."""
        ox = np.sqrt(np.broadcast_to(np.asarray(self.oxide_sigma, float), (n, 10)) ** 2
                     + (self.relative_sigma * analysis) ** 2)
        rest = np.broadcast_to([self.h2o_sigma, self.fe3_sigma, self.fo_sigma,
                                self.kd_sigma], (n, 4))
        return np.concatenate([ox, rest], axis=1)


@dataclass(frozen=True)
class PTEstimate:
    """Pressure and temperature of each sample with their 1σ and correlation.

    Attributes
    ----------
    pressure_gpa, temperature_c : ndarray, shape ``(n,)``
        Mean (Monte Carlo) or central value (linearised); NaN where refused.
    sigma_p_gpa, sigma_t_c : ndarray, shape ``(n,)``
        1σ including the calibration error.
    correlation : ndarray, shape ``(n,)``
        Correlation of P and T including the calibration error.
    olivine_fraction : ndarray, shape ``(n,)``
        Olivine added per unit mass of primary melt (mean over accepted draws).
    accepted_fraction : ndarray, shape ``(n,)``
        Share of draws for which a primary melt was reconstructed (0 or 1 when
        linearised).
    reason : ndarray of str, shape ``(n,)``
        Refusal reason of the central composition, ``""`` if accepted.
    method : str
        Key of the thermobarometer.
    route : str
        ``"monte_carlo"`` or ``"linearised"``.
    """

    pressure_gpa: NDArray[np.float64]
    temperature_c: NDArray[np.float64]
    sigma_p_gpa: NDArray[np.float64]
    sigma_t_c: NDArray[np.float64]
    correlation: NDArray[np.float64]
    olivine_fraction: NDArray[np.float64]
    accepted_fraction: NDArray[np.float64]
    reason: NDArray[np.object_]
    method: str
    route: str


def _method(method: str | Thermobarometer) -> Thermobarometer:
    if isinstance(method, Thermobarometer):
        return method
    if method not in METHODS:
        raise InputError(f"unknown thermobarometer {method!r}; expected one of "
                         f"{', '.join(sorted(METHODS))}", key="method")
    return METHODS[method]


def pt_of_analyses(analysis: ArrayLike, *, h2o: ArrayLike = 0.0, fe3_fraction: ArrayLike,
                   target_fo: ArrayLike = 0.90, kd_shift: ArrayLike = 0.0,
                   kd_model: KdModel | None = None, method: str | Thermobarometer = "lee2009",
                   **olivine_options) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """The forward chain: analyses to primary melts to (P, T).

    Parameters
    ----------
    analysis : array_like, shape ``S + (10,)``
        wt%, `ANALYSIS_OXIDES` order.
    h2o, fe3_fraction, target_fo, kd_shift : array_like, broadcastable to ``S``
        Melt H2O (wt%), Fe3+/ΣFe, target Fo and K_D shift.
    kd_model : KdModel, optional
        Default constant 0.30.
    method : str or Thermobarometer
        A key of `METHODS`.
    **olivine_options
        ``step``, ``max_olivine``, ``mgo_min`` of `add_olivine`.

    Returns
    -------
    pressure_gpa, temperature_c, olivine_fraction : ndarray, shape ``S``
        NaN where refused.
    reason : ndarray of str, shape ``S``
        ``""`` where accepted.
    """
    method = _method(method)
    analysis = np.clip(np.asarray(analysis, dtype=float), 0.0, None)
    h2o = np.clip(np.asarray(h2o, dtype=float), 0.0, None)
    melt = melt_from_analysis(analysis, fe3_fraction=fe3_fraction, h2o=h2o)
    primary = add_olivine(melt, h2o=h2o, kd_model=kd_model, target_fo=target_fo,
                          kd_shift=kd_shift, **olivine_options)
    with np.errstate(invalid="ignore", divide="ignore"):
        p, t = method.solve(primary.melt, h2o=primary.h2o)
    return p, t, primary.olivine_fraction, primary.reason


def _finish(p, t, cov_pt, frac, acc, reason, method, route, calibration) -> PTEstimate:
    var_p = cov_pt[:, 0, 0] + calibration * method.sigma_p_gpa ** 2
    var_t = cov_pt[:, 1, 1] + calibration * method.sigma_t_c ** 2
    return PTEstimate(pressure_gpa=p, temperature_c=t, sigma_p_gpa=np.sqrt(var_p),
                      sigma_t_c=np.sqrt(var_t),
                      correlation=cov_pt[:, 0, 1] / np.sqrt(var_p * var_t),
                      olivine_fraction=frac, accepted_fraction=acc, reason=reason,
                      method=method.key, route=route)


def _central(analysis, h2o, fe3_fraction, target_fo) -> tuple[NDArray, NDArray]:
    analysis = np.asarray(analysis, dtype=float)
    if analysis.ndim != 2 or analysis.shape[1] != 10:
        raise InputError("analyses must have shape (n, 10), ANALYSIS_OXIDES order",
                         key="analysis")
    n = len(analysis)
    cols = [np.broadcast_to(np.asarray(v, float), (n,)) for v in (h2o, target_fo)]
    fe3 = np.asarray(fe3_fraction, dtype=float)
    fe3_mean = fe3.mean(axis=-1) if fe3.ndim == 2 else np.broadcast_to(fe3, (n,))
    base = np.column_stack([analysis, cols[0], fe3_mean, cols[1], np.zeros(n)])
    return analysis, base


def _run(x: NDArray, *, kd_model, method, olivine_options):
    """The forward chain on stacked inputs ``x[..., 14]``; returns P, T, f, reason."""
    return pt_of_analyses(x[..., :10], h2o=x[..., 10],
                          fe3_fraction=np.clip(x[..., 11], 0.0, 0.95),
                          target_fo=np.clip(x[..., 12], 0.5, 0.999), kd_shift=x[..., 13],
                          kd_model=kd_model, method=method, **olivine_options)


def estimate_monte_carlo(analysis: ArrayLike, *, fe3_fraction: ArrayLike,
                         h2o: ArrayLike = 0.0, target_fo: ArrayLike = 0.90,
                         kd_model: KdModel | None = None,
                         method: str | Thermobarometer = "lee2009",
                         uncertainties: Uncertainties | None = None, n_draws: int = 2000,
                         rng: np.random.Generator, calibration: bool = True,
                         **olivine_options) -> PTEstimate:
    """(P, T) of each sample by Monte Carlo through the whole chain.

    Every input is drawn normally about its value with its 1σ (`Uncertainties`);
    negative oxide and H2O draws are set to 0, Fe3+/ΣFe is kept in [0, 0.95].
    Fe3+/ΣFe may instead be given per draw, shape ``(n, n_draws)`` (draws of a prior),
    which replaces the normal draws. Draws that are refused (`add_olivine`) are left out
    of the moments; their share is reported.

    Parameters
    ----------
    analysis : array_like, shape ``(n, 10)``
        wt%, `ANALYSIS_OXIDES` order.
    fe3_fraction : array_like, shape ``(n,)`` or ``(n, n_draws)``
        Fe3+/ΣFe of the analysed melt.
    h2o, target_fo : array_like, broadcastable to ``(n,)``
        Melt H2O (wt%) and target Fo.
    kd_model : KdModel, optional
        Default constant 0.30.
    method : str or Thermobarometer
        A key of `METHODS`.
    uncertainties : Uncertainties, optional
        Default: no input errors (calibration errors only).
    n_draws : int
        Draws per sample.
    rng : numpy.random.Generator
        Source of the draws.
    calibration : bool
        Add the method's calibration errors (False: input errors only).
    **olivine_options
        ``step``, ``max_olivine``, ``mgo_min`` of `add_olivine`.

    Returns
    -------
    PTEstimate
    """
    method, base, sigma = _inputs(analysis, h2o, fe3_fraction, target_fo, method,
                                  uncertainties)
    n = len(base)
    x = base[:, None, :] + sigma[:, None, :] * rng.standard_normal((n, n_draws, 14))
    if np.ndim(fe3_fraction) == 2:
        x[..., 11] = np.broadcast_to(fe3_fraction, (n, n_draws))
    x[..., :11] = np.clip(x[..., :11], 0.0, None)
    opts = dict(kd_model=kd_model, method=method, olivine_options=olivine_options)
    p, t, frac, _ = _run(x, **opts)
    ok = np.isfinite(p) & np.isfinite(t)
    count = ok.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_p = np.where(ok, p, 0.0).sum(axis=1) / count
        mean_t = np.where(ok, t, 0.0).sum(axis=1) / count
        dp = np.where(ok, p - mean_p[:, None], 0.0)
        dt = np.where(ok, t - mean_t[:, None], 0.0)
        dof = (count - 1)[:, None, None]
        cov = np.stack([np.stack([(dp * dp).sum(1), (dp * dt).sum(1)], -1),
                        np.stack([(dp * dt).sum(1), (dt * dt).sum(1)], -1)], -2) / dof
        frac_mean = np.where(ok, frac, 0.0).sum(axis=1) / count
    reason = _run(base, **opts)[3]
    return _finish(mean_p, mean_t, cov, frac_mean, count / n_draws, reason, method,
                   "monte_carlo", calibration)


def _inputs(analysis, h2o, fe3_fraction, target_fo, method, uncertainties):
    """The method, the central inputs (n, 14) and their 1-sigma (n, 14)."""
    unc = Uncertainties() if uncertainties is None else uncertainties
    analysis, base = _central(analysis, h2o, fe3_fraction, target_fo)
    return _method(method), base, unc.input_sigma(analysis, len(base))


def estimate_linearised(analysis: ArrayLike, *, fe3_fraction: ArrayLike,
                        h2o: ArrayLike = 0.0, target_fo: ArrayLike = 0.90,
                        kd_model: KdModel | None = None,
                        method: str | Thermobarometer = "lee2009",
                        uncertainties: Uncertainties | None = None,
                        relative_step: float = 0.1, calibration: bool = True,
                        **olivine_options) -> PTEstimate:
    """(P, T) of each sample by linearisation: cov = J Σ Jᵀ + calibration.

    J is the central-difference Jacobian of (P, T) with respect to the 14 inputs
    (10 oxides, H2O, Fe3+/ΣFe, target Fo, K_D shift), with steps of ``relative_step``
    times each input's 1σ (inputs without error are skipped); where one side of a
    difference is refused, the other side is used alone.

    Parameters
    ----------
    analysis, fe3_fraction, h2o, target_fo, kd_model, method, uncertainties
        As in `estimate_monte_carlo` (``fe3_fraction`` per sample only).
    relative_step : float
        Finite-difference step in units of each input's 1σ.
    calibration : bool
        Add the method's calibration errors (False: input errors only).
    **olivine_options
        ``step``, ``max_olivine``, ``mgo_min`` of `add_olivine`.

    Returns
    -------
    PTEstimate
    """
    method, base, sigma = _inputs(analysis, h2o, fe3_fraction, target_fo, method,
                                  uncertainties)
    n = len(base)
    h = relative_step * sigma                                   # (n, 14)
    eye = np.eye(14)
    x = np.concatenate([base[:, None, :], base[:, None, :] + h[:, None, :] * eye,
                        base[:, None, :] - h[:, None, :] * eye], axis=1)
    p, t, frac, reason = _run(x, kd_model=kd_model, method=method,
                              olivine_options=olivine_options)
    y = np.stack([p, t], axis=-1)                               # (n, 29, 2)
    centre, up, down = y[:, :1], y[:, 1:15], y[:, 15:]
    with np.errstate(invalid="ignore", divide="ignore"):
        both = (up - down) / (2.0 * h[..., None])
        upper = (up - centre) / h[..., None]
        lower = (centre - down) / h[..., None]
    jac = np.where(np.isfinite(both), both, np.where(np.isfinite(upper), upper, lower))
    jac = np.where((h > 0.0)[..., None], jac, 0.0)              # (n, 14, 2)
    cov = np.einsum("nki,nk,nkj->nij", jac, sigma ** 2, jac)
    return _finish(centre[:, 0, 0], centre[:, 0, 1], cov, frac[:, 0],
                   np.isfinite(centre[:, 0, 0]).astype(float), reason[:, 0], method,
                   "linearised", calibration)
