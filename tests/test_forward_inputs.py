"""melt_column refuses inputs it cannot honour, with messages that state the rule."""

import numpy as np
import pytest

from lidmelt.forward import DomainError, melt_column


def test_an_open_bound_is_written_as_open():
    with pytest.raises(DomainError, match=r"active_upwelling = 0 is outside the model "
                                          r"domain \(0, 20\]"):
        melt_column(1350.0, 0.0, active_upwelling=0.0)


def test_a_closed_bound_is_written_as_closed():
    with pytest.raises(DomainError, match=r"\[1000, 1800\] degC"):
        melt_column(900.0, 0.0)


def test_none_is_named_not_computed_as_nan():
    with pytest.raises(ValueError, match="potential_temperature is missing"):
        melt_column(None, 0.0)


def test_nan_is_called_not_a_number():
    with pytest.raises(DomainError, match="potential_temperature = not a number"):
        melt_column(np.nan, 0.0)


def test_a_masked_entry_is_refused_and_an_unmasked_array_is_used():
    with pytest.raises(ValueError, match="masked entries"):
        melt_column(np.ma.array([1350.0, 1400.0], mask=[False, True]), 0.0)
    plain = melt_column(np.array([1350.0, 1400.0]), 0.0, parameterization="katz2003")
    masked = melt_column(np.ma.array([1350.0, 1400.0], mask=False), 0.0,
                         parameterization="katz2003")
    np.testing.assert_array_equal(masked.melt_thickness, plain.melt_thickness)
