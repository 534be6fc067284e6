"""The fast tabulated route against the slow adaptive reference (solve_ivp, rtol 1e-8).

The reference is ``forward.reference.reference_column``: one adaptive ``solve_ivp``
integration (DOP853) per point of the temperature form of the isentropic path, with
the melt fraction solved implicitly, sharing no tables or interpolation with the fast
route. Tolerances are the forward-model accuracy targets: melt thickness within 0.02 km
or 0.3 %, onset depth within 0.2 km, melt fractions within 0.002, well below the
+/-0.5 km of seismic crustal thickness. Both tables are checked: the dry one (water 0)
and the one interpolated across water, 0-1000 ppm, which serves every wet call.
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


def test_grid_one_point_per_call(references):
    for (tp, lid, w), ref in zip(GRID, references, strict=True):
        _check(_point(melt_column(tp, lid, water=w), 0), ref, (tp, lid, w))


def test_grid_many_points_per_call(references):
    tp, lid, w = (np.array(v) for v in zip(*GRID, strict=True))
    res = melt_column(tp, lid, water=w)
    for i, ref in enumerate(references):
        _check(_point(res, i), ref, GRID[i])


@settings(max_examples=8, deadline=None, derandomize=True)
@given(tp=st.floats(1250, 1650), lid=st.floats(0, 150), water=st.floats(0, 1000),
       shift=st.floats(-60, 60), melting_region=st.sampled_from(["column", "triangle"]))
def test_random_points_both_routes(tp, lid, water, shift, melting_region):
    ref = reference_column(tp, lid, water=water, solidus_offset=shift, melting_region=melting_region,
                           rtol=1e-8)
    exact = melt_column(tp, lid, water=water, solidus_offset=shift, melting_region=melting_region)
    _check(_point(exact, 0), ref, "one point per call")
    across = melt_column([tp, tp], lid, water=[water, 1.0], solidus_offset=shift, melting_region=melting_region)
    _check(_point(across, 0), ref, "beside a wet point: the table across water")


def test_mckenzie_bickle_against_reference():
    for tp, lid in ((1300.0, 0.0), (1450.0, 60.0), (1600.0, 120.0)):
        ref = reference_column(tp, lid, parameterization="mckenzie-bickle1988", rtol=1e-8)
        fast = melt_column(tp, lid, parameterization="mckenzie-bickle1988")
        _check(_point(fast, 0), ref, (tp, lid))


# Water across its whole domain, where the table across water interpolates between nodes
# (the cpx-exhaustion kink, lids of 0 and 100 km, hot and cold, both melting regions)
WATER_CASES = [(1300.0, 0.0, -40.0, "column"), (1450.0, 40.0, 0.0, "triangle"),
               (1600.0, 100.0, 40.0, "column"), (1500.0, 100.0, -20.0, "triangle")]
WATERS = (1.0, 90.0, 350.0, 700.0, 1000.0)


@pytest.fixture(scope="module")
def water_references():
    return {(case, w): reference_column(case[0], case[1], water=w, solidus_offset=case[2],
                                        melting_region=case[3], rtol=1e-8)
            for case in WATER_CASES for w in WATERS}


@pytest.mark.parametrize("case", WATER_CASES, ids=lambda c: f"{c[0]:.0f}C-{c[1]:.0f}km-{c[3]}")
def test_table_across_water_against_reference(water_references, case):
    tp, lid, shift, region = case
    one_call = melt_column(tp, lid, water=np.array(WATERS), solidus_offset=shift,
                           melting_region=region)
    for i, w in enumerate(WATERS):
        ref = water_references[(case, w)]
        _check(_point(one_call, i), ref, (case, w))
        _check(_point(melt_column(tp, lid, water=w, solidus_offset=shift,
                                  melting_region=region), 0), ref, (case, w, "single"))


@pytest.mark.parametrize("tp, lid, water, shift", [(1534.0, 102.0, 875.0, -58.0),
                                                   (1531.0, 55.0, 178.0, -4.0)])
def test_between_water_nodes_near_cpx_exhaustion(tp, lid, water, shift):
    # Found by comparing tables with 25 and 97 water nodes: with 25 nodes the mean pressure
    # here missed its target (1.6x and 1.35x), where the paths of neighbouring nodes leave
    # cpx at different pressures, while tables with finer water nodes met it with room.
    ref = reference_column(tp, lid, water=water, solidus_offset=shift, rtol=1e-8)
    _check(_point(melt_column(tp, lid, water=water, solidus_offset=shift), 0), ref,
           "between water nodes")


# Melting that starts within about 1.5 GPa of the 10 GPa model base (docs/model.md, "How
# the fast route works"): the onset moves up to 0.25 GPa per K there, and whether a path
# melts from the base up depends on Tp, offset and water together. Offsets off the table's
# shift nodes (-30, +10, +34 degC), dry and wet, lids of 0 and 77 km, on both sides of the
# base, and a Tp scan through the band, all against the reference route.
NEAR_BASE = [(tp, lid, water, shift)
             for tp, shift in ((1620.0, -30.0), (1620.0, 10.0), (1642.0, 34.0), (1600.0, -30.0),
                               (1654.0, 0.0), (1632.0, -30.0), (1660.0, 34.0))
             for lid in (0.0, 77.0) for water in (0.0, 133.0)]
NEAR_BASE_SCAN = np.arange(1605.0, 1671.0, 3.0)  # Tp across the band, 133 ppm, +10 degC


@pytest.fixture(scope="module")
def near_base_references():
    return [reference_column(*case[:2], water=case[2], solidus_offset=case[3], rtol=1e-8)
            for case in NEAR_BASE]


def test_onset_near_the_model_base(near_base_references):
    tp, lid, water, shift = (np.array(v) for v in zip(*NEAR_BASE, strict=True))
    for wet in (False, True):  # the dry table, and the one across water
        pick = np.flatnonzero((water > 0.0) == wet)
        res = melt_column(tp[pick], lid[pick], water=water[pick], solidus_offset=shift[pick])
        for j, i in enumerate(pick):
            _check(_point(res, j), near_base_references[i], NEAR_BASE[i])


@pytest.mark.parametrize("region", ["column", "triangle"])
def test_scan_through_the_base_band(region):
    res = melt_column(NEAR_BASE_SCAN, 40.0, water=133.0, solidus_offset=10.0,
                      melting_region=region)
    for i, tp in enumerate(NEAR_BASE_SCAN):
        ref = reference_column(tp, 40.0, water=133.0, solidus_offset=10.0,
                               melting_region=region, rtol=1e-8)
        _check(_point(res, i), ref, (tp, region))
