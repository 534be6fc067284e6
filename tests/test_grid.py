"""Grid quadrature of posteriors and evidence (inversion.fitting.grid) against closed forms."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from lidmelt.inversion.fitting.grid import Grid, find_box, grid_posterior, parameter_axis
from lidmelt.inversion.study.priors import LogUniform, Normal, TruncatedNormal, Uniform


def test_gaussian_toy_evidence_is_exact():
    # y_i ~ N(mu, s^2), mu ~ N(0, t^2)  =>  Z = N(y; 0, s^2 I + t^2 11^T)
    # (conjugate Gaussian model; e.g. Bishop 2006, eq. 2.115)
    y, s, t = np.array([0.8, 1.4, 0.3, 1.1]), 0.5, 2.0

    def log_like(theta):
        return stats.norm.logpdf(y[None, :], theta[:, :1], s).sum(axis=1)

    post = grid_posterior(log_like, ["mu"], [Normal(0.0, t)], max_points=2000)
    exact = stats.multivariate_normal(np.zeros(4), s**2 * np.eye(4) + t**2).logpdf(y)
    assert post.log_evidence == pytest.approx(exact, abs=1e-4)
    assert post.log_evidence_error < 1e-3
    # posterior of mu: N(m, v) with v = 1/(n/s^2 + 1/t^2), m = v sum(y)/s^2 (conjugacy)
    v = 1.0 / (len(y) / s**2 + 1.0 / t**2)
    m = v * y.sum() / s**2
    q = post.quantile("mu", [0.025, 0.5, 0.975])
    np.testing.assert_allclose(q, stats.norm(m, np.sqrt(v)).ppf([0.025, 0.5, 0.975]),
                               atol=2e-3 * np.sqrt(v) * 10)
    assert post.mean("mu") == pytest.approx(m, abs=1e-3)


def test_narrow_two_parameter_posterior_is_found_and_integrated():
    # likelihood N(x; 0.3, 1e-3) N(y; 4.0, 2e-3) under uniform priors of width 10 and 20:
    # Z = 1/200 times the Gaussian mass inside the box (all of it).
    prior = [Uniform(-5.0, 5.0), Uniform(-6.0, 14.0)]

    def log_like(theta):
        return (stats.norm.logpdf(theta[:, 0], 0.3, 1e-3)
                + stats.norm.logpdf(theta[:, 1], 4.0, 2e-3))

    box = find_box(log_like, ["x", "y"], prior)
    # zoomed in from widths 10 and 20 to a few dozen sd of the likelihood
    assert box[0][0] < 0.3 < box[0][1] and box[1][0] < 4.0 < box[1][1]
    assert box[0][1] - box[0][0] < 0.05 and box[1][1] - box[1][0] < 0.1
    post = grid_posterior(log_like, ["x", "y"], prior, max_points=40_000)
    assert post.log_evidence == pytest.approx(-np.log(200.0), abs=1e-3)
    np.testing.assert_allclose(post.quantile("y", [0.16, 0.84]),
                               stats.norm(4.0, 2e-3).ppf([0.16, 0.84]), atol=1e-4)
    draws = post.sample(np.random.default_rng(3), 20_000)
    assert draws[:, 0].std() == pytest.approx(1e-3, rel=0.03)
    assert post.map_point()["x"] == pytest.approx(0.3, abs=5e-4)


@pytest.mark.parametrize("prior", [Uniform(2.0, 7.0), Normal(1.0, 3.0),
                                   TruncatedNormal(1.0, 3.0, 0.0, 4.0),
                                   LogUniform(0.01, 0.5)])
def test_every_prior_family_is_normalised(prior):
    # integral of the prior density over its support is 1 (scipy.integrate.quad), and
    # a constant likelihood has Z = 1 on the grid (to the quadrature error of the prior's
    # density; 200 nodes per axis)
    low, high = prior.bounds
    mass, _ = integrate.quad(lambda x: float(np.exp(prior.logpdf(x))), low, high,
                             points=None if np.isinf(low) or np.isinf(high) else [low, high],
                             limit=200)
    assert mass == pytest.approx(1.0, abs=1e-8)
    post = grid_posterior(lambda th: np.zeros(len(th)), ["p"], [prior], max_points=200)
    # midpoint rule, error ~ h^2 f''/24 per unit mass: 200 cells over a few sd give < 1e-4
    assert post.log_evidence == pytest.approx(0.0, abs=1e-4)


def test_integrating_out_one_axis_gives_the_marginal_likelihood():
    # L(a, b) = N(a; b, 1) with b ~ U(-10, 10): integral over b is about 1/20 for |a| << 10
    axes = (parameter_axis("a", Uniform(-1.0, 1.0), (-1.0, 1.0), 5),
            parameter_axis("b", Uniform(-10.0, 10.0), (-10.0, 10.0), 4000))
    grid = Grid(axes)
    points = grid.points()
    log_l = stats.norm.logpdf(points[:, 0], points[:, 1], 1.0).reshape(grid.shape)
    per_a = grid.log_integrate(log_l, over=["b"])
    # the remaining axis keeps its own weights (prior mass 1/5 per node of a)
    np.testing.assert_allclose(per_a, np.log(0.2 / 20.0), atol=1e-5)


@pytest.mark.parametrize("depth", [5.0, 7.0, 10.0])
def test_a_posterior_deep_in_a_normal_prior_tail_is_integrated(depth):
    # N(0, 1) prior, one datum y = depth with sd 0.05: the posterior sits `depth` prior
    # sd out, where the prior's CDF is 3e-7 (5), 1e-12 (7) or 8e-24 (10); conjugate
    # normal model (e.g. Bishop 2006, eq. 2.115): Z = N(y; 0, 1 + s^2), posterior
    # N(y / (1 + s^2), s^2 / (1 + s^2))
    s = 0.05

    def log_like(theta):
        return stats.norm.logpdf(depth, theta[:, 0], s)

    post = grid_posterior(log_like, ["x"], [Normal(0.0, 1.0)], max_points=400)
    exact = stats.norm.logpdf(depth, 0.0, np.sqrt(1.0 + s**2))
    # brute force: scipy.integrate.quad of L pi around the likelihood's peak
    brute = np.log(integrate.quad(lambda x: stats.norm.pdf(depth, x, s)
                                  * stats.norm.pdf(x), depth - 1.0, depth + 1.0,
                                  epsabs=0, epsrel=1e-12, limit=200)[0])
    assert brute == pytest.approx(exact, abs=1e-8)
    assert post.log_evidence == pytest.approx(exact, abs=1e-3)
    assert post.log_evidence_error < 1e-2
    v = s**2 / (1.0 + s**2)
    q = [0.025, 0.5, 0.975]
    np.testing.assert_allclose(post.quantile("x", q),
                               stats.norm(depth / (1.0 + s**2), np.sqrt(v)).ppf(q),
                               atol=0.02 * np.sqrt(v))


def test_a_log_uniform_axis_integrates_in_log_units():
    # L = N(ln x; ln 0.05, 0.1) under x ~ LogUniform(1e-3, 10): in t = ln x the prior is
    # U(ln 1e-3, ln 10), so Z = 1 / ln(1e4) times the normal's mass (all of it)
    def log_like(theta):
        return stats.norm.logpdf(np.log(theta[:, 0]), np.log(0.05), 0.1)

    post = grid_posterior(log_like, ["e"], [LogUniform(1e-3, 10.0)], max_points=400)
    assert post.log_evidence == pytest.approx(-np.log(np.log(1e4)), abs=1e-4)
    assert float(post.quantile("e", 0.5)) == pytest.approx(0.05, rel=1e-3)
