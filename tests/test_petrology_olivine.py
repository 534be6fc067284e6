"""Oxides, olivine-melt Fe-Mg exchange and olivine addition, against outside sources."""

import numpy as np
import pandas as pd
import pytest
import Thermobar as pt

from lidmelt.inversion.errors import InputError
from lidmelt.inversion.petrology import oxides as ox
from lidmelt.inversion.petrology.olivine import (
    REFUSALS, KdModel, add_olivine, equilibrium_fo, kd_toplis2005, melt_mg_number,
    mg_number_for_fo, olivine_composition, toplis_terms)

# Liquid of Thermobar's unit tests (a general-purpose thermobarometry library)
LIQ = {"SiO2": 51.0, "TiO2": 0.48, "Al2O3": 19.0, "FeOt": 5.3, "MnO": 0.1, "MgO": 4.5,
       "CaO": 9.0, "Na2O": 4.2, "K2O": 0.1}
# a 10 wt% MgO MORB-like basalt (typical composition, invented for the check; common practice)
MORB10 = [50.5, 1.2, 15.5, 9.0, 0.17, 10.0, 11.8, 2.3, 0.1, 0.1]


def _thermobar_liq(values: dict, **extra) -> pd.DataFrame:
    cols = {f"{k}_Liq": [v] for k, v in values.items()}
    cols.update({f"{k}_Liq": [v] for k, v in extra.items()})
    for k in ("Cr2O3", "P2O5", "H2O", "Fe3Fet", "NiO", "CoO", "CO2"):
        cols.setdefault(f"{k}_Liq", [0.0])
    return pd.DataFrame(cols)


def test_iron_conversion_factor():
    # FeOt = FeO + 0.8998 Fe2O3 (stoichiometry; common practice)
    assert ox.FEO_PER_FE2O3 == pytest.approx(0.8998, abs=5e-5)
    feo, fe2o3 = ox.split_iron(np.array([8.0, 10.0]), fe3_fraction=np.array([0.1, 0.25]))
    np.testing.assert_allclose(feo + ox.FEO_PER_FE2O3 * fe2o3, [8.0, 10.0], rtol=1e-14)
    # molar Fe3+/ΣFe recovered from the wt% split
    fe3 = 2 * fe2o3 / ox.MOLAR_MASS["Fe2O3"]
    np.testing.assert_allclose(fe3 / (fe3 + feo / ox.MOLAR_MASS["FeO"]), [0.1, 0.25])


def test_molar_masses_match_a_reference_library():
    # Thermobar's oxide molar masses; differences < 0.01 % come from atomic-weight editions
    ref = {"SiO2": 60.0843, "MgO": 40.3044, "FeO": 71.8464, "CaO": 56.0774,
           "Al2O3": 101.961, "Na2O": 61.9789, "K2O": 94.196, "TiO2": 79.8788,
           "MnO": 70.9375, "P2O5": 141.937}
    for name, mass in ref.items():
        # rel 3e-4: Thermobar's TiO2 uses an older Ti weight (47.88 vs IUPAC 47.867)
        assert ox.MOLAR_MASS[name] == pytest.approx(mass, rel=3e-4)


def test_normalisation_and_total():
    melt = ox.melt_from_analysis(MORB10, fe3_fraction=0.15, h2o=0.6, co2=0.1)
    assert melt.sum() == pytest.approx(99.3, abs=1e-12)   # the rule: 100 - H2O - CO2
    assert ox.analysis_total(MORB10, h2o=0.6, co2=0.1) == pytest.approx(sum(MORB10) + 0.7)
    assert ox.mole_fractions(melt).sum() == pytest.approx(1.0)


