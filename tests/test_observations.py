"""Observation tables and likelihoods: hand-computed Gaussians, quadrature, penalty, rules."""

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, special, stats

from lidmelt import forward
from lidmelt.inversion.errors import InputError
from lidmelt.inversion.study.priors import LogUniform, TruncatedNormal, Uniform
from lidmelt.inversion.observations import (
    KINDS,
    NO_MELT_SLOPE,
    CrustalThickness,
    MeltingPressure,
    melting_distance,
)

DATA = Path(__file__).parent / "data"


# ---- a melting column with closed-form paths


@dataclass
class FakePath:
    pressure: np.ndarray
    depth: np.ndarray
    temperature: np.ndarray
    melt_fraction: np.ndarray
    weight: np.ndarray


class ConstantProductivityColumn:
    """Melting columns with constant productivity (F linear in P) and T linear in P.

    Implements the parts of forward.MeltColumn the observation kinds use. The path is built
    exactly as forward documents it: midpoints of `num` equal-pressure intervals, weights
    the melt fraction made in each (here equal).
    """

    def __init__(self, top, onset, *, t_top=1350.0, t_slope=60.0, crust=7.0, melt=6.0,
                 melts=None):
        self.top_pressure = np.asarray(top, float)
        self.onset_pressure = np.asarray(onset, float)
        self.onset_depth = self.onset_pressure * 30.89
        self.top_depth = self.top_pressure * 30.89
        self.produces_melt = (self.onset_pressure > self.top_pressure if melts is None
                              else np.asarray(melts, bool))
        shape = self.top_pressure.shape
        self.crustal_thickness = np.where(self.produces_melt,
                                          np.broadcast_to(crust, shape), 0.0)
        self.melt_thickness = np.where(self.produces_melt, np.broadcast_to(melt, shape), 0.0)
        self.mean_melting_pressure = np.where(
            self.produces_melt, 0.5 * (self.top_pressure + self.onset_pressure),
            self.top_pressure)
        self.t_top, self.t_slope = t_top, t_slope

    def temperature_at(self, pressure):
        return self.t_top + self.t_slope * (pressure - self.top_pressure[..., None])

    def profile(self, pressure):
        pressure = np.asarray(pressure, float)
        return self.temperature_at(pressure), np.zeros(np.broadcast(
            pressure, self.top_pressure[..., None]).shape)

    def path(self, num=64):
        top, onset = self.top_pressure[..., None], self.onset_pressure[..., None]
        edges = top + (np.maximum(onset, top) - top) * np.linspace(0.0, 1.0, num + 1)
        mids = 0.5 * (edges[..., 1:] + edges[..., :-1])
        weight = np.where(self.produces_melt[..., None], 1.0 / num, 0.0) * np.ones(num)
        return FakePath(mids, mids * 30.89, self.temperature_at(mids), np.zeros_like(mids),
                        weight)


def _frame(**columns):
    return pd.DataFrame(columns)


PRESSURES = _frame(sample=["a", "b", "c"], pressure_gpa=[1.2, 1.9, 2.6],
                   pressure_sigma_gpa=[0.2, 0.15, 0.3])
PT = PRESSURES.assign(temperature_c=[1360.0, 1400.0, 1420.0], temperature_sigma_c=[25.0, 30.0, 20.0])


# ---- crustal thickness


def test_crust_loglike_is_a_sum_of_gaussians_with_model_error():
    obs = CrustalThickness.from_frame(
        _frame(site=["A", "B"], thickness_km=[7.0, 8.2], thickness_sigma_km=[0.8, 1.1]), model_error=0.5)
    column = ConstantProductivityColumn([1.0, 1.2], [3.0, 3.1], crust=[6.5, 9.0],
                                        melt=[5.7, 7.9])
    sd = np.hypot([0.8, 1.1], 0.5)  # quadrature sum
    expected = [stats.norm.logpdf([7.0, 8.2], loc=m, scale=sd).sum() for m in (6.5, 9.0)]
    assert_allclose(obs.log_likelihood(column), expected, rtol=1e-12)
    melt = CrustalThickness.from_frame(obs.data, model_error=0.5, thickness_of="melt")
    expected = [stats.norm.logpdf([7.0, 8.2], loc=m, scale=sd).sum() for m in (5.7, 7.9)]
    assert_allclose(melt.log_likelihood(column), expected, rtol=1e-12)
    assert obs.predict(column)["value"].shape == (2, 2)
    assert_allclose(obs.predict(column)["value"][1], [9.0, 9.0])


def test_crust_against_the_real_forward_model():
    study_obs = CrustalThickness.from_spec({"file": "crust.csv", "kind": "crustal_thickness"},
                                           base_dir=DATA)
    column = forward.melt_column(np.array([1350.0, 1450.0]), np.array([20.0, 40.0]))
    sd = study_obs.data["thickness_sigma_km"].to_numpy()
    expected = [stats.norm.logpdf(study_obs.values, loc=m, scale=sd).sum()
                for m in column.crustal_thickness]
    assert_allclose(study_obs.log_likelihood(column), expected, rtol=1e-12)


# ---- melting pressures: top and pooled


