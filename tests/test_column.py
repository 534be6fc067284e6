"""melt_column: published values, facts of the trade, limits and edge cases."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lidmelt import forward
from lidmelt.forward import melt_column
from lidmelt.forward.reference import reference_column
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

OUTPUTS = ("melt_thickness", "crustal_thickness", "onset_depth", "onset_pressure", "top_depth",
           "top_pressure", "max_melt_fraction", "mean_melt_fraction", "mean_melting_pressure")


@pytest.mark.parametrize(
    "tp, lid, onset, f_top, integral",
    [(1300, 0, 64.3, 0.185, 5.40), (1350, 0, 82.2, 0.236, 8.85), (1400, 0, 101.8, 0.286, 13.36),
     (1350, 30, 82.2, 0.138, 3.26)],
)
def test_katz_dry_regression_values(tp, lid, onset, f_top, integral):
    # Regression values computed from the published Katz et al. (2003) equations and
    # Table 2 constants (docs/model.md, "Worked values"); they are not published numbers.
    # Both routes must give them: the tabulated fast route and the slow reference route,
    # an independent adaptive integration (solve_ivp) of the temperature form of the path.
    res = melt_column(tp, lid, parameterization="katz2003")
    ref = reference_column(tp, lid, parameterization="katz2003")
    for onset_km, fraction, melt in ((float(res.onset_depth), float(res.max_melt_fraction),
                                      float(res.melt_thickness)),
                                     (ref.onset_depth, ref.max_melt_fraction, ref.melt_thickness)):
        assert onset_km == pytest.approx(onset, abs=0.06)  # table values to 0.1 km
        assert fraction == pytest.approx(f_top, abs=6e-4)  # to 0.001
        assert melt == pytest.approx(integral, abs=0.006)  # to 0.01 km


def test_solid_adiabat_against_an_independent_integration():
    # dT/dP = alpha T / (rho c_p) (docs/model.md, "Solid adiabat"), integrated here with
    # solve_ivp from the potential temperature at the surface, with Katz et al. (2003)
    # Table 2 values typed in: alpha = 40e-6 /K, rho = 3300 kg/m^3 (values from memory),
    # c_p = 1000 J/kg/K.
    def rate(p_gpa, t_kelvin):
        return 40e-6 * t_kelvin / (3300.0 * 1000.0) * 1e9

    pressures = np.array([0.5, 2.0, 4.0, 10.0])
    sol = solve_ivp(rate, (0.0, 10.0), [1350.0 + 273.15], t_eval=pressures, rtol=1e-12,
                    atol=1e-9)
    code = forward.solid_adiabat(1350.0, pressures, forward.ThermoConstants())
    assert_allclose(code, sol.y[0] - 273.15, atol=1e-6)
    # about 0.6 K/km in the upper mantle at 3300 kg/m^3; common practice quotes roughly
    # 0.3-0.7 K/km there (it steepens with T, to 0.72 K/km at 10 GPa)
    per_km = rate(0.0, code[:3] + 273.15) / float(forward.depth_per_pressure(3300.0))
    assert np.all((per_km > 0.3) & (per_km < 0.7))


def test_depth_scale():
    # P = rho g z, g = 9.81 m/s^2: 30.89 km/GPa for 3300 kg/m^3 (common practice, "P ~ z/33")
    assert float(forward.depth_per_pressure(3300.0)) == pytest.approx(30.89, abs=0.005)
    light = melt_column(1350.0, 0.0, mantle_density=3200.0)
    base = melt_column(1350.0, 0.0)
    assert float(light.onset_depth) == pytest.approx(float(base.onset_depth) * 3300 / 3200)


@pytest.mark.parametrize("name", ["katz2003", "mckenzie-bickle1988"])
def test_normal_oceanic_crust_needs_ordinary_mantle(name):
    # White, McKenzie & O'Nions (1992): normal oceanic crust 7.1 +/- 0.8 km, made by a
    # passive ridge with no lid from mantle of Tp roughly 1280-1360 degC (common practice).
    def crust(tp):
        return float(melt_column(tp, 0.0, parameterization=name, melting_region="triangle").crustal_thickness)

    needed = [brentq(lambda tp, h=h: crust(tp) - h, 1150.0, 1500.0) for h in (6.3, 7.1, 7.9)]
    assert 1280.0 <= needed[1] <= 1360.0
    assert needed[0] < needed[1] < needed[2]  # found: Katz 1314 degC, McKenzie-Bickle 1297 degC


def test_plank_rule_of_thumb():
    # Plank et al. (1995): about 10 % mean melting of a 60 km column gives about 6 km of crust.
    tp = brentq(lambda t: float(melt_column(t, 0.0, melting_region="triangle").onset_depth) - 60.0,
                1200.0, 1400.0)
    res = melt_column(tp, 0.0, melting_region="triangle")
    assert float(res.mean_melt_fraction) == pytest.approx(0.10, abs=0.03)
    assert float(res.crustal_thickness) == pytest.approx(6.0, abs=1.5)


@pytest.mark.parametrize("name", ["katz2003", "mckenzie-bickle1988"])
def test_present_day_mantle_melts_10_to_25_percent(name):
    # Common practice: present-day mantle melting reaches about 10-15 %, up to 20-25 %.
    res = melt_column(np.array([1300.0, 1350.0, 1400.0]), 0.0, parameterization=name)
    assert np.all((res.max_melt_fraction > 0.10) & (res.max_melt_fraction < 0.31))
    ridge = melt_column(1330.0, 0.0, parameterization=name, melting_region="triangle")
    assert 0.05 < float(ridge.mean_melt_fraction) < 0.25


def test_trends_hotter_thicker_wetter():
    tps = np.linspace(1250.0, 1650.0, 9)
    hot = melt_column(tps, 20.0)
    assert np.all(np.diff(hot.melt_thickness) > 0)  # hotter -> more melt
    lids = np.linspace(0.0, 150.0, 7)
    lid = melt_column(1500.0, lids)
    assert np.all(np.diff(lid.melt_thickness) < 0)  # thicker lid -> less melt
    waters = np.array([0.0, 50.0, 200.0, 500.0])
    wet = [float(melt_column(1350.0, 0.0, water=w).onset_depth) for w in waters]
    assert np.all(np.diff(wet) > 0)  # wetter -> deeper onset


def test_no_melt_is_finite_and_consistent():
    cold = melt_column(1000.0, 0.0, parameterization="katz2003")  # below the 1-atm solidus
    thick = melt_column(1350.0, 200.0)  # lid deeper than the onset
    # wet and too cold: the adiabat comes closest to the wet solidus where the melt would
    # become water-saturated, below the surface (docs/model.md, "Onset of melting")
    wet = melt_column(1000.0, 0.0, water=100.0, solidus_offset=50.0)
    for res in (cold, thick, wet):
        assert float(res.melt_thickness) == 0.0
        assert not bool(res.produces_melt)
        assert float(res.mean_melt_fraction) == 0.0
        assert float(res.max_melt_fraction) == 0.0
        # the pressure at which melt would begin
        assert float(res.mean_melting_pressure) == float(res.onset_pressure)
        assert all(np.isfinite(getattr(res, name)) for name in OUTPUTS)
    assert float(cold.onset_pressure) == 0.0  # dry: closest at the surface
    assert float(thick.top_depth) == float(thick.onset_depth)
    assert 0.005 < float(wet.onset_pressure) < 0.05 and float(wet.top_pressure) == 0.0
    assert float(cold.solidus_margin) < 0.0 < float(thick.solidus_margin)
    assert float(wet.solidus_margin) < 0.0
    path = thick.path(8)
    assert np.all(path.weight == 0.0)
    assert np.all(np.isfinite(path.temperature))


def test_hot_mantle_stays_finite_and_bounded():
    res = melt_column(1800.0, 0.0, water=1000.0, solidus_offset=-100.0, active_upwelling=20.0)
    assert all(np.all(np.isfinite(getattr(res, name))) for name in OUTPUTS)
    assert 0.0 < float(res.max_melt_fraction) <= 1.0
    assert float(res.onset_pressure) == forward.MAX_PRESSURE  # melting from the model base


def test_broadcasting_and_scaling():
    res = melt_column(np.array([1300.0, 1400.0])[:, None], np.array([0.0, 20.0, 40.0]),
                      active_upwelling=2.0, crust_density=2800.0)
    assert res.melt_thickness.shape == (2, 3)
    single = melt_column(1400.0, 20.0)
    assert float(res.melt_thickness[1, 1]) == pytest.approx(2.0 * float(single.melt_thickness))
    # Mass balance: h_c = h rho_mantle / rho_crust (common practice).
    assert_allclose(res.crustal_thickness, res.melt_thickness * 3300.0 / 2800.0)
    assert_allclose(res.top_depth[:, 1], 20.0)


def test_path_weights_reproduce_mean_pressure():
    for melting_region in ("column", "triangle"):
        res = melt_column(np.array([1350.0, 1500.0]), np.array([10.0, 60.0]), water=100.0,
                          melting_region=melting_region)
        path = res.path(400)
        assert_allclose(path.weight.sum(axis=-1), 1.0)
        weighted = np.sum(path.weight * path.pressure, axis=-1)
        # midpoint rule on 400 intervals: second-order error well below 1e-3 GPa
        assert_allclose(weighted, res.mean_melting_pressure, atol=1e-3)
        assert np.all(path.pressure >= res.top_pressure[:, None])
        assert np.all(path.pressure <= res.onset_pressure[:, None])


@settings(max_examples=60, deadline=None)
@given(tp=st.floats(1000, 1800), lid=st.floats(0, 400), water=st.sampled_from([0.0, 80.0, 700.0]),
       shift=st.floats(-100, 100), melting_region=st.sampled_from(["column", "triangle"]))
def test_outputs_always_finite_and_bounded(tp, lid, water, shift, melting_region):
    res = melt_column(tp, lid, water=water, solidus_offset=shift, melting_region=melting_region)
    values = {name: float(getattr(res, name)) for name in OUTPUTS}
    assert all(np.isfinite(v) for v in values.values())
    for name in ("max_melt_fraction", "mean_melt_fraction"):
        assert 0.0 <= values[name] <= 1.0
    assert values["melt_thickness"] >= 0.0
    assert values["top_depth"] <= values["onset_depth"] + 1e-9
    if values["melt_thickness"] > 0:
        assert values["top_pressure"] <= values["mean_melting_pressure"] <= values["onset_pressure"]


@pytest.mark.parametrize(
    "kwargs, match",
    [(dict(potential_temperature=1900.0), r"potential_temperature = 1900 degC is outside"),
     (dict(lithosphere_thickness=-5.0), r"lithosphere_thickness = -5 km"),
     (dict(water=np.nan), r"water = not a number is outside"),
     (dict(active_upwelling=0.0), r"active_upwelling = 0 is outside"),
     (dict(solidus_offset=250.0), r"solidus_offset = 250 degC")],
)
def test_domain_errors_name_the_input(kwargs, match):
    args = dict(potential_temperature=1350.0, lithosphere_thickness=0.0) | kwargs
    with pytest.raises(forward.DomainError, match=match):
        melt_column(args.pop("potential_temperature"), args.pop("lithosphere_thickness"), **args)


def test_other_bad_arguments():
    with pytest.raises(ValueError, match="unknown melting_region 'plume'"):
        melt_column(1350.0, 0.0, melting_region="plume")
    with pytest.raises(ValueError, match="dry parameterization: water must be 0"):
        melt_column(1350.0, 0.0, water=100.0, parameterization="mckenzie-bickle1988")
    assert not forward.in_domain(potential_temperature=[1350.0, 2000.0])[1]
