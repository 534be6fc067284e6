"""Evidence of a scenario (nested sampling, quadrature) against exact and independent values.

The Gaussian toy and the prior-tail problem go through `scenario_evidence`, the same
function `compare` calls for every scenario: it takes any object with the interface of
`inversion.LogPosterior` (names, priors, log_likelihood), and the toy is such an object.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from lidmelt import forward
from lidmelt.inversion import LogPosterior, read_scenarios
from lidmelt.inversion.comparison import (
    nested_evidence,
    quadrature_evidence,
    scenario_evidence,
)
from lidmelt.inversion.fitting.grid import grid_posterior
from lidmelt.inversion.study.priors import LogUniform, Normal, TruncatedNormal, Uniform
from scipy import integrate, stats
from toys import GaussianToy

DATA = Path(__file__).parent / "data"
SMALL = {"live_points": 200, "effective_samples": 1000, "grid_points": 20_000}


Y = np.array([0.8, 1.4, 0.3, 1.1, 0.9, 1.6])
S, TAU = 0.5, 2.0


def test_gaussian_toy_evidence_is_exact():
    # y_i ~ N(mu, s^2), mu ~ N(0, t^2)  =>  y ~ N(0, s^2 I + t^2 1 1^T): the marginal of a
    # linear-Gaussian model (Bishop 2006, Pattern Recognition and Machine Learning, eq. 2.115)
    exact = stats.multivariate_normal(np.zeros(Y.size),
                                      S**2 * np.eye(Y.size) + TAU**2).logpdf(Y)
    estimate = scenario_evidence(GaussianToy(Y, S, Normal(0.0, TAU)), seed=4, **SMALL)
    assert estimate.method == "nested sampling"
    assert abs(estimate.log_evidence - exact) < 0.1
    assert abs(estimate.log_evidence - exact) < 3 * estimate.sd  # the error bar is honest
    assert estimate.quadrature == pytest.approx(exact, abs=2e-3)
    assert estimate.quadrature_error < 2e-3
    assert not estimate.disagrees


def test_posterior_in_the_tail_of_a_normal_prior():
    # A prior N(0, 1) cut to [-5, 5] against data that put mu near -4.4: the posterior sits
    # where the prior's CDF is ~1e-5. Reference: scipy.integrate.quad of L * prior.
    prior = TruncatedNormal(0.0, 1.0, -5.0, 5.0)
    toy = GaussianToy([-4.5], 0.2, prior)

    def integrand(mu):
        return math.exp(float(toy.log_likelihood(np.array([[mu]]))[0]
                              + prior.logpdf(mu)))

    exact = math.log(integrate.quad(integrand, -5.0, 5.0, points=[-4.4], epsabs=0,
                                    epsrel=1e-11, limit=200)[0])
    estimate = scenario_evidence(toy, seed=2, **SMALL)
    assert abs(estimate.log_evidence - exact) < 3 * estimate.sd
    assert estimate.quadrature == pytest.approx(exact, abs=1e-3)


@pytest.mark.parametrize("prior", [Uniform(2.0, 7.0), Normal(1.0, 3.0),
                                   TruncatedNormal(1.0, 3.0, 0.0, 4.0),
                                   LogUniform(0.01, 0.5)])
def test_every_prior_family_integrates_to_one(prior):
    # a constant likelihood has Z = 1 when the prior is normalised (integral of pi = 1)
    flat = GaussianToy([], 1.0, prior)
    box = [(float(prior.ppf(1e-12)), float(prior.ppf(1 - 1e-12)))]
    result = quadrature_evidence(flat, box, grid_points=4000)
    assert result.log_evidence == pytest.approx(0.0, abs=1e-4)
    nested = nested_evidence(flat, live_points=100, effective_samples=500, seed=1)
    if prior.family == "truncated-normal":
        # sampled uniformly on [min, max] with the prior density as a weight: not exact
        assert abs(nested.log_evidence) < 3 * nested.sd
    else:  # sampled through the quantile function: a constant, integrated exactly
        assert nested.log_evidence == pytest.approx(0.0, abs=1e-9)


# ---- a melting study with two free parameters ---------------------------------------------


@pytest.fixture(scope="module")
def thinned():
    """The 'thinned' scenario of the test scenario study (Tp and lid free)."""
    return LogPosterior(read_scenarios(DATA / "scenarios.toml").scenarios[0].study)


@pytest.fixture(scope="module")
def thinned_evidence(thinned):
    return scenario_evidence(thinned, seed=11, **SMALL)


def test_nested_sampling_matches_quadrature_on_a_melting_study(thinned, thinned_evidence):
    estimate = thinned_evidence
    assert thinned.names == ("potential_temperature", "lithosphere_thickness")
    assert abs(estimate.log_evidence - estimate.quadrature) < 0.15
    assert not estimate.disagrees
    # the parameter-space grid against the probability-space grid of inversion.fitting.grid
    # (another integrator, with its own box search)
    other = grid_posterior(thinned.log_likelihood, thinned.names, thinned.priors,
                           max_points=40_000)
    assert estimate.quadrature == pytest.approx(
        other.log_evidence, abs=3 * (estimate.quadrature_error + other.log_evidence_error)
        + 1e-3)


def test_two_seeds_agree_within_their_errors(thinned, thinned_evidence):
    again = nested_evidence(thinned, live_points=SMALL["live_points"],
                            effective_samples=SMALL["effective_samples"], seed=12)
    first = thinned_evidence
    assert again.log_evidence != first.log_evidence  # really another run
    combined = math.hypot(first.sd, again.sd)
    assert abs(again.log_evidence - first.log_evidence) < 2 * combined
    assert 0.002 < first.sd < 0.1  # an error bar, not a placeholder


def test_no_free_parameter_evidence_is_the_likelihood():
    found = read_scenarios(DATA / "scenarios.toml")
    crust = found.base.observations[0]
    study = found.base.with_overrides({"potential_temperature": 1380.0,
                                       "lithosphere_thickness": 45.0})
    study = study.with_observations([crust])
    estimate = scenario_evidence(LogPosterior(study), seed=1, **SMALL)
    column = forward.melt_column(1380.0, 45.0, water=0.0)
    # independent route: scipy.stats.norm with sigma and model error added in quadrature
    sigma = np.hypot(crust.data["thickness_sigma_km"].to_numpy(), 0.5)
    expected = stats.norm.logpdf(crust.data["thickness_km"].to_numpy(),
                                 float(column.crustal_thickness), sigma).sum()
    assert estimate.log_evidence == pytest.approx(expected, rel=1e-12)
    assert estimate.sd == 0.0 and estimate.quadrature is None
    assert estimate.method == "likelihood (no free parameter)"