def test_top_pressure_and_temperature_against_scipy():
    column = ConstantProductivityColumn([1.1, 1.5], [3.2, 2.9], t_top=1340.0)
    obs = MeltingPressure.from_frame(PT, equilibration="top", model_error=0.1,
                                     temperature_model_error=15.0)
    sp, st = np.hypot(PT.pressure_sigma_gpa, 0.1), np.hypot(PT.temperature_sigma_c, 15.0)
    expected = [stats.norm.logpdf(PT.pressure_gpa, p, sp).sum()
                + stats.norm.logpdf(PT.temperature_c, 1340.0, st).sum() for p in (1.1, 1.5)]
    assert_allclose(obs.log_likelihood(column), expected, rtol=1e-12)
    pressure_only = MeltingPressure.from_frame(PRESSURES, equilibration="top")
    expected = [stats.norm.logpdf(PRESSURES.pressure_gpa, p, PRESSURES.pressure_sigma_gpa).sum()
                for p in (1.1, 1.5)]
    assert_allclose(pressure_only.log_likelihood(column), expected, rtol=1e-12)


def test_pooled_uses_mean_pressure_and_path_mean_temperature():
    column = ConstantProductivityColumn([1.0], [3.0], t_top=1330.0, t_slope=50.0)
    obs = MeltingPressure.from_frame(PT, equilibration="pooled")
    # Constant productivity: pooled P = (P0 + Pf) / 2 = 2.0 GPa (docs/model.md, "Melting regions"), and
    # the melt-weighted mean of a linear T(P) is T at that pressure, 1330 + 50 * 1.0.
    expected = (stats.norm.logpdf(PT.pressure_gpa, 2.0, PT.pressure_sigma_gpa).sum()
                + stats.norm.logpdf(PT.temperature_c, 1380.0, PT.temperature_sigma_c).sum())
    assert_allclose(obs.log_likelihood(column), [expected], rtol=1e-10)
    pred = obs.predict(column)
    assert_allclose(pred["value"], [[2.0] * 3])
    assert_allclose(pred["temperature"], [[1380.0] * 3])
    assert_allclose(pred["low"], [[1.0] * 3])
    assert_allclose(pred["high"], [[3.0] * 3])


# ---- melting pressures: the path marginal


def _closed_form_path(obs, sd, top, onset):
    # Uniform equilibration pressure on [top, onset] convolved with a Gaussian:
    # (Phi((P0 - y)/s) - Phi((Pf - y)/s)) / (P0 - Pf).
    return np.log((stats.norm.cdf((onset - obs) / sd) - stats.norm.cdf((top - obs) / sd))
                  / (onset - top))


def test_path_marginal_against_closed_form():
    column = ConstantProductivityColumn([1.0, 0.6], [3.0, 2.2])
    exact = [_closed_form_path(PRESSURES.pressure_gpa, PRESSURES.pressure_sigma_gpa, t, o).sum()
             for t, o in ((1.0, 3.0), (0.6, 2.2))]
    fine = MeltingPressure.from_frame(PRESSURES, equilibration="path", path_points=1024)
    assert_allclose(fine.log_likelihood(column), exact, rtol=1e-6)
    coarse = MeltingPressure.from_frame(PRESSURES, equilibration="path", path_points=64)
    # Loose: the midpoint rule on 64 intervals errs by about (h / sigma)^2 / 24 ~ 1e-3
    # of each row's likelihood (h = 0.03 GPa, sigma = 0.15 GPa).
    assert_allclose(coarse.log_likelihood(column), exact, rtol=5e-3)


PT_RHO = PT.assign(pt_correlation=[0.8, -0.6, 0.3])


def _covariance(row, p_error=0.0, t_error=0.0):
    # The stated errors are correlated; model errors are added independently of them.
    sp, st, rho = row.pressure_sigma_gpa, row.temperature_sigma_c, getattr(row, "pt_correlation", 0.0)
    return np.array([[sp**2 + p_error**2, rho * sp * st],
                     [rho * sp * st, st**2 + t_error**2]])


@pytest.mark.parametrize("table", [PT, PT_RHO], ids=["independent", "correlated"])
def test_path_marginal_with_temperature_against_quadrature(table):
    top, onset, t_top, slope = 1.0, 3.0, 1330.0, 50.0
    column = ConstantProductivityColumn([top], [onset], t_top=t_top, t_slope=slope)
    obs = MeltingPressure.from_frame(table, equilibration="path", path_points=512)
    expected = 0.0
    for row in table.itertuples():
        # Reference: the continuous mixture over a uniform equilibration pressure of
        # bivariate normals (scipy.stats.multivariate_normal), by adaptive quadrature.
        normal = stats.multivariate_normal(cov=_covariance(row))

        def integrand(p, row=row, normal=normal):
            residual = [row.pressure_gpa - p, row.temperature_c - t_top - slope * (p - top)]
            return normal.pdf(residual) / (onset - top)

        value, _ = integrate.quad(integrand, top, onset, epsabs=0, epsrel=1e-10)
        expected += np.log(value)
    assert_allclose(obs.log_likelihood(column), [expected], rtol=1e-5)


