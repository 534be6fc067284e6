"""Priors against scipy.stats (an independent reference implementation) and the spec rules."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats

from lidmelt.inversion.errors import InputError
from lidmelt.inversion.study.priors import (
    LogUniform,
    Normal,
    TruncatedNormal,
    Uniform,
    prior_from_spec,
)

# Each case: our prior, the equivalent frozen scipy.stats distribution (reference library).
CASES = [
    (Uniform(1200.0, 1700.0), stats.uniform(loc=1200.0, scale=500.0)),
    (Normal(0.0, 20.0), stats.norm(loc=0.0, scale=20.0)),
    (TruncatedNormal(40.0, 30.0, 0.0, 150.0), stats.truncnorm(-40 / 30, 110 / 30, 40.0, 30.0)),
    (TruncatedNormal(5.0, 2.0, 0.0, math.inf), stats.truncnorm(-2.5, np.inf, 5.0, 2.0)),
    (TruncatedNormal(5.0, 2.0, -math.inf, 4.0), stats.truncnorm(-np.inf, -0.5, 5.0, 2.0)),
    (LogUniform(1.0, 1000.0), stats.loguniform(1.0, 1000.0)),
]
IDS = ["uniform", "normal", "truncnorm", "truncnorm-low", "truncnorm-high", "loguniform"]


@pytest.mark.parametrize(("prior", "ref"), CASES, ids=IDS)
def test_logpdf_matches_scipy(prior, ref):
    low, high = prior.bounds
    lo = low if math.isfinite(low) else ref.ppf(1e-6)
    hi = high if math.isfinite(high) else ref.ppf(1 - 1e-6)
    x = np.linspace(lo, hi, 101)
    assert_allclose(prior.logpdf(x), ref.logpdf(x), rtol=1e-10, atol=1e-12)
    assert prior.logpdf(x).shape == x.shape


@pytest.mark.parametrize(("prior", "ref"), CASES, ids=IDS)
def test_outside_support_is_minus_inf(prior, ref):
    low, high = prior.bounds
    outside = [v for v in (low - 1.0, high + 1.0) if math.isfinite(v)]
    for v in outside:
        assert prior.logpdf(v) == -np.inf
        assert ref.logpdf(v) == -np.inf


@pytest.mark.parametrize(("prior", "ref"), CASES, ids=IDS)
def test_cdf_and_ppf_match_scipy(prior, ref):
    q = np.linspace(0.001, 0.999, 57)
    assert_allclose(prior.ppf(q), ref.ppf(q), rtol=1e-9, atol=1e-9)
    x = ref.ppf(q)
    assert_allclose(prior.cdf(x), q, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize(("prior", "ref"), CASES, ids=IDS)
def test_sample_moments_and_shape(prior, ref):
    rng = np.random.default_rng(20181804)
    n = 200_000
    draws = prior.sample(rng, n)
    assert draws.shape == (n,)
    low, high = prior.bounds
    assert np.all((draws >= low) & (draws <= high))
    # Sample mean within 5 standard errors of the reference mean (fixed seed, so the
    # test is deterministic; 5 SE keeps it far from a coin flip).
    se = ref.std() / math.sqrt(n)
    assert abs(draws.mean() - ref.mean()) < 5 * se
    # Sample sd within 1 % (the relative standard error of a sd at n = 2e5 is ~0.2-0.3 %).
    assert draws.std() == pytest.approx(ref.std(), rel=0.01)
    # Whole distribution: Kolmogorov-Smirnov against the reference cdf.
    assert stats.kstest(draws[:20_000], ref.cdf).pvalue > 1e-3


def test_sample_same_seed_same_draws_and_shape():
    prior = TruncatedNormal(0.0, 1.0, -1.0, 2.0)
    a = prior.sample(np.random.default_rng(7), (3, 4))
    b = prior.sample(np.random.default_rng(7), (3, 4))
    assert a.shape == (3, 4)
    np.testing.assert_array_equal(a, b)


def test_sample_requires_a_generator():
    with pytest.raises(TypeError, match="Generator"):
        Uniform(0.0, 1.0).sample(np.random.RandomState(1), 3)


def test_truncated_normal_far_tail_is_accurate():
    # Interval 8-9 sd above the mean: naive Phi(b) - Phi(a) rounds to 0 in double precision.
    prior = TruncatedNormal(0.0, 1.0, 8.0, 9.0)
    ref = stats.truncnorm(8.0, 9.0)
    x = np.linspace(8.0, 9.0, 11)
    assert_allclose(prior.logpdf(x), ref.logpdf(x), rtol=1e-8)
    draws = prior.sample(np.random.default_rng(3), 1000)
    assert np.all((draws >= 8.0) & (draws <= 9.0))


def test_half_normal_density_value():
    # Half-normal density at 0 is 2 * phi(0) = sqrt(2 / pi) (textbook closed form).
    prior = TruncatedNormal(0.0, 1.0, 0.0, math.inf)
    assert float(np.exp(prior.logpdf(0.0))) == pytest.approx(math.sqrt(2 / math.pi), rel=1e-12)


@pytest.mark.parametrize(
    ("cls", "args", "match"),
    [
        (Uniform, (2.0, 1.0), "less than max"),
        (Uniform, (0.0, math.inf), "finite"),
        (Normal, (0.0, 0.0), "must be > 0"),
        (TruncatedNormal, (0.0, 1.0, 1.0, 1.0), "less than max"),
        (TruncatedNormal, (0.0, 1.0, -math.inf, math.inf), "finite min or max"),
        (LogUniform, (0.0, 10.0), "must be > 0"),
    ],
)
def test_constructors_reject_bad_numbers(cls, args, match):
    with pytest.raises(ValueError, match=match):
        cls(*args)


def test_describe_names_family_numbers_and_unit():
    assert Uniform(0.0, 150.0).describe(unit="km") == "uniform on [0, 150] km"
    assert "truncated to [0, inf]" in TruncatedNormal(1.0, 2.0, 0.0, math.inf).describe()


# --- prior_from_spec -------------------------------------------------------------------

WHERE = "parameters.lithosphere_thickness"


def _spec(spec, **kw):
    return prior_from_spec("lithosphere_thickness", spec, where=WHERE, file="s.toml", **kw)


def test_spec_builds_each_family():
    assert _spec({"prior": "uniform", "min": 0, "max": 150}) == Uniform(0.0, 150.0)
    assert _spec({"prior": "normal", "mean": 40, "sd": 10}) == Normal(40.0, 10.0)
    assert _spec({"prior": "normal", "mean": 40, "sd": 10, "min": 0}) == TruncatedNormal(
        40.0, 10.0, 0.0, math.inf
    )
    assert _spec({"prior": "truncated-normal", "mean": 4, "sd": 1, "max": 9}) == (
        TruncatedNormal(4.0, 1.0, -math.inf, 9.0)
    )
    assert _spec({"prior": "log-uniform", "min": 1, "max": 100}) == LogUniform(1.0, 100.0)
    fixed = _spec({"value": 35})
    assert fixed == 35.0 and isinstance(fixed, float)


def test_spec_normal_is_truncated_to_the_physical_range():
    prior = _spec({"prior": "normal", "mean": 10, "sd": 20}, domain=(0, 400))
    assert prior == TruncatedNormal(10.0, 20.0, 0.0, 400.0)
    # The result is a normalised density on the domain (checked against scipy).
    ref = stats.truncnorm(-0.5, 19.5, 10.0, 20.0)
    assert_allclose(prior.logpdf([0.0, 10.0, 50.0]), ref.logpdf([0.0, 10.0, 50.0]), rtol=1e-10)


@pytest.mark.parametrize(
    ("spec", "kw", "match"),
    [
        (5.0, {}, r"key 'parameters.lithosphere_thickness': expected a table"),
        ({"prior": "unifrom", "min": 0, "max": 1}, {},
            r"unknown prior 'unifrom'; did you mean 'uniform'"),
        ({"prior": "gamma", "min": 0, "max": 1}, {}, r"unknown prior 'gamma'; valid choices"),
        ({"prior": "uniform", "min": 5, "max": 5}, {},
            r"\.min': min \(5\) must be less than max \(5\)"),
        ({"prior": "uniform", "min": 9, "max": 5}, {},
            r"min \(9\) must be less than max \(5\)"),
        ({"prior": "normal", "mean": 0, "sd": -1}, {}, r"\.sd': sd = -1 must be > 0"),
        ({"prior": "normal", "mean": 0, "sd": 0}, {}, r"sd = 0 must be > 0"),
        ({"prior": "uniform", "min": 0}, {}, r"\.max': a uniform prior needs 'max'"),
        ({"prior": "uniform", "min": 0, "maxx": 1}, {},
            r"unknown key 'maxx'.*did you mean 'max'"),
        ({"prior": "uniform", "min": 0, "max": 1, "sd": 1}, {},
            r"uniform prior takes min, max"),
        ({"prior": "uniform", "min": "zero", "max": 1}, {}, r"'zero' is not a number"),
        ({"prior": "uniform", "min": True, "max": 1}, {}, r"True is not a number"),
        ({"prior": "uniform", "min": float("nan"), "max": 1}, {},
            r"nan is not a finite number"),
        ({"prior": "log-uniform", "min": 0, "max": 10}, {}, r"must be > 0 for a log-uniform"),
        ({"prior": "truncated-normal", "mean": 0, "sd": 1}, {}, r"needs min, max or both"),
        ({"valeu": 3}, {}, r"\.valeu': unknown key 'valeu'; did you mean 'value'"),
        ({}, {}, r"needs either value = <number> \(fixed\) or prior ="),
        ({"value": 3, "min": 0}, {}, r"has value = \.\.\. \(fixed\) and also 'min'"),
        ({"value": "3"}, {}, r"'3' is not a number"),
        ({"value": -5}, {"domain": (0, 400)},
            r"fixed value -5 is outside the physical range \[0, 400\]"),
        ({"value": 0}, {"domain": (0, 20), "exclusive_low": True},
            r"outside the physical range \(0, 20\]"),
        ({"prior": "uniform", "min": -10, "max": 100}, {"domain": (0, 400)},
            r"\.min': prior min -10 is outside"),
        ({"prior": "uniform", "min": 0, "max": 500}, {"domain": (0, 400)},
            r"\.max': prior max 500 is outside"),
        ({"prior": "normal", "mean": 500, "sd": 5}, {"domain": (0, 400)},
            r"\.mean': mean 500 is outside"),
        ({"prior": "normal", "mean": 0, "sd": 1, "min": 50, "max": 60}, {},
            r"more than 30 sd from the mean 0"),
    ],
)
def test_spec_errors_name_the_key_and_rule(spec, kw, match):
    with pytest.raises(InputError, match=match) as info:
        _spec(spec, **kw)
    text = str(info.value)
    assert text.startswith("s.toml, key 'parameters.lithosphere_thickness")
    assert "\n" not in text


# ---- properties over many parameter values (hypothesis) -----------------------------------

_finite = st.floats(-1e4, 1e4, allow_nan=False)
_positive = st.floats(1e-3, 1e3, allow_nan=False)


@settings(max_examples=60, deadline=None)
@given(mean=_finite, sd=_positive, lo=st.floats(-3.0, 2.5), width=st.floats(0.05, 6.0),
       q=st.floats(0.0, 1.0))
def test_truncated_normal_properties(mean, sd, lo, width, q):
    # width * sd >= 5e-5 is far above the rounding of |mean| <= 1e4 (~2e-12), so every
    # generated case has low < high and is checked (none is skipped).
    low, high = mean + lo * sd, mean + (lo + width) * sd
    prior = TruncatedNormal(mean, sd, low, high)
    x = prior.ppf(q)
    assert low <= x <= high
    # ppf inverts cdf (tolerance relative to the interval, float64 rounding of Phi).
    assert abs(float(prior.cdf(x)) - q) < 1e-6
    ref = stats.truncnorm(lo, lo + width, loc=mean, scale=sd)
    mid = 0.5 * (low + high)
    assert_allclose(prior.logpdf(mid), ref.logpdf(mid), rtol=1e-7, atol=1e-9)


@settings(max_examples=60, deadline=None)
@given(low=st.floats(1e-3, 1e3), ratio=st.floats(1.01, 1e4), q=st.floats(0.0, 1.0))
def test_log_uniform_properties(low, ratio, q):
    prior = LogUniform(low, low * ratio)
    x = prior.ppf(q)
    assert low * (1 - 1e-12) <= x <= low * ratio * (1 + 1e-12)
    assert abs(float(prior.cdf(x)) - q) < 1e-9
    assert_allclose(prior.logpdf(x), stats.loguniform(low, low * ratio).logpdf(x), rtol=1e-9)
