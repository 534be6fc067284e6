"""PSIS-LOO of a scenario against exact leave-one-out values and ArviZ's own comparison."""

from __future__ import annotations

import math
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from lidmelt import Study, demo_data
from lidmelt.inversion import LogPosterior
from lidmelt.inversion.comparison import elpd_differences, loo_fixed, loo_from_draws
from lidmelt.inversion.comparison.loo import _arviz, posterior_draws
from lidmelt.inversion.study.priors import Normal
from scipy import stats
from toys import GaussianToy

Y = np.array([0.8, 1.4, 0.3, 1.1, 0.9, 1.6, -0.2])
S = 0.5


def _conjugate(y, s, tau):
    """Posterior mean and variance of mu for y_i ~ N(mu, s^2), mu ~ N(0, tau^2)
    (Bishop 2006, eq. 2.141-2.142)."""
    var = 1.0 / (len(y) / s**2 + 1.0 / tau**2)
    return var * np.sum(y) / s**2, var


def _posterior_draws(tau, seed, chains=4, draws=2500):
    mean, var = _conjugate(Y, S, tau)
    rng = np.random.default_rng(seed)
    return rng.normal(mean, math.sqrt(var), size=(chains, draws, 1))


@pytest.mark.parametrize("tau", [2.0, 0.3])
def test_loo_of_the_gaussian_toy_is_exact(tau):
    # exact leave-one-out predictive: p(y_i | y_-i) = N(y_i; m_-i, s^2 + v_-i) from the
    # conjugate posterior of the other rows (Bishop 2006, eq. 2.115 and 2.141-2.142)
    exact_i = []
    for i in range(Y.size):
        m, v = _conjugate(np.delete(Y, i), S, tau)
        exact_i.append(stats.norm.logpdf(Y[i], m, math.sqrt(S**2 + v)))
    mean, var = _conjugate(Y, S, tau)
    lppd = stats.norm.logpdf(Y, mean, math.sqrt(S**2 + var)).sum()
    loo = loo_from_draws(GaussianToy(Y, S, Normal(0.0, tau)), _posterior_draws(tau, 5))
    # loose: Monte Carlo error of importance sampling with 10000 draws (up to ~0.01 per
    # row here, most for the row farthest from the others)
    np.testing.assert_allclose(loo.pointwise, exact_i, atol=0.03)
    assert loo.elpd_loo == pytest.approx(sum(exact_i), abs=0.06)
    assert loo.p_loo == pytest.approx(lppd - sum(exact_i), abs=0.06)
    # se = sqrt(n var(elpd_i)) (Vehtari, Gelman & Gabry 2017)
    assert loo.se == pytest.approx(math.sqrt(Y.size * np.var(exact_i)), rel=0.02)
    assert loo.pareto_k_max < 0.5 and loo.unreliable_rows.size == 0
    assert loo.n_draws == 10000


def test_differences_match_arviz_compare():
    az = _arviz()
    models, loos = {}, {}
    for name, tau in (("wide", 2.0), ("narrow", 0.3)):
        draws = _posterior_draws(tau, 7)
        toy = GaussianToy(Y, S, Normal(0.0, tau))
        loos[name] = loo_from_draws(toy, draws)
        pointwise = toy.pointwise_log_likelihood(draws.reshape(-1, 1)).reshape(4, 2500, -1)
        models[name] = az.from_dict(posterior={"mu": draws[..., 0]},
                                    log_likelihood={"y": pointwise})
    ours = elpd_differences(loos)
    theirs = az.compare(models, ic="loo")
    for name in models:
        assert ours.loc[name, "elpd_diff"] == pytest.approx(theirs.loc[name, "elpd_diff"],
                                                            abs=1e-9)
        assert ours.loc[name, "dse"] == pytest.approx(theirs.loc[name, "dse"], abs=1e-9)
    assert list(ours.index) == list(theirs.index)  # best first


def test_loo_without_free_parameters_is_the_likelihood():
    # with mu fixed at 0.9 nothing is fitted: leaving a row out changes nothing, so
    # elpd_i = log N(y_i; 0.9, s^2) exactly
    loo = loo_fixed(GaussianToy(Y, S, fixed=0.9))
    expected = stats.norm.logpdf(Y, 0.9, S)
    np.testing.assert_allclose(loo.pointwise, expected)
    assert loo.elpd_loo == pytest.approx(expected.sum())
    assert loo.p_loo == 0.0 and math.isnan(loo.pareto_k_max)
    assert loo.se == pytest.approx(math.sqrt(Y.size * np.var(expected)))