@pytest.mark.parametrize("equilibration", ["top", "pooled"])
def test_correlated_pt_point_models_against_scipy_multivariate_normal(equilibration):
    tops, onsets = (1.0, 1.4), (3.0, 2.6)
    column = ConstantProductivityColumn(tops, onsets, t_top=1330.0, t_slope=50.0)
    obs = MeltingPressure.from_frame(PT_RHO, equilibration=equilibration, model_error=0.1,
                                     temperature_model_error=15.0)
    expected = []
    for top, onset in zip(tops, onsets, strict=True):
        # Constant productivity: the pooled melt sits at (Pf + P0) / 2, and the
        # melt-weighted mean of a linear T(P) is T there (docs/model.md).
        p = top if equilibration == "top" else 0.5 * (top + onset)
        t = 1330.0 + 50.0 * (p - top)
        expected.append(sum(
            stats.multivariate_normal.logpdf([r.pressure_gpa, r.temperature_c], [p, t],
                                             _covariance(r, 0.1, 15.0))
            for r in PT_RHO.itertuples()))
    assert_allclose(obs.log_likelihood(column), expected, rtol=1e-12)


def test_correlated_path_with_free_model_errors_against_scipy_mixture():
    # "path" is the mixture over path points of bivariate normals; each walker has its
    # own (free) model errors. ConstantProductivityColumn's path: midpoints of 16 equal
    # intervals of [top, onset], equal weights 1/16, T linear in P.
    tops, onsets = (1.0, 0.6), (3.0, 2.2)
    column = ConstantProductivityColumn(tops, onsets, t_top=1330.0, t_slope=50.0)
    obs = MeltingPressure.from_frame(PT_RHO, equilibration="path", path_points=16,
                                     model_error=Uniform(0.0, 1.0),
                                     temperature_model_error=Uniform(0.0, 100.0))
    errors = {"model_error": np.array([0.1, 0.3]),
              "temperature_model_error": np.array([15.0, 40.0])}
    expected = []
    for i, (top, onset) in enumerate(zip(tops, onsets, strict=True)):
        mids = top + (onset - top) * (np.arange(16) + 0.5) / 16
        points = np.column_stack([mids, 1330.0 + 50.0 * (mids - top)])
        total = 0.0
        for r in PT_RHO.itertuples():
            cov = _covariance(r, errors["model_error"][i],
                              errors["temperature_model_error"][i])
            log_pdf = [stats.multivariate_normal.logpdf([r.pressure_gpa, r.temperature_c],
                                                        point, cov) for point in points]
            total += special.logsumexp(log_pdf) - np.log(16)
        expected.append(total)
    assert_allclose(obs.log_likelihood(column, errors=errors), expected, rtol=1e-12)
    pointwise = obs.pointwise_log_likelihood(column, errors=errors)
    assert_allclose(pointwise.sum(axis=1), expected, rtol=1e-12)
    with pytest.raises(ValueError, match=r"model_error is free"):
        obs.log_likelihood(column)


def test_simulated_pt_errors_have_the_stated_correlation():
    rows = 4000
    table = _frame(sample=["s"] * rows, pressure_gpa=[2.0] * rows, pressure_sigma_gpa=[0.2] * rows,
                   temperature_c=[1400.0] * rows, temperature_sigma_c=[25.0] * rows,
                   pt_correlation=[0.8] * rows)
    obs = MeltingPressure.from_frame(table, equilibration="top", model_error=0.1,
                                     temperature_model_error=15.0)
    column = ConstantProductivityColumn([1.0], [3.0], t_top=1330.0)
    sim = obs.simulate(column, np.random.default_rng(8))
    dp, dt = sim.values - 1.0, sim.temperature - 1330.0
    s_p, s_t = np.hypot(0.2, 0.1), np.hypot(25.0, 15.0)
    # Correlation of the total errors: 0.8 * 0.2 * 25 / (s_p s_t) = 0.614; the standard
    # error of a sample correlation is (1 - r^2) / sqrt(n) = 0.01 (common practice).
    r = 0.8 * 0.2 * 25.0 / (s_p * s_t)
    assert abs(np.corrcoef(dp, dt)[0, 1] - r) < 4 * (1 - r**2) / np.sqrt(rows)
    assert abs(np.std(dp) / s_p - 1) < 4 / np.sqrt(2 * rows)
    assert abs(np.std(dt) / s_t - 1) < 4 / np.sqrt(2 * rows)


# ---- model errors: fixed or free


def test_free_crust_model_error_against_scipy():
    prior = LogUniform(0.01, 2.0)
    obs = CrustalThickness.from_frame(
        _frame(site=["A", "B"], thickness_km=[7.0, 8.2], thickness_sigma_km=[0.8, 1.1]),
        model_error=prior)
    assert obs.free_errors == {"model_error": prior}
    column = ConstantProductivityColumn([1.0, 1.2], [3.0, 3.1], crust=[6.5, 9.0])
    errors = {"model_error": np.array([0.3, 1.5])}
    expected = [stats.norm.logpdf([7.0, 8.2], m, np.sqrt(np.array([0.8, 1.1])**2 + e**2)).sum()
                for m, e in ((6.5, 0.3), (9.0, 1.5))]
    assert_allclose(obs.log_likelihood(column, errors=errors), expected, rtol=1e-12)
    with pytest.raises(ValueError, match=r"model_error is free \(log-uniform"):
        obs.log_likelihood(column)
    # A free error's value is not part of the stated sigma; observed() can add one.
    assert_allclose(obs.sigma, [0.8, 1.1])
    assert_allclose(obs.observed({"model_error": 0.6})["sigma"], np.hypot([0.8, 1.1], 0.6))
    assert "model error free, log-uniform on [0.01, 2] km" in obs.describe()


