"""Melting curves and melt fractions against published equations and facts of the trade."""

from dataclasses import replace

import numpy as np
import pytest
from lidmelt import forward
from lidmelt.forward import Katz2003, KatzConstants, McKenzieBickle1988
from numpy.testing import assert_allclose
from scipy.optimize import brentq

PARAMS = [Katz2003(), McKenzieBickle1988()]
P_GRID = np.linspace(0.0, 8.0, 81)


def test_katz_solidus_is_hirschmann_minus_35():
    # Hirschmann (2000), G-cubed 1: T = -5.104 P^2 + 132.899 P + 1120.661 (degC, GPa);
    # Katz et al. (2003) keep its P terms (rounded) and sit 35 degC lower.
    hirschmann = -5.104 * P_GRID**2 + 132.899 * P_GRID + 1120.661
    assert_allclose(Katz2003().solidus(P_GRID), hirschmann - 35.0, atol=0.05 * 8 + 0.04 * 64)
    c = KatzConstants()
    assert (c.a2, c.a3) == (132.9, -5.1)
    assert c.a1 == pytest.approx(1120.661 - 35.0, abs=0.05)


@pytest.mark.parametrize("param", PARAMS, ids=lambda p: p.name)
def test_one_atmosphere_melting_interval(param):
    # Common practice: peridotite starts melting near 1100 degC at 1 atm, molten near 1800.
    assert float(param.solidus(1e-4)) == pytest.approx(1100.0, abs=30.0)
    assert float(param.liquidus(1e-4)) == pytest.approx(1800.0, abs=70.0)


@pytest.mark.parametrize("param", PARAMS, ids=lambda p: p.name)
def test_curves_rise_monotonically_with_pressure(param):
    # Common practice: solidus and liquidus rise with pressure over the upper mantle.
    for name, curve in param.curves(P_GRID).items():
        assert np.all(np.diff(curve) > 0.0), name
    assert np.all(param.liquidus(P_GRID) > param.solidus(P_GRID))


def test_katz_point_values():
    # Values computed from the Katz et al. (2003) equations with their Table 2 constants
    # (docs/model.md, "Worked values"), not published numbers; the hand route: T_sol(1) =
    # 1085.7 + 132.9 - 5.1; F_cpx-out = 0.17 / 0.58; F = ((1300 - T_sol)/(T_lz - T_sol))^1.5.
    katz = Katz2003()
    assert float(katz.solidus(1.0)) == pytest.approx(1213.5, abs=0.05)
    f_cpx, t_cpx, _, _ = katz._cpx_out(np.asarray(1.0))
    assert float(f_cpx) == pytest.approx(0.2931, abs=1e-4)
    assert float(t_cpx) == pytest.approx(1362.8, abs=0.05)
    assert float(katz.melt_fraction(1300.0, 1.0).fraction) == pytest.approx(0.1293, abs=1e-4)
    # 0.1 wt% = 1000 ppm bulk water: F -> 0 solidus at 1 GPa, 1213.5 - 43 * 10^0.75.
    assert float(katz.wet_solidus(1.0, 1000.0)) == pytest.approx(971.7, abs=0.05)


def _published_wet_fraction(temperature, pressure, water_ppm):
    """F of hydrous peridotite written out from Katz et al. (2003), eqs. 2-3, 9, 16-19.

    Table 2 values typed in (M_cpx = 0.17 is a value from memory); the fixed point
    F = F_dry(T + dT(F)) is solved with brentq. Independent of the package's code.
    """
    t_sol = 1085.7 + 132.9 * pressure - 5.1 * pressure**2
    t_lz = 1475.0 + 80.0 * pressure - 3.2 * pressure**2
    t_liq = 1780.0 + 45.0 * pressure - 2.0 * pressure**2
    f_cpx = 0.17 / (0.50 + 0.08 * pressure)
    t_cpx = f_cpx ** (1 / 1.5) * (t_lz - t_sol) + t_sol

    def dry(t):
        if t <= t_sol:
            return 0.0
        if t < t_cpx:
            return ((t - t_sol) / (t_lz - t_sol)) ** 1.5
        return min(1.0, f_cpx + (1 - f_cpx) * ((t - t_cpx) / (t_liq - t_cpx)) ** 1.5)

    bulk = water_ppm * 1e-4  # wt%
    saturation = 12.00 * pressure**0.6 + 1.00 * pressure

    def mismatch(f):
        in_melt = min(bulk / (0.01 + f * (1 - 0.01)), saturation)
        return dry(temperature + 43.0 * in_melt**0.75) - f

    return 0.0 if mismatch(0.0) <= 0.0 else brentq(mismatch, 0.0, 1.0, xtol=1e-13)


