"""Synthetic basalt analyses with a chosen Lee et al. (2009) pressure and temperature.

Test-only: a base primary melt (a typical MORB-like primitive composition, invented for
tests; value from memory of typical ranges) has its SiO2 and MgO adjusted until the
Lee et al. (2009) thermobarometer (lidmelt's implementation, docs/model.md) returns the
target P-T; then olivine is crystallised from it (equilibrium olivine, K_D 0.30, Roeder &
Emslie 1970, removed in small steps) to give a "measured" basalt. Adding olivine back to
the target Fo must then return the primary melt's P-T.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from lidmelt.inversion.petrology.olivine import equilibrium_fo, melt_mg_number, \
    olivine_composition
from lidmelt.inversion.petrology.oxides import IDX, MOLAR_MASS, feo_total, split_iron
from lidmelt.inversion.petrology.thermobarometers import METHODS

#: Base primitive melt, wt%, ANALYSIS_OXIDES order (FeOt): invented for the tests.
BASE = np.array([48.0, 0.9, 14.0, 9.0, 0.15, 14.0, 10.5, 1.9, 0.08, 0.07])


def _melt(sio2: float, mgo: float, feot: float, fe3: float) -> np.ndarray:
    """MELT_OXIDES wt% with SiO2, MgO and FeOt set, the other oxides scaled to make 100."""
    a = BASE.copy()
    others = [i for i in range(10) if i not in (0, 3, 5)]
    a[others] *= (100.0 - sio2 - mgo - feot) / a[others].sum()
    a[0], a[3], a[5] = sio2, feot, mgo
    feo, fe2o3 = split_iron(a[3], fe3_fraction=fe3)
    return np.concatenate([a[:3], [feo, fe2o3], a[4:]])


def primary_for(pressure: float, temperature: float, *, fe3: float = 0.1,
                fo: float = 0.90, kd: float = 0.30) -> np.ndarray:
    """A primary melt (MELT_OXIDES wt%) in equilibrium with Fo `fo` at the Lee 2009 P-T.

    FeOt is set so that the melt's Mg# gives Fo `fo` with the K_D (Mg# = 1 / (1 +
    (1/Fo - 1)/K_D), molar); SiO2 and MgO are solved for so that Lee et al. (2009)
    gives (`pressure` GPa, `temperature` degC).
    """
    lee = METHODS["lee2009"]
    mg_number = 1.0 / (1.0 + (1.0 / fo - 1.0) / kd)

    def melt_of(x):
        sio2, mgo = x
        feo = mgo / MOLAR_MASS["MgO"] * (1.0 / mg_number - 1.0) * MOLAR_MASS["FeO"]
        return _melt(sio2, mgo, feo / (1.0 - fe3), fe3)

    def gap(x):
        p, t = lee.solve(melt_of(x))
        return [float(p) - pressure, (float(t) - temperature) / 100.0]

    solution = optimize.fsolve(gap, [47.0, 14.0], full_output=True)
    melt = melt_of(solution[0])
    p, t = lee.solve(melt)
    assert abs(float(p) - pressure) < 1e-6 and abs(float(t) - temperature) < 1e-4
    assert abs(float(equilibrium_fo(melt_mg_number(melt), kd=kd)) - fo) < 1e-9
    return melt


def crystallise(melt: np.ndarray, fraction: float, *,
                step: float = 1e-5) -> tuple[np.ndarray, float]:
    """Remove equilibrium olivine (K_D 0.30) until `fraction` of the mass is gone.

    Returns the residual melt as an analysis (ANALYSIS_OXIDES order, FeOt), normalised
    to 100 wt%, and its molar Fe3+/ΣFe (olivine takes no Fe3+, so it rises).
    """
    state = melt.astype(float).copy()
    mass = 100.0
    while mass > 100.0 * (1.0 - fraction):
        fo = equilibrium_fo(melt_mg_number(state), kd=0.30)
        state -= step * mass * olivine_composition(fo) / 100.0
        mass -= step * mass
    out = np.concatenate([state[:3], [feo_total(state)], state[IDX["MnO"]:]])
    fe3 = 1.0 - state[IDX["FeO"]] / feo_total(state)
    return 100.0 * out / out.sum(), float(fe3)