@pytest.mark.parametrize(("spec", "match"), [
    ({"model_error": {"prior": "uniform", "min": -0.1, "max": 1.0}},
     r"key 'observations\[2\].model_error.min': prior min -0.1 is outside the physical "
     r"range \[0, inf\]"),
    ({"model_error": {"prior": "log-uniform", "min": 0.0, "max": 1.0}},
     r"model_error.min': min = 0 must be > 0 for a log-uniform prior"),
    ({"model_error": {"prior": "unifrom", "min": 0.0, "max": 1.0}},
     r"model_error.prior': unknown prior 'unifrom'; did you mean 'uniform'"),
    ({"model_error": "0.1"}, r"model_error': '0.1' must be a finite number or a prior"),
    ({"temperature_model_error": {"value": -2.0}},
     r"temperature_model_error.value': fixed value -2 is outside the physical range"),
])
def test_bad_model_error_settings(spec, match):
    with pytest.raises(InputError, match=match) as info:
        MeltingPressure.from_spec({**BASALT, "file": "basalts.csv", **spec}, base_dir=DATA,
                                  where="observations[2]")
    assert "\n" not in str(info.value)


def test_model_error_priors_from_a_block(tmp_path):
    spec = {**BASALT, "file": "basalts.csv",
            "model_error": {"prior": "normal", "mean": 0.0, "sd": 0.2},
            "temperature_model_error": {"value": 10.0}}
    obs = MeltingPressure.from_spec(spec, base_dir=DATA, where="observations[2]")
    # A normal prior on a standard deviation is cut to [0, inf): a half-normal.
    assert obs.model_error == TruncatedNormal(0.0, 0.2, 0.0, np.inf)
    assert obs.temperature_model_error == 10.0
    assert list(obs.free_errors) == ["model_error"]
    (tmp_path / "t.csv").write_text("sample,pressure_gpa,pressure_sigma_gpa\nA,1.5,0.2\n")
    free_t = {**BASALT, "temperature_model_error": {"prior": "uniform", "min": 0, "max": 50}}
    with pytest.raises(InputError, match=r"key 'observations\[2\].temperature_model_error': "
                                         r"a free temperature_model_error needs temperatures"):
        MeltingPressure.from_spec(free_t, base_dir=tmp_path, where="observations[2]")


# forward tabulates F, so its slope has small kinks; quad warns about roundoff there
# although the integral agrees with the path marginal to ~1e-6.
@pytest.mark.filterwarnings("ignore::scipy.integrate.IntegrationWarning")
@pytest.mark.parametrize("melting_region", ["column", "triangle"])
def test_path_marginal_real_forward_against_slow_quadrature(melting_region):
    # Reference route: adaptive quadrature of the same marginal written without the path
    # or its weights. The equilibration-pressure density is -dF/dP (column) or
    # -dF/dP (P - Pf) (triangle, widening from its apex at the top of melting; Plank &
    # Langmuir 1992), with F(P) from MeltColumn.profile (F rises monotonically here: a
    # dry column). Integrating by parts avoids differentiating F:
    #   int g(P) (-dF/dP) dP = g(Pf) F(Pf) + int F(P) g'(P) dP      (F(P0) = 0)
    # with g = N(y; P, s) for the column and g = N(y; P, s) (P - Pf) for the triangle.
    column = forward.melt_column(np.array([1420.0]), np.array([30.0]), melting_region=melting_region)
    top, onset = float(column.top_pressure[0]), float(column.onset_pressure[0])

    def melt_fraction(p):
        return float(column.profile(np.array([p]))[1][0, 0])

    def width(p):
        return (p - top) if melting_region == "triangle" else 1.0

    def d_width(p):
        return 1.0 if melting_region == "triangle" else 0.0

    def marginal(g, dg):
        body, _ = integrate.quad(lambda p: melt_fraction(p) * dg(p), top, onset,
                                 epsabs=1e-12, epsrel=1e-7, limit=200)
        return g(top) * melt_fraction(top) + body

    norm = marginal(width, d_width)
    obs = MeltingPressure.from_frame(PRESSURES, equilibration="path", path_points=512)
    expected = 0.0
    for y, s in zip(PRESSURES.pressure_gpa, PRESSURES.pressure_sigma_gpa, strict=True):
        def g(p, y=y, s=s):
            return stats.norm.pdf(y, p, s) * width(p)

        def dg(p, y=y, s=s):
            pdf = stats.norm.pdf(y, p, s)
            return pdf * (y - p) / s**2 * width(p) + pdf * d_width(p)

        expected += np.log(marginal(g, dg) / norm)
    # Loose-ish (measured 3-4e-6): the midpoint rule on 512 intervals of ~0.004 GPa against
    # sigma >= 0.15 GPa, and quad on a tabulated F, each err by about 1e-6.
    assert_allclose(obs.log_likelihood(column), [expected], rtol=2e-5)


