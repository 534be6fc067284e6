"""Lee et al. (2009): melt-only Si-activity barometer and Mg thermometer.

The melt is recast into components of eight oxygens each (mol%): Si4O8, Ti4O8,
Al16/3O8, Fe16/3O8 (Fe3+), Fe4Si2O8 (Fe2+), Mn4Si2O8, Mg4Si2O8, Ca4Si2O8,
Na2Al2Si2O8, K2Al2Si2O8, P16/5O8 and H16O8. From cation moles:

    Si4O8 = (Si - (Fe2+ + Mn + Mg + Ca)/2 - Na - K)/4,  Al16/3O8 = 3 (Al - Na - K)/16,
    Fe16/3O8 = 3 Fe3+/16,  X4Si2O8 = X/4 (X = Fe2+, Mn, Mg, Ca),  Ti4O8 = Ti/4,
    Na2Al2Si2O8 = Na/2,  K2Al2Si2O8 = K/2,  P16/5O8 = 5 P/16,  H16O8 = H/16.

Thermometer and barometer (H2O in wt%; T in K inside the barometer):

    T(°C) = 916.45 + 13.68 Mg4Si2O8 + 4580/Si4O8 - 0.509 H2O Mg4Si2O8
    P(GPa) = [ln Si4O8 - 4.019 + 0.0165 Fe4Si2O8 + 0.0005 Ca4Si2O8^2]
             / (-770/T + 0.0058 T^0.5 - 0.003 H2O)

Calibration errors about ±0.2 GPa and ±40 °C; calibrated on melts saturated in
olivine and orthopyroxene. The coefficients are as recalled and checked for
self-consistency (docs/model.md): the paper's own text could not be consulted, so they
are flagged unverified there.

Examples
--------
>>> import numpy as np
>>> from lidmelt.inversion.petrology.oxides import melt_from_analysis
>>> melt = melt_from_analysis([49.5, 1.1, 14.4, 8.9, 0.16, 12.4, 11.0, 2.1, 0.1, 0.1],
...                           fe3_fraction=0.1)
>>> p, t = LEE2009.solve(melt)
>>> round(float(p), 2), round(float(t))
(1.34, 1363)
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..oxides import CATIONS, MELT_OXIDES, MOLAR_MASS
from .base import Thermobarometer

__all__ = ["COMPONENTS", "LEE2009", "components", "pressure_gpa", "temperature_c"]

COMPONENTS = ("Si4O8", "Ti4O8", "Al16/3O8", "Fe16/3O8", "Fe4Si2O8", "Mn4Si2O8",
              "Mg4Si2O8", "Ca4Si2O8", "Na2Al2Si2O8", "K2Al2Si2O8", "P16/5O8", "H16O8")


def components(melt: ArrayLike, *, h2o: ArrayLike = 0.0) -> dict[str, NDArray[np.float64]]:
    """Mol% of the eight-oxygen components of Lee et al. (2009).

    Parameters
    ----------
    melt : array_like, shape ``S + (11,)``
        wt% in the order of `MELT_OXIDES`.
    h2o : array_like, broadcastable to ``S``
        H2O, wt%.

    Returns
    -------
    dict of ndarray, shape ``S``
        One entry per name in `COMPONENTS`; they sum to 100.
    """
    melt = np.asarray(melt, dtype=float)
    c = {ox: melt[..., i] / MOLAR_MASS[ox] * CATIONS[ox]
         for i, ox in enumerate(MELT_OXIDES)}
    h = np.asarray(h2o, dtype=float) / MOLAR_MASS["H2O"] * 2.0
    si, ti, al, fe2, fe3 = c["SiO2"], c["TiO2"], c["Al2O3"], c["FeO"], c["Fe2O3"]
    mn, mg, ca, na, k, p = c["MnO"], c["MgO"], c["CaO"], c["Na2O"], c["K2O"], c["P2O5"]
    moles = [(si - 0.5 * (fe2 + mn + mg + ca) - na - k) / 4.0, ti / 4.0,
             3.0 * (al - na - k) / 16.0, 3.0 * fe3 / 16.0, fe2 / 4.0, mn / 4.0,
             mg / 4.0, ca / 4.0, na / 2.0, k / 2.0, 5.0 * p / 16.0,
             np.broadcast_to(h / 16.0, si.shape)]
    total = sum(moles)
    return {name: 100.0 * m / total for name, m in zip(COMPONENTS, moles, strict=True)}


def temperature_c(melt: ArrayLike, *, h2o: ArrayLike = 0.0,
                  pressure_gpa: ArrayLike | None = None) -> NDArray[np.float64]:
    """Lee et al. (2009) thermometer, °C (independent of pressure).

    T = 916.45 + 13.68 Mg4Si2O8 + 4580/Si4O8 - 0.509 H2O Mg4Si2O8 (mol%, H2O wt%).
    """
    c = components(melt, h2o=h2o)
    mg = c["Mg4Si2O8"]
    return 916.45 + 13.68 * mg + 4580.0 / c["Si4O8"] - 0.509 * np.asarray(h2o) * mg


def pressure_gpa(melt: ArrayLike, *, h2o: ArrayLike = 0.0,
                 temperature_c: ArrayLike) -> NDArray[np.float64]:
    """Lee et al. (2009) barometer, GPa, at a temperature in °C (used in K inside).

    P = [ln Si4O8 - 4.019 + 0.0165 Fe4Si2O8 + 0.0005 Ca4Si2O8^2]
        / (-770/T + 0.0058 sqrt(T) - 0.003 H2O).
    """
    c = components(melt, h2o=h2o)
    t_k = np.asarray(temperature_c, dtype=float) + 273.15
    top = (np.log(c["Si4O8"]) - 4.019 + 0.0165 * c["Fe4Si2O8"]
           + 0.0005 * c["Ca4Si2O8"] ** 2)
    return top / (-770.0 / t_k + 0.0058 * np.sqrt(t_k) - 0.003 * np.asarray(h2o))


LEE2009 = Thermobarometer(
    key="lee2009",
    citation="Lee, Luffi, Plank, Dalton & Leeman (2009), EPSL 279, 20-33 "
             "(thermometer and barometer)",
    sigma_p_gpa=0.2, sigma_t_c=40.0,
    p_range_gpa=(0.0, 7.0), t_range_c=(1100.0, 1800.0),
    joint=False, temperature=temperature_c, pressure=pressure_gpa,
    note="coefficients, errors and range as recalled; not verified against the paper",
)