def test_cation_fractions_match_thermobar():
    # Thermobar.calculate_anhydrous_cat_fractions_liquid, all iron as FeO
    melt = ox.melt_from_analysis(list(LIQ.values()) + [0.0], fe3_fraction=0.0)
    ours = ox.cation_fractions(melt)
    ref = pt.calculate_anhydrous_cat_fractions_liquid(_thermobar_liq(LIQ))
    for name, col in (("SiO2", "Si"), ("Al2O3", "Al"), ("FeO", "Fet"), ("MgO", "Mg"),
                      ("Na2O", "Na"), ("CaO", "Ca")):
        # molar-mass editions differ by < 1e-4 relative
        assert ours[ox.IDX[name]] == pytest.approx(ref[f"{col}_Liq_cat_frac"][0], rel=2e-4)


@pytest.mark.parametrize(("fo", "kd", "mg"), [
    (0.90, 0.30, 0.7297), (0.91, 0.30, 0.7521), (0.89, 0.30, 0.7082), (0.90, 0.34, 0.7537)])
def test_melt_mg_number_for_olivine(fo, kd, mg):
    # Mg# = 1/[1 + (1/Fo - 1)/K_D] (derived from the K_D definition; brief's check values)
    assert mg_number_for_fo(fo, kd=kd) == pytest.approx(mg, abs=5e-5)
    assert equilibrium_fo(mg_number_for_fo(fo, kd=kd), kd=kd) == pytest.approx(fo)


def test_equilibrium_fo_roeder_emslie():
    # Thermobar unit tests (its liquid also has 0.11 Cr2O3 and P2O5, no effect on Mg#):
    # eq. Fo (Roeder & Emslie K_D 0.30, Fe3+/ΣFe 0.2) = 0.8631288
    melt = ox.split_iron(LIQ["FeOt"], fe3_fraction=0.2)
    arr = np.array([51.0, 0.48, 19.0, *melt, 0.1, 4.5, 9.0, 4.2, 0.1, 0.0])
    fo, kd = KdModel().equilibrium(arr)
    assert kd == 0.30
    # molar masses of another edition shift the 7th digit
    assert fo == pytest.approx(0.8631288, abs=2e-6)
    ref = pt.calculate_eq_ol_content(liq_comps=_thermobar_liq(LIQ), Kd_model="Roeder1970",
                                     Fe3Fet_Liq=0.2)
    assert fo == pytest.approx(ref["Eq Fo (Roeder, Kd=0.3)"][0], abs=2e-6)


def _toplis_terms_with_cr():
    """Anhydrous mol% of the Thermobar test liquid, which also holds 0.11 Cr2O3 and
    0.11 P2O5 (iron as FeOt), as Toplis's expression takes them."""
    wt = dict(LIQ, P2O5=0.11)
    moles = {k: v / ox.MOLAR_MASS["FeO" if k == "FeOt" else k] for k, v in wt.items()}
    moles["Cr2O3"] = 0.11 / 151.990
    total = sum(moles.values())
    return tuple(100 * moles[k] / total for k in ("SiO2", "Na2O", "K2O"))


def test_toplis_kd():
    si, na, k = _toplis_terms_with_cr()
    fo_measured = (47.4 / 40.3044) / (47.4 / 40.3044 + 12.4 / 71.844)   # Thermobar's olivine
    assert fo_measured == pytest.approx(0.8720, abs=5e-5)
    terms = dict(sio2_mol=si, na2o_mol=na, k2o_mol=k, h2o_wt=5.0, pressure_gpa=0.5,
                 temperature_c=1300.0 - 273.15)
    # Thermobar unit tests: Toplis K_D at 5 kbar, 1300 K, 5 wt% H2O, that olivine = 0.299103
    # (atol 2e-6: molar masses of another atomic-weight edition)
    assert kd_toplis2005(fo_measured, **terms) == pytest.approx(0.299103, abs=2e-6)
    # iterated to the fixed point (Fe3+/ΣFe 0.2): K_D 0.300625, Fo 0.862883 (same tests)
    mg_no = 1 / (1 + 0.8 * (5.3 / 71.844) / (4.5 / 40.304))
    fo = 0.9
    for _ in range(50):
        kd = kd_toplis2005(fo, **terms)
        fo = equilibrium_fo(mg_no, kd=kd)
    assert kd == pytest.approx(0.300625, abs=2e-6)
    assert fo == pytest.approx(0.862883, abs=2e-6)