def test_path_is_vectorised_over_columns():
    tps = np.array([1350.0, 1400.0, 1450.0, 1500.0])
    lids = np.array([10.0, 30.0, 50.0, 70.0])
    column = forward.melt_column(tps, lids)
    obs = MeltingPressure.from_frame(PT, equilibration="path", path_points=32)
    together = obs.log_likelihood(column)
    one_by_one = [obs.log_likelihood(forward.melt_column(tps[i:i + 1], lids[i:i + 1]))[0]
                  for i in range(4)]
    assert_allclose(together, one_by_one, rtol=1e-12)


# ---- no melt: finite, steep, sloping


def _params(tp, lid):
    tp, lid = np.broadcast_arrays(np.asarray(tp, float), np.asarray(lid, float))
    return {"potential_temperature": tp, "lithosphere_thickness": lid,
            "solidus_offset": np.zeros_like(tp)}


@pytest.mark.parametrize("equilibration", ["top", "pooled", "path"])
def test_no_melt_penalty_is_finite_and_slopes_toward_melting(equilibration):
    obs = MeltingPressure.from_frame(PT, equilibration=equilibration, path_points=16)
    tp = np.full(6, 1350.0)
    lids = np.array([60.0, 90.0, 100.0, 120.0, 160.0, 250.0])  # onset at 1350 degC: 82 km
    column = forward.melt_column(tp, lids)
    ll = obs.log_likelihood(column, parameters=_params(tp, lids))
    assert np.all(np.isfinite(ll))
    assert column.produces_melt[0] and not column.produces_melt[1:].any()
    assert np.all(np.diff(ll[1:]) < 0)  # thicker lid, further from melting: lower
    # Beyond the boundary the Gaussian stays at top = onset: only the slope changes ll.
    distance = lids[1:] - column.onset_depth[1:]
    assert_allclose(np.diff(ll[1:]), -len(obs) * NO_MELT_SLOPE * np.diff(distance),
                    rtol=1e-9)
    # Mantle too cold to meet the solidus at all (onset depth 0): still finite, and
    # lower the colder it is, so an optimiser is led toward hotter mantle.
    cold = np.array([1000.0, 1030.0, 1060.0])
    column = forward.melt_column(cold, np.zeros(3))
    assert np.all(column.onset_depth == 0.0)
    ll = obs.log_likelihood(column, parameters=_params(cold, 0.0))
    assert np.all(np.isfinite(ll)) and np.all(np.diff(ll) > 0)
    # Wet mantle too cold to melt has its closest approach to the solidus below the
    # surface (onset > 0, above the lid here): it still slopes toward hotter mantle, by
    # 1 nat per row per km of the margin / 3.66 K/km (docs/model.md, "No-melt penalty").
    cold = np.array([1000.0, 1010.0, 1020.0])
    for lid in (0.0, 10.0):
        column = forward.melt_column(cold, lid, water=100.0)
        assert not column.produces_melt.any() and np.all(column.onset_depth > 0.0)
        ll = obs.log_likelihood(column, parameters=_params(cold, lid))
        np.testing.assert_array_less(0.0, np.diff(ll))
    # Pressures only, top of melting at the surface: only the penalty moves with Tp.
    pressures = MeltingPressure.from_frame(PRESSURES, equilibration="top")
    column = forward.melt_column(cold, 0.0, water=100.0)
    ll = pressures.log_likelihood(column, parameters=_params(cold, 0.0))
    slope = np.diff(ll) / np.diff(np.asarray(column.solidus_margin))
    assert_allclose(slope, len(pressures) * NO_MELT_SLOPE / 3.66, rtol=1e-6)


@pytest.mark.parametrize("equilibration", ["top", "pooled", "path"])
def test_no_melt_penalty_joins_the_melting_likelihood_continuously(equilibration):
    # Step across the melting boundary (lid base = onset depth) by +-h, once in the lid
    # and once in Tp: the two log-likelihoods must differ by O(h), not by a constant.
    obs = MeltingPressure.from_frame(PT, equilibration=equilibration, path_points=64)
    onset = float(forward.melt_column(1350.0, 0.0).onset_depth)
    steps = np.array([1.0, 0.1, 0.01])  # km

    def jump(tp, lid):
        column = forward.melt_column(tp, lid)
        assert column.produces_melt[0::2].all() and not column.produces_melt[1::2].any()
        ll = obs.log_likelihood(column, parameters=_params(tp, lid))
        return np.abs(ll[0::2] - ll[1::2])

    lids = np.ravel(np.column_stack([onset - steps, onset + steps]))
    across_lid = jump(np.full(lids.size, 1350.0), lids)
    # The same boundary crossed in Tp at a fixed lid: Tp where the onset is h below or
    # above the lid (the onset deepens by about 0.37 km per K near 1350 degC).
    lid = np.full(6, onset)
    tps = np.ravel(np.column_stack([1350.0 + steps / 0.37, 1350.0 - steps / 0.37]))
    across_tp = jump(tps, lid)
    # Outside, 3 rows x NO_MELT_SLOPE nat/km; inside, the Gaussians follow the top of
    # melting (about 1 nat/km in all here): the gap grows like ~3 nat/km x 2h (measured
    # up to 2.7), so 5 nat/km is a bound that a constant offset of even 0.1 nat breaks at
    # h = 0.01 km.
    for gaps, width in ((across_lid, 2 * steps), (across_tp, 2 * steps)):
        np.testing.assert_array_less(gaps, 5.0 * width)
        assert gaps[-1] < gaps[0] / 10  # shrinks with the step (100 times smaller)