def test_draws_are_walkers_as_chains_thinned_by_tau():
    chain = np.arange(200 * 6 * 2, dtype=float).reshape(200, 6, 2)  # (steps, walkers, ndim)
    posterior = SimpleNamespace(chain=chain, discard=20, tau=np.array([3.2, 4.6]))
    draws = posterior_draws(posterior)
    # thinned by ceil(max tau) = 5 after the burn-in, walker w -> chain w
    np.testing.assert_array_equal(draws[3, 7], chain[20 + 7 * 5, 3])
    assert draws.shape == (6, 36, 2)
    capped = posterior_draws(posterior, max_draws=60)  # 180 steps x 6 walkers -> step 18
    np.testing.assert_array_equal(capped[2, 1], chain[20 + 18, 2])


def test_pointwise_terms_sum_to_the_sampler_likelihood_on_the_demo():
    # the demo study equilibrates basalts along the whole melting path (a mixture over the
    # path per row): the per-row terms LOO uses must add up to what emcee samples
    logpost = LogPosterior(Study.from_file(demo_data.study_path()))
    theta = np.array([[1400.0, 46.0, 0.0], [1450.0, 30.0, -15.0], [1300.0, 90.0, 10.0]])
    rows = logpost.pointwise_log_likelihood(theta)
    assert rows.shape == (3, 18)
    np.testing.assert_allclose(rows.sum(axis=1), logpost.log_likelihood(theta), rtol=1e-12)
    prior = logpost.log_prior(theta)
    np.testing.assert_allclose(rows.sum(axis=1) + prior, logpost(theta)[:, 0], rtol=1e-12)


def _pressure_only_scenarios(tmp_path):
    """The test scenarios with pressures only (no temperatures), equilibrated at the top
    of melting: under the fixed lid of 'unthinned' every basalt row's likelihood is the
    same at every draw that melts."""
    import shutil

    from lidmelt.inversion import read_scenarios

    data = Path(__file__).parent / "data"
    shutil.copy(data / "crust.csv", tmp_path / "crust.csv")
    rows = (data / "basalts.csv").read_text().splitlines()
    (tmp_path / "basalts.csv").write_text(
        "\n".join(",".join(r.split(",")[:3]) for r in rows) + "\n")
    (tmp_path / "scenarios.toml").write_text((data / "scenarios.toml").read_text())
    return read_scenarios(tmp_path / "scenarios.toml")


def test_rows_with_a_constant_likelihood_are_exact_and_write_as_json(tmp_path):
    import json

    found = _pressure_only_scenarios(tmp_path)
    logpost = LogPosterior(next(s for s in found.scenarios if s.name == "unthinned").study)
    draws = np.random.default_rng(4).normal(1500.0, 10.0, size=(4, 300, 1))  # all melt
    pointwise = logpost.pointwise_log_likelihood(draws.reshape(-1, 1))
    basalt = np.array([block == "basalts.csv" for block, _ in logpost.rows])
    assert np.ptp(pointwise[:, basalt], axis=0).max() == 0.0  # guards the test itself
    # PSIS on identical weights: ArviZ returns k = inf (the crash of the JSON writer)
    az = _arviz()
    with pytest.warns(UserWarning):  # ArviZ's own k warning
        raw = az.loo(az.from_dict(posterior={"t": draws[..., 0]}, log_likelihood={
            "rows": pointwise.reshape(4, 300, -1)}), pointwise=True)
    assert not np.all(np.isfinite(np.asarray(raw.pareto_k)[basalt]))
    loo = loo_from_draws(logpost, draws)
    # p(y_i | y_-i) = p(y_i | theta) for every theta: the term is log L_i exactly
    np.testing.assert_allclose(loo.pointwise[basalt], pointwise[0, basalt], rtol=1e-12)
    assert np.all(np.isnan(loo.pareto_k[basalt]))
    assert np.all(np.isfinite(loo.pareto_k[~basalt]))
    np.testing.assert_allclose(loo.pointwise[~basalt], np.asarray(raw.loo_i)[~basalt])
    assert loo.pareto_k_max == np.max(loo.pareto_k[~basalt])
    assert not np.any(basalt[loo.unreliable_rows])  # a NaN k is not unreliable
    text = json.dumps(loo.to_dict(), allow_nan=False)  # the documented rule: null
    again = type(loo).from_dict(json.loads(text))
    np.testing.assert_array_equal(np.isnan(again.pareto_k), basalt)
    assert again.elpd_loo == pytest.approx(loo.elpd_loo)