def test_toplis_iteration_matches_thermobar():
    # KdModel's fixed point against Thermobar's, a liquid without Cr2O3, three conditions
    feo, fe2o3 = ox.split_iron(5.3, fe3_fraction=0.2)
    arr = np.array([51.0, 0.48, 19.0, feo, fe2o3, 0.1, 4.5, 9.0, 4.2, 0.1, 0.0])
    for p_kbar, t_k, h2o in ((5, 1300, 5.0), (10, 1550, 0.0), (1, 1400, 2.0)):
        model = KdModel("toplis_2005", pressure_gpa=p_kbar / 10, temperature_c=t_k - 273.15)
        fo, kd = model.equilibrium(arr, h2o=h2o)
        ref = pt.calculate_eq_ol_content(liq_comps=_thermobar_liq(LIQ, H2O=h2o),
                                         Kd_model="Toplis2005", Fe3Fet_Liq=0.2,
                                         P=p_kbar, T=t_k)
        assert kd == pytest.approx(ref["Kd (Toplis, Iter)"][0], abs=3e-6)
        assert fo == pytest.approx(ref["Eq Fo (Toplis, Iter)"][0], abs=3e-6)


def test_olivine_stoichiometry():
    # (Mg,Fe)2SiO4: 3 cations per 4 oxygens, Mg/(Mg+Fe) = Fo (mineral formula; common practice)
    ol = olivine_composition(np.array([0.80, 0.90, 0.95]))
    moles = ol / np.array([ox.MOLAR_MASS[o] for o in ox.MELT_OXIDES])
    cations = moles @ np.array([ox.CATIONS[o] for o in ox.MELT_OXIDES])
    oxygens = moles @ np.array([ox.OXYGENS[o] for o in ox.MELT_OXIDES])
    np.testing.assert_allclose(cations / oxygens, 0.75)
    mg, fe = moles[:, ox.IDX["MgO"]], moles[:, ox.IDX["FeO"]]
    np.testing.assert_allclose(mg / (mg + fe), [0.80, 0.90, 0.95])


def test_mass_balance_of_added_olivine():
    melt = ox.melt_from_analysis(MORB10, fe3_fraction=0.1, h2o=0.4)
    res = add_olivine(melt, h2o=0.4)
    f = res.olivine_fraction
    assert res.accepted and 0.05 < f < 0.08
    # primary = (1 - f) observed + f olivine, every oxide (mass balance)
    np.testing.assert_allclose(res.melt, (1 - f) * melt + f * res.olivine, atol=1e-10)
    assert res.h2o == pytest.approx(0.4 * (1 - f))
    # olivine takes no Fe3+: Fe2O3 mass conserved
    assert res.melt[ox.IDX["Fe2O3"]] == pytest.approx((1 - f) * melt[ox.IDX["Fe2O3"]])
    assert res.fo == pytest.approx(0.90, abs=1e-6)
    assert res.olivine[ox.IDX["MnO"]] == 0.0


def _crystallise(primary, *, fraction, kd=0.30, step=1e-5):
    """Independent fractional crystallisation: remove equilibrium olivine in steps."""
    grams = primary.copy()
    mass, removed = 100.0, 0.0
    while removed < fraction * 100.0:
        mg = grams[6] / 40.304
        fe = grams[3] / 71.844
        fo = 1.0 / (1.0 + kd * fe / mg)
        dm = min(step * mass, fraction * 100.0 - removed)
        ol_mol = dm / (2 * fo * 40.304 + 2 * (1 - fo) * 71.844 + 60.083)
        grams[0] -= ol_mol * 60.083
        grams[6] -= ol_mol * 2 * fo * 40.304
        grams[3] -= ol_mol * 2 * (1 - fo) * 71.844
        mass -= dm
        removed += dm
    return grams / mass * 100.0