def test_crust_no_melt_keeps_the_zero_thickness_gaussian_and_slopes():
    obs = CrustalThickness.from_spec({"file": "crust.csv"}, base_dir=DATA)
    tp, lids = np.full(3, 1350.0), np.array([90.0, 120.0, 150.0])
    column = forward.melt_column(tp, lids)
    ll = obs.log_likelihood(column, parameters=_params(tp, lids))
    gaussian_at_zero = stats.norm.logpdf(obs.values, 0.0, obs.sigma).sum()
    distance = melting_distance(column, _params(tp, lids))
    assert_allclose(distance, lids - column.onset_depth, rtol=1e-12)
    # 4 rows record crust, 1 nat per km of distance per row (NO_MELT_SLOPE).
    assert_allclose(ll, gaussian_at_zero - 4 * 1.0 * distance, rtol=1e-12)
    # forward's column carries its lid thickness, so the parameters are not needed.
    assert_allclose(obs.log_likelihood(column), ll, rtol=1e-12)
    # A column that carries no lid thickness, and no parameters: finite, no slope.
    dry = ConstantProductivityColumn([2.0, 2.5], [2.0, 2.5])
    assert not dry.produces_melt.any()
    assert_allclose(obs.log_likelihood(dry), gaussian_at_zero, rtol=1e-12)


def test_loglike_finite_across_the_whole_domain():
    rng = np.random.default_rng(11)
    n = 300
    params = {name: rng.uniform(*forward.PARAMETER_DOMAIN[name], n) for name in
              ("potential_temperature", "lithosphere_thickness", "solidus_offset")}
    params["water"] = rng.uniform(0.0, 1000.0, n)
    column = forward.melt_column(params["potential_temperature"],
                                 params["lithosphere_thickness"], water=params["water"],
                                 solidus_offset=params["solidus_offset"])
    blocks = [CrustalThickness.from_spec({"file": "crust.csv"}, base_dir=DATA)] + [
        MeltingPressure.from_frame(PT, equilibration=e, path_points=16)
        for e in ("top", "pooled", "path")]
    for block in blocks:
        ll = block.log_likelihood(column, parameters=params)
        assert ll.shape == (n,) and np.all(np.isfinite(ll)), block.describe()


# ---- simulation from the likelihood


def test_simulate_is_seeded_and_centred_on_the_model():
    column = ConstantProductivityColumn([1.0], [3.0], crust=[7.5])
    crust = CrustalThickness.from_frame(_frame(site=["A"] * 400, thickness_km=[7.0] * 400,
                                               thickness_sigma_km=[0.8] * 400))
    a = crust.simulate(column, np.random.default_rng(4))
    b = crust.simulate(column, np.random.default_rng(4))
    assert_allclose(a.values, b.values)
    assert abs(a.values.mean() - 7.5) < 5 * 0.8 / np.sqrt(400)  # 5 standard errors
    path = MeltingPressure.from_frame(
        _frame(sample=["s"] * 400, pressure_gpa=[2.0] * 400, pressure_sigma_gpa=[0.1] * 400),
        equilibration="path")
    sim = path.simulate(column, np.random.default_rng(5))
    # Uniform equilibration on [1, 3] GPa plus N(0, 0.1^2): mean 2, variance 1/3 + 0.01.
    assert abs(sim.values.mean() - 2.0) < 5 * np.sqrt(1 / 3 + 0.01) / np.sqrt(400)
    assert sim.equilibration == "path" and sim.lines == path.lines
    with pytest.raises(ValueError, match="one parameter vector"):
        crust.simulate(ConstantProductivityColumn([1.0, 1.0], [3.0, 3.0]),
                       np.random.default_rng(1))


# ---- reading tables: every rule

CRUST = {"kind": "crustal_thickness", "file": "t.csv"}
BASALT = {"kind": "melting_pressure", "file": "t.csv", "equilibration": "top"}
PT_HEADER = "sample,pressure_gpa,pressure_sigma_gpa,temperature_c,temperature_sigma_c\n"
RHO_HEADER = PT_HEADER.replace("\n", ",pt_correlation\n")