def test_katz_hydrous_melt_fraction_against_the_published_equations():
    # Katz et al. (2003): water lowers the solidus by K X^gamma, X the water in the melt,
    # capped at saturation; F_wet(T, P) = F_dry(T + dT(F), P).
    katz = Katz2003()
    for water in (50.0, 300.0, 1000.0):
        for pressure in (0.05, 1.5, 4.0):  # 0.05 GPa: saturated, near the surface
            temps = np.array([950.0, 1150.0, 1250.0, 1350.0, 1500.0])
            wet = katz.melt_fraction(temps, pressure, water).fraction
            expected = [_published_wet_fraction(t, pressure, water) for t in temps]
            assert_allclose(wet, expected, atol=1e-9)
            assert np.all(wet >= katz.melt_fraction(temps, pressure).fraction)


@pytest.mark.parametrize("param, water",
                         [(Katz2003(), 0.0), (Katz2003(), 200.0), (McKenzieBickle1988(), 0.0)],
                         ids=["katz2003-dry", "katz2003-200ppm", "mckenzie-bickle1988"])
def test_partial_derivatives_match_finite_differences(param, water):
    temps = np.array([1180.0, 1300.0, 1400.0, 1550.0, 1700.0])
    p, h = 1.7, 1e-4
    mf = param.melt_fraction(temps, p, water)
    d_t = (param.melt_fraction(temps + h, p, water).fraction
           - param.melt_fraction(temps - h, p, water).fraction) / (2 * h)
    d_p = (param.melt_fraction(temps, p + h, water).fraction
           - param.melt_fraction(temps, p - h, water).fraction) / (2 * h)
    assert_allclose(mf.d_temperature, d_t, rtol=1e-5, atol=1e-9)
    assert_allclose(mf.d_pressure, d_p, rtol=1e-5, atol=1e-8)


def test_fast_melt_fraction_matches_the_full_one():
    # dry_fraction (no partials, used on the fast route) against dry_melt_fraction
    katz = Katz2003()
    rng = np.random.default_rng(3)
    tau, p = rng.uniform(900.0, 2300.0, 5000), rng.uniform(0.0, 10.0, 5000)
    assert_allclose(katz.dry_fraction(tau, p), katz.dry_melt_fraction(tau, p).fraction,
                    atol=1e-13)


@pytest.mark.parametrize("param", PARAMS, ids=lambda p: p.name)
def test_melt_fraction_bounded_and_monotone_in_temperature(param):
    temps = np.linspace(900.0, 2200.0, 400)
    for p in (0.0, 1.0, 3.0, 6.0):
        frac = param.melt_fraction(temps, p).fraction
        assert frac.min() == 0.0 and frac.max() == 1.0
        assert np.all(np.diff(frac) >= 0.0)


def test_mckenzie_bickle_curves_from_memory():
    # McKenzie & Bickle (1988) solidus, implicit in T (value from memory):
    # P = (T - 1100)/136 + 4.968e-4 exp(1.2e-2 (T - 1100)).
    mb = McKenzieBickle1988()
    t = mb.solidus(P_GRID)
    assert_allclose((t - 1100) / 136 + 4.968e-4 * np.exp(1.2e-2 * (t - 1100)), P_GRID, atol=1e-9)
    # Liquidus 1736.2 + 4.343 P + 180 arctan(P / 2.2169) (value from memory).
    assert float(mb.liquidus(2.0)) == pytest.approx(1736.2 + 8.686 + 180 * np.arctan(2 / 2.2169))
    # F(T') = 0.5 + T' + (T'^2 - 0.25)(0.4256 + 2.988 T'): midpoint T' = 0 gives F = 0.3936.
    mid = 0.5 * (mb.solidus(2.0) + mb.liquidus(2.0))
    assert float(mb.dry_melt_fraction(mid, 2.0).fraction) == pytest.approx(0.5 - 0.25 * 0.4256)


def test_edited_constants_make_a_new_source():
    # A more fertile source (more cpx) exhausts cpx later: F_cpx-out = M_cpx / R_cpx.
    fertile = Katz2003(constants=replace(KatzConstants(), cpx_mode=0.25))
    f_cpx = float(fertile._cpx_out(np.asarray(1.0))[0])
    assert f_cpx == pytest.approx(0.25 / 0.58)
    # Hot enough for the default source to exhaust cpx (F > 0.29) before the surface.
    base = forward.melt_column(1500.0, 0.0)
    rich = forward.melt_column(1500.0, 0.0, parameterization=fertile)
    assert float(base.max_melt_fraction) > 0.3
    assert float(rich.melt_thickness) > float(base.melt_thickness)


def test_unknown_parameterization_is_refused():
    with pytest.raises(ValueError, match="unknown parameterization 'katz'; choose one of"):
        forward.get_parameterization("katz")