def test_round_trip_fractional_crystallisation():
    primary = add_olivine(ox.melt_from_analysis(MORB10, fe3_fraction=0.1)).melt
    evolved = _crystallise(primary, fraction=0.12)
    fo_primary = equilibrium_fo(melt_mg_number(primary), kd=0.30)
    # 12 % olivine takes MgO below 8 wt%; lower the threshold for this check
    back = add_olivine(evolved, target_fo=fo_primary, mgo_min=6.0)
    assert back.olivine_fraction == pytest.approx(0.12, abs=1e-3)
    np.testing.assert_allclose(back.melt, primary, atol=0.05)
    from lidmelt.inversion.petrology.thermobarometers import METHODS
    p0, _ = METHODS["lee2009"].solve(primary)
    p1, _ = METHODS["lee2009"].solve(back.melt)
    assert p1 == pytest.approx(p0, abs=0.01)


def test_step_convergence():
    # halving-by-ten the increment changes the primary melt by < 0.01 wt%: the default
    # 0.01 % step is converged for a 5-10 % correction
    melt = ox.melt_from_analysis(MORB10, fe3_fraction=0.1)
    fine = add_olivine(melt, step=1e-5)
    default = add_olivine(melt)
    np.testing.assert_allclose(default.melt, fine.melt, atol=0.01)
    assert default.steps < fine.steps


def test_vectorised_over_samples_and_draws():
    melt = ox.melt_from_analysis(MORB10, fe3_fraction=np.array([[0.1], [0.2]]))
    res = add_olivine(melt, target_fo=np.array([0.90, 0.905, 0.91]))
    assert res.melt.shape == (2, 3, 11) and res.olivine_fraction.shape == (2, 3)
    one = add_olivine(melt[1, 0], target_fo=0.91)
    np.testing.assert_allclose(res.melt[1, 2], one.melt)
    # more oxidised melt (less FeO) needs less olivine; higher target Fo needs more
    assert np.all(res.olivine_fraction[1] < res.olivine_fraction[0])
    assert np.all(np.diff(res.olivine_fraction, axis=1) > 0)


def test_refusal_evolved():
    low = list(MORB10)
    low[5] = 6.5
    res = add_olivine(ox.melt_from_analysis(low, fe3_fraction=0.1))
    assert res.refusal == "evolved" and "below 8 wt%" in res.reason.item()
    assert np.isnan(res.olivine_fraction) and np.all(np.isnan(res.melt))
    assert set(REFUSALS) == {"evolved", "too_magnesian", "not_converged"}


def test_refusal_too_magnesian():
    rich = list(MORB10)
    rich[5], rich[3] = 16.0, 7.0
    res = add_olivine(ox.melt_from_analysis(rich, fe3_fraction=0.1), target_fo=0.90)
    assert res.refusal == "too_magnesian" and "removed" in res.reason.item()


def test_refusal_not_converged():
    res = add_olivine(ox.melt_from_analysis(MORB10, fe3_fraction=0.1), target_fo=0.93,
                      max_olivine=0.10)
    assert res.refusal == "not_converged" and "10%" in res.reason.item()


def test_bad_input_is_refused_with_a_clear_error():
    with pytest.raises(InputError, match="MgO"):
        ox.melt_from_analysis([50, 1, 15, 9, 0.2, -1.0, 11, 2.5, 0.2, 0.1],
                              fe3_fraction=0.1)
    with pytest.raises(InputError, match="Fe3"):
        ox.melt_from_analysis(MORB10, fe3_fraction=1.2)
    with pytest.raises(InputError, match="K_D model"):
        KdModel("beattie")
    with pytest.raises(InputError, match="unknown oxide"):
        ox.as_analysis({"SiO2": 50, "MgO": 9, "FeOt": 9, "Cr2O3": 0.1})