TABLE_CASES = {
    "misspelt-column": (CRUST, "site,thickness,thickness_sigma_km\nA,7,1\n",
        r"t.csv, line 1, column 'thickness': unknown column 'thickness'; did you mean "
        r"'thickness_km'\? \(a column starting with 'note' is kept as a remark\)"),
    "missing-column": (CRUST, "site,thickness_sigma_km\nA,1\n",
        r"t.csv, line 1, column 'thickness_km': missing column 'thickness_km'"
        r" \(found: site, thickness_sigma_km\)$"),
    # A misspelt optional column used to be kept as text: the fit then ignored it.
    "misspelt-optional": (BASALT, RHO_HEADER.replace("pt_correlation", "pt_corr")
                          + "A,1,0.2,1350,20,0.5\n",
        r"t.csv, line 1, column 'pt_corr': unknown column 'pt_corr'; did you mean "
        r"'pt_correlation'\?"),
    "unknown-column-listed": (CRUST, "site,thickness_km,thickness_sigma_km,lat\nA,7,1,3\n",
        r"unknown column 'lat'; this table reads site, thickness_km, thickness_sigma_km "),
    # The nearest name comes from the kind's columns, not from the header.
    "missing-sigma-of-temperature": (BASALT, PT_HEADER.replace(",temperature_sigma_c", "")
                                     + "A,1,0.2,1350\n",
        r"missing column 'temperature_sigma_c', needed together with temperature_c "
        r"\(found: sample, pressure_gpa, pressure_sigma_gpa, temperature_c\)$"),
    "old-sigma-name": (BASALT, "sample,pressure_gpa,sigma_gpa\nA,1,0.2\n",
        r"line 1, column 'sigma_gpa': column 'sigma_gpa' is now called "
        r"'pressure_sigma_gpa' \(lidmelt 0.1.0"),
    "old-crust-sigma-name": (CRUST, "site,thickness_km,sigma_km\nA,7,1\n",
        r"column 'sigma_km' is now called 'thickness_sigma_km'"),
    "old-temperature-sigma-name": (BASALT, PT_HEADER.replace("temperature_sigma_c", "sigma_c")
                                   + "A,1,0.2,1350,20\n",
        r"column 'sigma_c' is now called 'temperature_sigma_c'"),
    "digit-separator": (CRUST, "site,thickness_km,thickness_sigma_km\nA,6_5,1\n",
        r"line 2, column 'thickness_km': '6_5' is not a number"),
    "semicolons": (CRUST, "site;thickness_km;thickness_sigma_km\nA;7;1\n",
                   r"missing column 'site'.*is the file comma-separated\?"),
    "non-numeric": (CRUST, "site,thickness_km,thickness_sigma_km\nA,7,1\nB,seven,1\n",
                    r"t.csv, line 3, column 'thickness_km': 'seven' is not a number"),
    "nan": (CRUST, "site,thickness_km,thickness_sigma_km\nA,NaN,1\n",
            r"line 2, column 'thickness_km': value 'NaN' \(NaN\) is not allowed"),
    "infinite": (CRUST, "site,thickness_km,thickness_sigma_km\nA,inf,1\n",
        r"value 'inf' is not a finite number"),
    "empty-cell": (CRUST, "site,thickness_km,thickness_sigma_km\nA,,1\n",
                   r"line 2, column 'thickness_km': empty cell"),
    "empty-name": (CRUST, "site,thickness_km,thickness_sigma_km\n,7,1\n", r"column 'site': empty cell"),
    "sigma-zero": (CRUST, "site,thickness_km,thickness_sigma_km\nA,7,0\n",
                   r"line 2, column 'thickness_sigma_km': value 0 must be >= 0.001 km"),
    "sigma-negative": (BASALT, "sample,pressure_gpa,pressure_sigma_gpa\nA,1.5,-0.2\n",
                       r"column 'pressure_sigma_gpa': value -0.2 must be >= 0.0001 GPa"),
    "negative-thickness": (CRUST, "site,thickness_km,thickness_sigma_km\nA,7,1\nB,-2,1\n",
        r"line 3, column 'thickness_km': value -2 must be between 0 and 60 km \(a "
        r"thickness cannot be negative, and the thickest"),
    "pressure-high": (BASALT, "sample,pressure_gpa,pressure_sigma_gpa\nA,12.5,0.2\n",
                      r"column 'pressure_gpa': value 12.5 must be between 0 and 10 GPa"),
    "pressure-negative": (BASALT, "sample,pressure_gpa,pressure_sigma_gpa\nA,-0.1,0.2\n",
                          r"value -0.1 must be between 0 and 10 GPa"),
    "temperature-kelvin": (BASALT, PT_HEADER + "A,1,0.2,2650,20\n",
        r"column 'temperature_c': value 2650 must be between 800 and 2000 degC"),
    "sigma-c-zero": (BASALT, PT_HEADER + "A,1,0.2,1350,0\n",
                     r"column 'temperature_sigma_c': value 0 must be >= 0.01 degC"),
    "temperature-without-sigma": (BASALT, PT_HEADER.replace(",temperature_sigma_c", "") + "A,1,0.2,1350\n",
        r"missing column 'temperature_sigma_c', needed together with temperature_c"),
    "correlation-one": (BASALT, RHO_HEADER + "A,1,0.2,1350,20,0.5\nB,1,0.2,1350,20,1\n",
        r"t.csv, line 3, column 'pt_correlation': value 1 must be > -1 and < 1 \(a "
        r"correlation coefficient lies strictly between -1 and 1\)"),
    "correlation-below-minus-one": (BASALT, RHO_HEADER + "A,1,0.2,1350,20,-1.2\n",
        r"line 2, column 'pt_correlation': value -1.2 must be > -1 and < 1"),
    "correlation-empty": (BASALT, RHO_HEADER + "A,1,0.2,1350,20,\n",
        r"line 2, column 'pt_correlation': empty cell"),
    "correlation-without-temperature": (BASALT,
        "sample,pressure_gpa,pressure_sigma_gpa,pt_correlation\nA,1,0.2,0.5\n",
        r"t.csv, line 1, column 'pt_correlation': column 'pt_correlation' is allowed only "
        r"together with temperature_c, temperature_sigma_c \(missing: temperature_c, temperature_sigma_c\)"),
    "field-count": (CRUST, "site,thickness_km,thickness_sigma_km\nA,7,1\nB,7\n",
                    r"line 3: has 2 fields but the header \(line 1\) has 3"),
    "empty-file": (CRUST, "\n# nothing here\n", r"the file is empty"),
    "header-only": (CRUST, "site,thickness_km,thickness_sigma_km\n", r"line 1: no data rows"),
    "duplicate-column": (CRUST, "site,thickness_km,thickness_sigma_km,site\nA,7,1,B\n",
                         r"column 'site': column 'site' appears twice"),
}


