"""The fast tabulated route against the slow adaptive reference (solve_ivp, rtol 1e-8).

Tolerances are the forward-model accuracy targets: melt thickness within 0.02 km or
0.3 %, onset depth within 0.2 km, melt fractions within 0.002, well below the +/-0.5 km
of seismic crustal thickness. Both the exact-water tables (one water value per call)
and the table interpolated across water (many values per call) are checked.
"""

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lidmelt.forward import melt_column
from lidmelt.forward.reference import reference_column

GRID = list(itertools.product((1250.0, 1450.0, 1650.0), (0.0, 100.0), (0.0, 500.0)))


def _check(fast, ref, where):
    melt_err = abs(fast["melt_thickness"] - ref.melt_thickness)
    assert melt_err <= 0.02 or melt_err <= 0.003 * ref.melt_thickness, (where, melt_err)
    assert abs(fast["onset_depth"] - ref.onset_depth) <= 0.2, where
    assert abs(fast["max_melt_fraction"] - ref.max_melt_fraction) <= 0.002, where
    assert abs(fast["mean_melt_fraction"] - ref.mean_melt_fraction) <= 0.002, where
    # mean pressure has no stated target; 0.01 GPa (0.3 km) is far below thermobarometry error
    assert abs(fast["mean_melting_pressure"] - ref.mean_melting_pressure) <= 0.01, where


def _point(res, i):
    names = ("melt_thickness", "onset_depth", "max_melt_fraction", "mean_melt_fraction",
             "mean_melting_pressure")
    return {n: float(np.ravel(getattr(res, n))[i]) for n in names}


@pytest.fixture(scope="module")
def references():
    return [reference_column(tp, lid, water=w, rtol=1e-8) for tp, lid, w in GRID]


def test_grid_exact_water_tables(references):
    for (tp, lid, w), ref in zip(GRID, references, strict=True):
        _check(_point(melt_column(tp, lid, water=w), 0), ref, (tp, lid, w))


def test_grid_across_water_table(references):
    tp, lid, w = (np.array(v) for v in zip(*GRID, strict=True))
    res = melt_column(tp, lid, water=w + np.where(w > 0, 1e-3, 0.0))  # many values: 4-D table
    for i, ref in enumerate(references):
        _check(_point(res, i), ref, GRID[i])


@settings(max_examples=8, deadline=None, derandomize=True)
@given(tp=st.floats(1250, 1650), lid=st.floats(0, 150), water=st.floats(0, 500),
       shift=st.floats(-60, 60), melting_region=st.sampled_from(["column", "triangle"]))
def test_random_points_both_routes(tp, lid, water, shift, melting_region):
    ref = reference_column(tp, lid, water=water, solidus_offset=shift, melting_region=melting_region,
                           rtol=1e-8)
    exact = melt_column(tp, lid, water=water, solidus_offset=shift, melting_region=melting_region)
    _check(_point(exact, 0), ref, "exact")
    across = melt_column([tp, tp], lid, water=[water, 1.0], solidus_offset=shift, melting_region=melting_region)
    _check(_point(across, 0), ref, "across water")


def test_mckenzie_bickle_against_reference():
    for tp, lid in ((1300.0, 0.0), (1450.0, 60.0), (1600.0, 120.0)):
        ref = reference_column(tp, lid, parameterization="mckenzie-bickle1988", rtol=1e-8)
        fast = melt_column(tp, lid, parameterization="mckenzie-bickle1988")
        _check(_point(fast, 0), ref, (tp, lid))
