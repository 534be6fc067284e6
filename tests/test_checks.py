"""Posterior predictive p-values and standardized residuals against independent results."""

import numpy as np
import pandas as pd
import pytest
from lidmelt.forward import melt_column
from lidmelt.inversion.results.checks import check_blocks
from lidmelt.inversion.observations import CrustalThickness, MeltingPressure
from scipy import stats


def _crust_block(values, sigma):
    frame = pd.DataFrame({"site": [f"s{i}" for i in range(len(values))],
                          "thickness_km": values, "thickness_sigma_km": sigma})
    return CrustalThickness.from_frame(frame)


@pytest.mark.parametrize("z", [[0.3, -0.8, 1.1, 0.2, -0.5, 0.9],
                               [2.1, -1.9, 2.4, 1.7, -2.2, 2.0]])
def test_p_value_of_a_point_posterior_is_the_chi_square_tail(z):
    # Every draw the same column: D_rep ~ chi-square with n degrees of freedom and
    # D_obs = sum z^2, so p = chi2.sf(sum z^2, n) (scipy.stats, independent of lidmelt).
    column = melt_column(1350.0, 0.0)
    model = float(column.crustal_thickness)
    sigma = np.array([0.5, 0.8, 0.6, 1.0, 0.7, 0.9])
    block = _crust_block(model + sigma * np.array(z), sigma)
    ndraws = 4000
    check, = check_blocks([block], [column] * ndraws, np.random.default_rng(7))
    expected = stats.chi2.sf(np.sum(np.square(z)), df=len(z))
    standard_error = np.sqrt(expected * (1 - expected) / ndraws)
    assert check.p_value == pytest.approx(expected, abs=4 * standard_error)
    # residual (y - E y_rep) / sd(y_rep) is z itself, up to Monte Carlo error
    assert check.residuals["value"] == pytest.approx(z, abs=0.08)
    assert check.flagged() == []


def test_a_row_beyond_three_sigma_is_flagged_and_the_p_value_is_small():
    column = melt_column(1350.0, 0.0)
    model = float(column.crustal_thickness)
    block = _crust_block([model, model + 0.2, model + 4.0], [0.5, 0.5, 0.5])
    check, = check_blocks([block], [column] * 2000, np.random.default_rng(3))
    assert [(row, col) for row, col, _ in check.flagged()] == [("s2", "value")]
    # sum z^2 = 0 + 0.16 + 64 with 3 degrees of freedom: p ~ 7e-14 (scipy.stats.chi2)
    assert check.p_value < 1e-3


def test_path_equilibration_uses_the_spread_along_the_path():
    # Pressures drawn along the path (as the "path" likelihood assumes) are no misfit,
    # even far from the melt-weighted mean pressure.
    column = melt_column(1450.0, 20.0)
    top, onset = float(column.top_pressure), float(column.onset_pressure)
    pressures = np.linspace(top + 0.1 * (onset - top), onset - 0.1 * (onset - top), 8)
    frame = pd.DataFrame({"sample": [f"b{i}" for i in range(8)],
                          "pressure_gpa": pressures, "pressure_sigma_gpa": 0.15})
    block = MeltingPressure.from_frame(frame, equilibration="path")
    check, = check_blocks([block], [column] * 1500, np.random.default_rng(11))
    assert check.flagged() == []
    assert 0.05 < check.p_value < 0.999