@pytest.mark.parametrize("case", list(TABLE_CASES))
def test_bad_table(tmp_path, case):
    spec, text, match = TABLE_CASES[case]
    (tmp_path / "t.csv").write_text(text)
    with pytest.raises(InputError, match=match) as info:
        KINDS[spec["kind"]].from_spec(spec, base_dir=tmp_path, where="observations[1]")
    assert "\n" not in str(info.value)
    assert str(info.value).startswith(str(tmp_path / "t.csv"))


def test_missing_table_file(tmp_path):
    with pytest.raises(InputError, match=r"t.csv, key 'observations\[1\].file': observation "
                                         r"file not found"):
        CrustalThickness.from_spec(CRUST, base_dir=tmp_path, where="observations[1]")


def test_comments_blank_lines_bom_and_extra_columns(tmp_path):
    text = ("\ufeff# source: invented survey\n\nsite,thickness_km,thickness_sigma_km,note\n"
            "A,7.0,0.8,first\n# a comment between rows\n\nB,6.0,-1,second\n")
    (tmp_path / "t.csv").write_text(text, encoding="utf-8")
    # The bad row is on line 7 of the file as an editor shows it.
    with pytest.raises(InputError, match=r"line 7, column 'thickness_sigma_km'"):
        CrustalThickness.from_spec(CRUST, base_dir=tmp_path)
    (tmp_path / "t.csv").write_text(text.replace("-1", "1.2"), encoding="utf-8")
    obs = CrustalThickness.from_spec(CRUST, base_dir=tmp_path)
    assert obs.ids == ("A", "B") and obs.lines == (4, 7)
    assert list(obs.data["note"]) == ["first", "second"]
    assert obs.data["thickness_km"].dtype == float


def test_unknown_option_key_for_a_kind():
    with pytest.raises(InputError, match=r"observations\[1\].equilibration': unknown key "
                                         r"'equilibration' for kind 'crustal_thickness'"):
        CrustalThickness.from_spec({**CRUST, "equilibration": "top"}, base_dir=DATA,
                                   where="observations[1]")


@pytest.mark.parametrize(("options", "match"), [
    ({"path_points": 3}, r"path_points': 3 must be a whole number from 8 to 1024"),
    ({"path_points": 64.0}, r"64.0 must be a whole number"),
    ({"temperature_model_error": -5.0}, r"temperature_model_error': -5 must be >= 0"),
])
def test_bad_pressure_options(options, match):
    with pytest.raises(InputError, match=match):
        MeltingPressure.from_frame(PRESSURES, **{"equilibration": "top", **options})


def test_equilibration_is_required_and_its_choices_are_explained(tmp_path):
    # No silent default: each choice moves Tp and the lid, so the user must pick one.
    (tmp_path / "t.csv").write_text("sample,pressure_gpa,pressure_sigma_gpa\nA,1.5,0.2\n")
    spec = {key: value for key, value in BASALT.items() if key != "equilibration"}
    with pytest.raises(InputError) as info:
        MeltingPressure.from_spec(spec, base_dir=tmp_path, where="observations[2]")
    message = str(info.value)
    assert message.startswith("key 'observations[2].equilibration': missing 'equilibration'")
    for choice in ('"top" (at the top of melting', '"pooled" (at the mean melting pressure',
                   '"path" (anywhere along the melting path, weighted by melt production'):
        assert choice in message
    assert "\n" not in message
    with pytest.raises(InputError, match=r"missing 'equilibration'"):
        MeltingPressure.from_frame(PRESSURES)
    with pytest.raises(InputError, match=r"unknown value 'bottom'; choose \"top\" \(at"):
        MeltingPressure.from_frame(PRESSURES, equilibration="bottom")


def test_observed_and_describe():
    obs = MeltingPressure.from_frame(PT, model_error=0.1, equilibration="path")
    seen = obs.observed()
    assert set(seen) == {"value", "sigma", "temperature", "temperature_sigma"}
    assert_allclose(seen["sigma"], np.hypot(PT.pressure_sigma_gpa, 0.1))
    assert "3 melting pressure-temperature points" in obs.describe()
    assert "weighted by melt production" in obs.describe()
