"""Putirka (2008) liquid-only thermometers for olivine-saturated melts.

Equations (Putirka 2008, Rev. Mineral. Geochem. 69, 61-120; wt% of the melt, Mg#
with all iron as FeO, H2O wt%, P in GPa; T in °C):

- eq. 13:  T = 26.3 MgO + 994.4                                         (SEE 72 °C)
- eq. 14:  T = 754 + 190.6 Mg# + 25.52 MgO + 9.585 FeOt + 14.87 (Na2O + K2O)
              - 9.176 H2O                                                (SEE 58 °C)
- eq. 15:  T = 815.3 + 265.5 Mg# + 15.37 MgO + 8.61 FeOt + 6.646 (Na2O + K2O)
              + 39.16 P - 12.83 H2O                                      (SEE 46 °C)
- eq. 22:  T = (15294.6 + 1318.8 P + 2.48348 P^2) / [8.048 + 2.8352 ln D_Mg
              + 2.097 ln(1.5 C_NM) + 2.575 ln(3 C_SiO2) - 1.41 NF + 0.222 H2O
              + 0.5 P], with D_Mg from the melt alone (Beattie 1993):
              D_Mg = (0.666 - (-0.049 X_Mn + 0.027 X_Fe)) / (X_Mg + 0.259 X_Mn
              + 0.299 X_Fe), C_NM = X_Mg + X_Fe + X_Ca + X_Mn, C_SiO2 = X_Si,
              NF = 3.5 ln(1 - X_Al) + 7 ln(1 - X_Ti); X are anhydrous cation
              fractions with all iron as Fe2+ and P2O5 left out.

These coefficients match the Thermobar library's implementation (tests compare the
two). Eq. 16 is calibrated on melts saturated in olivine + plagioclase + clinopyroxene
(crustal) and is left out: primary mantle melts are not plagioclase saturated. Putirka's
thermometers give T only; pressure comes from the Lee et al. (2009) barometer, iterated
jointly with eqs. 15 and 22, which depend on P.

Examples
--------
>>> from lidmelt.inversion.petrology.oxides import melt_from_analysis
>>> melt = melt_from_analysis([49.5, 1.1, 14.4, 8.9, 0.16, 12.4, 11.0, 2.1, 0.1, 0.1],
...                           fe3_fraction=0.1)
>>> round(float(t_eq13(melt)), 1)
1321.0
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..oxides import IDX, MOLAR_MASS, feo_total
from .base import Thermobarometer
from .lee2009 import pressure_gpa as lee_pressure

__all__ = ["PUTIRKA2008_EQ13", "PUTIRKA2008_EQ14", "PUTIRKA2008_EQ15", "PUTIRKA2008_EQ22",
           "beattie_dmg", "t_eq13", "t_eq14", "t_eq15", "t_eq22"]

# anhydrous cations for eq. 22: every oxide but P2O5, iron as FeOt
_EQ22_OXIDES = ("SiO2", "TiO2", "Al2O3", "FeO", "MnO", "MgO", "CaO", "Na2O", "K2O")


def _mg_number_total_iron(melt: NDArray) -> NDArray:
    mg = melt[..., IDX["MgO"]] / MOLAR_MASS["MgO"]
    return mg / (mg + feo_total(melt) / MOLAR_MASS["FeO"])


def t_eq13(melt: ArrayLike, *, h2o: ArrayLike = 0.0,
           pressure_gpa: ArrayLike | None = None) -> NDArray[np.float64]:
    """Putirka (2008) eq. 13, °C: T = 26.3 MgO + 994.4 (MgO wt%)."""
    return 26.3 * np.asarray(melt, dtype=float)[..., IDX["MgO"]] + 994.4


def t_eq14(melt: ArrayLike, *, h2o: ArrayLike = 0.0,
           pressure_gpa: ArrayLike | None = None) -> NDArray[np.float64]:
    """Putirka (2008) eq. 14, °C (no pressure term); see the module docstring."""
    melt = np.asarray(melt, dtype=float)
    alk = melt[..., IDX["Na2O"]] + melt[..., IDX["K2O"]]
    return (754.0 + 190.6 * _mg_number_total_iron(melt) + 25.52 * melt[..., IDX["MgO"]]
            + 9.585 * feo_total(melt) + 14.87 * alk - 9.176 * np.asarray(h2o))


def t_eq15(melt: ArrayLike, *, h2o: ArrayLike = 0.0,
           pressure_gpa: ArrayLike) -> NDArray[np.float64]:
    """Putirka (2008) eq. 15, °C (eq. 14 with a pressure term); P in GPa."""
    melt = np.asarray(melt, dtype=float)
    alk = melt[..., IDX["Na2O"]] + melt[..., IDX["K2O"]]
    return (815.3 + 265.5 * _mg_number_total_iron(melt) + 15.37 * melt[..., IDX["MgO"]]
            + 8.61 * feo_total(melt) + 6.646 * alk + 39.16 * np.asarray(pressure_gpa)
            - 12.83 * np.asarray(h2o))


def _eq22_cations(melt: NDArray) -> dict[str, NDArray]:
    wt = {ox: (feo_total(melt) if ox == "FeO" else melt[..., IDX[ox]])
          for ox in _EQ22_OXIDES}
    n = {ox: wt[ox] / MOLAR_MASS[ox] * (2 if ox in ("Al2O3", "Na2O", "K2O") else 1)
         for ox in _EQ22_OXIDES}
    total = sum(n.values())
    return {ox: v / total for ox, v in n.items()}


def beattie_dmg(melt: ArrayLike) -> NDArray[np.float64]:
    """D_Mg olivine/melt from the melt alone (Beattie 1993), as used with eq. 22."""
    x = _eq22_cations(np.asarray(melt, dtype=float))
    return ((0.666 - (-0.049 * x["MnO"] + 0.027 * x["FeO"]))
            / (x["MgO"] + 0.259 * x["MnO"] + 0.299 * x["FeO"]))


def t_eq22(melt: ArrayLike, *, h2o: ArrayLike = 0.0,
           pressure_gpa: ArrayLike) -> NDArray[np.float64]:
    """Putirka (2008) eq. 22 with Beattie's (1993) D_Mg, °C; P in GPa."""
    melt = np.asarray(melt, dtype=float)
    x = _eq22_cations(melt)
    p = np.asarray(pressure_gpa, dtype=float)
    c_nm = x["MgO"] + x["FeO"] + x["CaO"] + x["MnO"]
    nf = 3.5 * np.log(1.0 - x["Al2O3"]) + 7.0 * np.log(1.0 - x["TiO2"])
    den = (8.048 + 2.8352 * np.log(beattie_dmg(melt)) + 2.097 * np.log(1.5 * c_nm)
           + 2.575 * np.log(3.0 * x["SiO2"]) - 1.41 * nf + 0.222 * np.asarray(h2o)
           + 0.5 * p)
    return (15294.6 + 1318.8 * p + 2.48348 * p ** 2) / den


def _paired(key: str, eq: str, fn, sigma_t: float, joint: bool, note: str = ""):
    return Thermobarometer(
        key=key,
        citation=f"Putirka (2008), RiMG 69, 61-120, eq. {eq} (T); Lee et al. (2009) "
                 "barometer (P)",
        sigma_p_gpa=0.2, sigma_t_c=sigma_t, p_range_gpa=(0.0, 7.0),
        t_range_c=(1000.0, 1800.0), joint=joint, temperature=fn, pressure=lee_pressure,
        note="pressure from the Lee et al. (2009) barometer" + note)


PUTIRKA2008_EQ13 = _paired("putirka2008_eq13", "13", t_eq13, 72.0, False)
PUTIRKA2008_EQ14 = _paired("putirka2008_eq14", "14", t_eq14, 58.0, False)
PUTIRKA2008_EQ15 = _paired("putirka2008_eq15", "15", t_eq15, 46.0, True)
PUTIRKA2008_EQ22 = _paired("putirka2008_eq22", "22", t_eq22, 46.0, True,
                           "; σ_T of eq. 22 not verified: eq. 15's 46 °C adopted")
