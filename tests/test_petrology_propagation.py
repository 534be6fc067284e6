"""Error propagation of basalt P-T: Monte Carlo against linearisation, refusals."""

import numpy as np
import pytest

from lidmelt.inversion.errors import InputError
from lidmelt.inversion.petrology.propagation import (
    Uncertainties, estimate_linearised, estimate_monte_carlo, pt_of_analyses)
from lidmelt.inversion.petrology.thermobarometers import METHODS

# typical olivine-phyric basalts (common practice): MORB, ocean-island tholeiite, arc basalt
ANALYSES = np.array([
    [50.5, 1.2, 15.5, 9.0, 0.17, 10.0, 11.8, 2.3, 0.1, 0.1],
    [48.5, 2.2, 13.0, 11.0, 0.17, 11.5, 10.5, 2.2, 0.45, 0.25],
    [49.5, 0.8, 16.5, 8.5, 0.15, 9.5, 11.0, 2.6, 0.4, 0.1],
])
ERRORS = Uncertainties(relative_sigma=0.01, h2o_sigma=0.05, fe3_sigma=0.02,
                       fo_sigma=0.005, kd_sigma=0.01)


@pytest.mark.parametrize("method", ["lee2009", "putirka2008_eq15"])
def test_monte_carlo_agrees_with_linearisation(method):
    kw = dict(fe3_fraction=0.1, h2o=0.3, uncertainties=ERRORS, method=method,
              calibration=False)
    mc = estimate_monte_carlo(ANALYSES, n_draws=4000, rng=np.random.default_rng(7), **kw)
    lin = estimate_linearised(ANALYSES, **kw)
    # sd: MC error of an sd from 4000 draws is 1.1 %; the chain is mildly nonlinear in
    # these 1σ (olivine addition, ln Si4O8), so 6 % covers both
    np.testing.assert_allclose(mc.sigma_p_gpa, lin.sigma_p_gpa, rtol=0.06)
    np.testing.assert_allclose(mc.sigma_t_c, lin.sigma_t_c, rtol=0.06)
    # correlation: MC error (1 - rho^2)/sqrt(n) < 0.016, plus the same nonlinearity
    np.testing.assert_allclose(mc.correlation, lin.correlation, atol=0.05)
    # means: the central value sits within 0.3 sd of the MC mean (curvature bias)
    assert np.all(np.abs(mc.pressure_gpa - lin.pressure_gpa) < 0.3 * lin.sigma_p_gpa)
    assert np.all(mc.accepted_fraction > 0.99)


def test_monte_carlo_converges_with_draws():
    kw = dict(fe3_fraction=0.1, uncertainties=ERRORS, calibration=False)
    a = estimate_monte_carlo(ANALYSES[:1], n_draws=1000, rng=np.random.default_rng(1), **kw)
    b = estimate_monte_carlo(ANALYSES[:1], n_draws=8000, rng=np.random.default_rng(2), **kw)
    # means agree within 4 standard errors of the smaller run
    assert abs(a.pressure_gpa - b.pressure_gpa)[0] < 4 * b.sigma_p_gpa[0] / np.sqrt(1000)
    assert abs(a.temperature_c - b.temperature_c)[0] < 4 * b.sigma_t_c[0] / np.sqrt(1000)
    # seeded: the same generator state gives the same numbers
    c = estimate_monte_carlo(ANALYSES[:1], n_draws=1000, rng=np.random.default_rng(1), **kw)
    assert c.pressure_gpa[0] == a.pressure_gpa[0]


def test_calibration_error_added_in_quadrature():
    m = METHODS["lee2009"]
    only = estimate_linearised(ANALYSES, fe3_fraction=0.1)       # no input errors
    np.testing.assert_allclose(only.sigma_p_gpa, m.sigma_p_gpa)
    np.testing.assert_allclose(only.sigma_t_c, m.sigma_t_c)
    np.testing.assert_allclose(only.correlation, 0.0)
    inputs = estimate_linearised(ANALYSES, fe3_fraction=0.1, uncertainties=ERRORS,
                                 calibration=False)
    both = estimate_linearised(ANALYSES, fe3_fraction=0.1, uncertainties=ERRORS)
    np.testing.assert_allclose(both.sigma_p_gpa ** 2,
                               inputs.sigma_p_gpa ** 2 + m.sigma_p_gpa ** 2)
    p, t, _, _ = pt_of_analyses(ANALYSES, fe3_fraction=0.1)
    np.testing.assert_allclose(both.pressure_gpa, p)


def test_fe3_draws_from_a_prior():
    rng = np.random.default_rng(3)
    prior = rng.uniform(0.08, 0.18, size=(3, 2000))
    est = estimate_monte_carlo(ANALYSES, fe3_fraction=prior, rng=rng, calibration=False)
    # Fe3+/ΣFe alone spreads P (more Fe3+, less olivine, shallower)
    assert np.all(est.sigma_p_gpa > 0.05) and np.all(est.correlation > 0.5)


def test_refused_samples_report_their_reason():
    evolved = ANALYSES.copy()
    evolved[1, 5] = 6.0
    lin = estimate_linearised(evolved, fe3_fraction=0.1, uncertainties=ERRORS)
    assert np.isnan(lin.pressure_gpa[1]) and "below 8 wt%" in lin.reason[1]
    assert lin.reason[0] == "" and np.isfinite(lin.pressure_gpa[0])
    mc = estimate_monte_carlo(evolved, fe3_fraction=0.1, uncertainties=ERRORS,
                              n_draws=200, rng=np.random.default_rng(0))
    assert mc.accepted_fraction[1] == 0.0 and np.isnan(mc.pressure_gpa[1])


def test_bad_arguments():
    with pytest.raises(InputError, match="unknown thermobarometer"):
        estimate_linearised(ANALYSES, fe3_fraction=0.1, method="plank_forsyth")
    with pytest.raises(InputError, match="shape"):
        estimate_linearised(ANALYSES[0], fe3_fraction=0.1)
