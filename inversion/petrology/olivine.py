"""Olivine-melt Fe-Mg exchange and primary-melt reconstruction by olivine addition.

The exchange coefficient K_D = (FeO/MgO)_ol / (FeO/MgO)_melt (molar, Fe2+ only in the
melt) links a melt's Mg# = Mg/(Mg + Fe2+) to the forsterite content Fo of the olivine in
equilibrium with it (docs/model.md, "Basalt chemistry"):

    Fo = 1 / (1 + K_D (1/Mg# - 1)),        Mg# = 1 / (1 + (1/Fo - 1) / K_D).

Two K_D models: the constant 0.30 of Roeder & Emslie (1970), and the composition,
pressure, temperature and Fo dependent expression of Toplis (2005), solved for Fo by
fixed-point iteration.

`add_olivine` reconstructs a primary melt: it adds equilibrium olivine in small steps
until the melt is in equilibrium with olivine of a target Fo, or refuses with a reason.

Examples
--------
>>> round(float(mg_number_for_fo(0.90, kd=0.30)), 4)    # melt Mg# for Fo90
0.7297
>>> round(float(equilibrium_fo(0.7297, kd=0.30)), 4)
0.9
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from .oxides import IDX, MELT_OXIDES, MOLAR_MASS, feo_total, normalise_melt

__all__ = [
    "KdModel", "PrimaryMelt", "REFUSALS", "add_olivine", "equilibrium_fo",
    "kd_toplis2005", "melt_mg_number", "mg_number_for_fo", "olivine_composition",
]

#: Gas constant, J/(mol K) (CODATA; common practice).
R_GAS = 8.314462618

#: Refusal codes of `add_olivine` and what each means.
REFUSALS = {
    "evolved": "MgO below the threshold: plagioclase and clinopyroxene probably "
               "crystallised with olivine, so olivine addition alone cannot undo it",
    "too_magnesian": "the melt is already in equilibrium with olivine more magnesian than "
                     "the target: olivine would have to be removed",
    "not_converged": "more olivine than the cap would be needed to reach the target Fo",
}


def melt_mg_number(melt: ArrayLike) -> NDArray[np.float64]:
    """Molar Mg/(Mg + Fe2+) of a melt.

    Parameters
    ----------
    melt : array_like, shape ``S + (11,)``
        wt% in the order of `MELT_OXIDES` (Fe2+ is the FeO column).

    Returns
    -------
    ndarray, shape ``S``
    """
    melt = np.asarray(melt, dtype=float)
    mg = melt[..., IDX["MgO"]] / MOLAR_MASS["MgO"]
    fe = melt[..., IDX["FeO"]] / MOLAR_MASS["FeO"]
    return mg / (mg + fe)


def equilibrium_fo(mg_number: ArrayLike, *, kd: ArrayLike) -> NDArray[np.float64]:
    """Fo of olivine in Fe-Mg equilibrium with a melt: 1 / (1 + K_D (1/Mg# - 1)).

    Parameters
    ----------
    mg_number : array_like
        Melt Mg# with Fe2+ only, molar.
    kd : array_like
        K_D (Fe-Mg) olivine/melt.

    Returns
    -------
    ndarray
        Fo, molar Mg/(Mg + Fe) of the olivine.
    """
    mg_number = np.asarray(mg_number, dtype=float)
    return 1.0 / (1.0 + np.asarray(kd) * (1.0 / mg_number - 1.0))


def mg_number_for_fo(fo: ArrayLike, *, kd: ArrayLike) -> NDArray[np.float64]:
    """Melt Mg# (Fe2+) in equilibrium with olivine Fo: 1 / (1 + (1/Fo - 1) / K_D).

    Parameters
    ----------
    fo : array_like
        Olivine Fo, molar.
    kd : array_like
        K_D (Fe-Mg) olivine/melt.

    Returns
    -------
    ndarray
        Melt Mg#, molar, Fe2+ only.
    """
    fo = np.asarray(fo, dtype=float)
    return 1.0 / (1.0 + (1.0 / fo - 1.0) / np.asarray(kd))


def kd_toplis2005(fo: ArrayLike, *, sio2_mol: ArrayLike, na2o_mol: ArrayLike,
                  k2o_mol: ArrayLike, h2o_wt: ArrayLike, pressure_gpa: ArrayLike,
                  temperature_c: ArrayLike) -> NDArray[np.float64]:
    """K_D (Fe-Mg) olivine/melt of Toplis (2005).

    ln K_D = -6766/(R T) - 7.34/R + ln(0.036 SiO2* - 0.22) + 3000 (1 - 2 Fo)/(R T)
    + 0.035 (P - 1)/(R T), with T in K, P in bar, and the adjusted silica
    SiO2* = SiO2 + Ψ (Na2O + K2O) + 0.8 H2O (mol% anhydrous; H2O in wt%), where
    Ψ = (0.46 (100/(100 - SiO2)) - 0.93)(Na2O + K2O) - 5.33 (100/(100 - SiO2)) + 9.69
    below 60 mol% SiO2 and Ψ = (11 - 5.5 (100/(100 - SiO2))) exp(-0.13 (Na2O + K2O))
    above (Toplis 2005, Contrib. Mineral. Petrol. 149, 22-39; form as implemented in
    the Thermobar library, docs/model.md).

    Parameters
    ----------
    fo : array_like
        Olivine Fo.
    sio2_mol, na2o_mol, k2o_mol : array_like
        Anhydrous mol% of the melt, iron counted as FeO (`toplis_terms`).
    h2o_wt : array_like
        Melt H2O, wt%.
    pressure_gpa, temperature_c : array_like
        Pressure (GPa) and temperature (°C).

    Returns
    -------
    ndarray
        K_D, broadcast shape of the inputs.
    """
    si = np.asarray(sio2_mol, dtype=float)
    alk = np.asarray(na2o_mol) + np.asarray(k2o_mol)
    ratio = 100.0 / (100.0 - si)
    psi = np.where(si < 60.0,
                   (0.46 * ratio - 0.93) * alk + (-5.33 * ratio + 9.69),
                   (11.0 - 5.5 * ratio) * np.exp(-0.13 * alk))
    si_adjusted = si + psi * alk + 0.8 * np.asarray(h2o_wt)
    rt = R_GAS * (np.asarray(temperature_c) + 273.15)
    p_bar = np.asarray(pressure_gpa) * 1.0e4
    ln_kd = (-6766.0 / rt - 7.34 / R_GAS + np.log(0.036 * si_adjusted - 0.22)
             + 3000.0 * (1.0 - 2.0 * np.asarray(fo)) / rt + 0.035 * (p_bar - 1.0) / rt)
    return np.exp(ln_kd)


def toplis_terms(melt: ArrayLike) -> tuple[NDArray, NDArray, NDArray]:
    """Anhydrous mol% of SiO2, Na2O and K2O with all iron as FeO, for `kd_toplis2005`.

    Parameters
    ----------
    melt : array_like, shape ``S + (11,)``
        wt% in the order of `MELT_OXIDES`.

    Returns
    -------
    sio2, na2o, k2o : ndarray, shape ``S``
        mol%.
    """
    melt = np.asarray(melt, dtype=float)
    names = [ox for ox in MELT_OXIDES if ox != "Fe2O3"]
    wt = np.stack([feo_total(melt) if ox == "FeO" else melt[..., IDX[ox]]
                   for ox in names], axis=-1)
    moles = wt / np.array([MOLAR_MASS[ox] for ox in names])
    pct = 100.0 * moles / moles.sum(axis=-1, keepdims=True)
    return pct[..., 0], pct[..., names.index("Na2O")], pct[..., names.index("K2O")]


@dataclass(frozen=True)
class KdModel:
    """A K_D (Fe-Mg) olivine/melt model.

    Parameters
    ----------
    name : {"roeder_emslie_1970", "toplis_2005"}
        Constant K_D (`value`, default 0.30) or Toplis (2005).
    value : float
        The constant K_D (Roeder & Emslie 1970: 0.30).
    pressure_gpa, temperature_c : float
        Conditions at which the Toplis K_D is evaluated during olivine addition.

    Examples
    --------
    >>> KdModel().value
    0.3
    """

    name: str = "roeder_emslie_1970"
    value: float = 0.30
    pressure_gpa: float = 1.0
    temperature_c: float = 1300.0

    def __post_init__(self) -> None:
        if self.name not in ("roeder_emslie_1970", "toplis_2005"):
            raise InputError(f"unknown K_D model {self.name!r}; expected "
                             "'roeder_emslie_1970' or 'toplis_2005'", key="kd_model")

    def equilibrium(self, melt: ArrayLike, *, h2o: ArrayLike = 0.0,
                    kd_shift: ArrayLike = 0.0, fo_start: ArrayLike | None = None,
                    iterations: int = 60) -> tuple[NDArray, NDArray]:
        """Equilibrium Fo of a melt and the K_D used, ``K_D + kd_shift``.

        For Toplis (2005) K_D depends on Fo; Fo = F(K_D(Fo)) is iterated from
        ``fo_start`` (default 0.9) for ``iterations`` rounds. The map contracts
        strongly (|dF/dFo| < 0.1 for basalts), so a few rounds suffice from a warm start.

        Parameters
        ----------
        melt : array_like, shape ``S + (11,)``
            wt% in the order of `MELT_OXIDES`.
        h2o : array_like
            Melt H2O, wt% (Toplis water term).
        kd_shift : array_like
            Added to K_D (its uncertainty in Monte Carlo draws).
        fo_start : array_like, optional
            Starting Fo of the iteration.
        iterations : int
            Fixed-point rounds (Toplis only).

        Returns
        -------
        fo, kd : ndarray, shape ``S``
        """
        mg = melt_mg_number(melt)
        if self.name == "roeder_emslie_1970":
            kd = np.broadcast_to(self.value + np.asarray(kd_shift, dtype=float), mg.shape)
            return equilibrium_fo(mg, kd=kd), np.array(kd)
        si, na, k = toplis_terms(melt)
        fo = np.full(mg.shape, 0.9) if fo_start is None else np.asarray(fo_start, float)
        for _ in range(iterations):
            kd = kd_toplis2005(fo, sio2_mol=si, na2o_mol=na, k2o_mol=k, h2o_wt=h2o,
                               pressure_gpa=self.pressure_gpa,
                               temperature_c=self.temperature_c) + kd_shift
            fo = equilibrium_fo(mg, kd=kd)
        return fo, kd


def olivine_composition(fo: ArrayLike) -> NDArray[np.float64]:
    """Oxide wt% of olivine (Mg,Fe)2SiO4 of a given Fo, in the `MELT_OXIDES` layout.

    Per formula unit: 2 Fo MgO + 2 (1 - Fo) FeO + 1 SiO2; no Fe3+, Mn, Ca or Ni.

    Parameters
    ----------
    fo : array_like, shape ``S``

    Returns
    -------
    ndarray, shape ``S + (11,)``
        wt%, summing to 100.

    Examples
    --------
    >>> ol = olivine_composition(0.9)
    >>> round(float(ol[6]), 2), round(float(ol[0]), 2)   # MgO, SiO2 of Fo90
    (49.35, 40.87)
    """
    fo = np.asarray(fo, dtype=float)
    grams = np.zeros(fo.shape + (len(MELT_OXIDES),))
    grams[..., IDX["SiO2"]] = MOLAR_MASS["SiO2"]
    grams[..., IDX["MgO"]] = 2.0 * fo * MOLAR_MASS["MgO"]
    grams[..., IDX["FeO"]] = 2.0 * (1.0 - fo) * MOLAR_MASS["FeO"]
    return 100.0 * grams / grams.sum(axis=-1, keepdims=True)


@dataclass(frozen=True)
class PrimaryMelt:
    """The outcome of `add_olivine`, one entry per sample (or per Monte Carlo draw).

    Attributes
    ----------
    melt : ndarray, shape ``S + (11,)``
        Primary melt, wt% of the whole (hydrous) melt, `MELT_OXIDES` order; NaN where
        refused.
    h2o, co2 : ndarray, shape ``S``
        Volatiles of the primary melt, wt% (diluted by the added olivine).
    olivine_fraction : ndarray, shape ``S``
        Mass of olivine added per unit mass of the final primary melt (so the primary
        is (1 - f) parts observed melt + f parts olivine); NaN where refused.
    olivine : ndarray, shape ``S + (11,)``
        wt% of the added olivine taken together (NaN where none was added).
    fo, kd : ndarray, shape ``S``
        Fo in equilibrium with the final melt and the K_D used there.
    steps : ndarray of int, shape ``S``
        Olivine increments taken.
    refusal : ndarray of str, shape ``S``
        A key of `REFUSALS`, or ``""`` where accepted.
    reason : ndarray of str, shape ``S``
        One-line reason with the numbers, or ``""``.
    """

    melt: NDArray[np.float64]
    h2o: NDArray[np.float64]
    co2: NDArray[np.float64]
    olivine_fraction: NDArray[np.float64]
    olivine: NDArray[np.float64]
    fo: NDArray[np.float64]
    kd: NDArray[np.float64]
    steps: NDArray[np.int64]
    refusal: NDArray[np.str_]
    reason: NDArray[np.object_] = field(repr=False)

    @property
    def accepted(self) -> NDArray[np.bool_]:
        """True where a primary melt was reconstructed."""
        return self.refusal == ""


def _initial_refusals(melt, fo, *, mgo_min, target, n):
    """Refusal codes and reasons before any olivine is added (wt% of the whole melt)."""
    code = np.full(n, "", dtype="<U16")
    reason = np.full(n, "", dtype=object)
    mgo = melt[:, IDX["MgO"]]
    evolved = mgo < mgo_min
    for i in np.flatnonzero(evolved):
        code[i] = "evolved"
        reason[i] = (f"MgO {mgo[i]:.2f} wt% is below {mgo_min:g} wt%: plagioclase and "
                     "clinopyroxene probably crystallised with olivine")
    magnesian = ~evolved & (fo > target + 1e-9)
    for i in np.flatnonzero(magnesian):
        code[i] = "too_magnesian"
        reason[i] = (f"melt is in equilibrium with Fo {fo[i]:.4f}, above the target "
                     f"{target[i]:.4f}: olivine would have to be removed")
    return code, reason


def add_olivine(melt: ArrayLike, *, h2o: ArrayLike = 0.0, co2: ArrayLike = 0.0,
                kd_model: KdModel | None = None, target_fo: ArrayLike = 0.90,
                kd_shift: ArrayLike = 0.0, step: float = 1.0e-4,
                max_olivine: float = 0.40, mgo_min: float = 8.0) -> PrimaryMelt:
    """Reconstruct primary melts by adding equilibrium olivine in small increments.

    Each increment adds olivine of the Fo in equilibrium with the current melt, of mass
    ``step`` times the current melt mass (default 0.01 %), until the melt is in
    equilibrium with olivine of ``target_fo``; the last increment is cut at the target
    (linear interpolation within the increment). Olivine carries no Fe3+: the Fe2O3 mass
    is conserved while FeO rises, so Fe3+/ΣFe of the melt falls slightly. Volatiles are
    conserved in mass (diluted). Refused, never corrected (codes in `REFUSALS`):
    MgO < ``mgo_min`` (8 wt%: below it plagioclase and clinopyroxene join olivine in
    basalts, common practice, the reason why Klein & Langmuir 1987 correct to MgO 8);
    melt already in equilibrium with Fo above the target; more than ``max_olivine``
    olivine needed.

    Parameters
    ----------
    melt : array_like, shape ``S + (11,)``
        Observed melts, wt% in the order of `MELT_OXIDES` (`melt_from_analysis`);
        normalised here to ``100 - h2o - co2``.
    h2o, co2 : array_like, broadcastable to ``S``
        Volatiles of the observed melts, wt%.
    kd_model : KdModel, optional
        Default: constant K_D 0.30 (Roeder & Emslie 1970).
    target_fo : array_like, broadcastable to ``S``
        Fo of the mantle olivine the primary melt equilibrated with.
    kd_shift : array_like, broadcastable to ``S``
        Added to K_D (its uncertainty, in Monte Carlo draws).
    step : float
        Olivine increment per step, as a fraction of the current melt mass.
    max_olivine : float
        Largest olivine mass fraction of the primary melt accepted.
    mgo_min : float
        Smallest MgO (wt%) of an observed melt accepted.

    Returns
    -------
    PrimaryMelt
        Every array of shape ``S`` (``S + (11,)`` for compositions).
    """
    kd_model = KdModel() if kd_model is None else kd_model
    melt = np.asarray(melt, dtype=float)
    shape = np.broadcast_shapes(melt.shape[:-1], np.shape(h2o), np.shape(co2),
                                np.shape(target_fo), np.shape(kd_shift))
    h2o, co2, target, shift = (np.broadcast_to(np.asarray(a, float), shape).reshape(-1).copy()
                               for a in (h2o, co2, target_fo, kd_shift))
    if np.any((target <= 0.0) | (target >= 1.0)):
        raise InputError("target Fo must be between 0 and 1", key="target_fo")
    state = normalise_melt(np.broadcast_to(melt, shape + (11,)).reshape(-1, 11),
                           volatiles=h2o + co2)
    fo, kd = kd_model.equilibrium(state, h2o=h2o, kd_shift=shift)
    code, reason = _initial_refusals(state, fo, mgo_min=mgo_min, target=target,
                                     n=len(h2o))
    added, steps, olivine = _integrate(state, fo, kd, h2o=h2o, target=target,
                                       shift=shift, active=(code == "") & (fo < target),
                                       kd_model=kd_model, step=step,
                                       max_olivine=max_olivine, code=code, reason=reason)
    mass = 100.0 + added
    primary = state / mass[:, None] * 100.0
    fo, kd = kd_model.equilibrium(primary, h2o=h2o * 100.0 / mass, kd_shift=shift,
                                  fo_start=fo)
    with np.errstate(invalid="ignore", divide="ignore"):
        ol_wt = olivine / added[:, None] * 100.0
    bad = code != ""
    primary[bad] = np.nan
    frac = np.where(bad, np.nan, added / mass)
    return PrimaryMelt(
        melt=primary.reshape(shape + (11,)), h2o=(h2o * 100.0 / mass).reshape(shape),
        co2=(co2 * 100.0 / mass).reshape(shape), olivine_fraction=frac.reshape(shape),
        olivine=ol_wt.reshape(shape + (11,)), fo=fo.reshape(shape), kd=kd.reshape(shape),
        steps=steps.reshape(shape), refusal=code.reshape(shape),
        reason=reason.reshape(shape))


def _integrate(state, fo, kd, *, h2o, target, shift, active, kd_model, step,
               max_olivine, code, reason):
    """March the active rows of ``state`` (grams, modified in place) to the target Fo."""
    n = len(fo)
    added = np.zeros(n)
    steps = np.zeros(n, dtype=np.int64)
    olivine = np.zeros((n, len(MELT_OXIDES)))
    idx = np.flatnonzero(active)
    cap = max_olivine / (1.0 - max_olivine)        # olivine per unit observed melt
    while idx.size:
        mass = 100.0 + added[idx]
        grams = step * mass[:, None] * olivine_composition(fo[idx]) / 100.0
        new = state[idx] + grams
        fo_new, kd_new = kd_model.equilibrium(new, h2o=h2o[idx] * 100.0 / (mass + step * mass),
                                              kd_shift=shift[idx], fo_start=fo[idx],
                                              iterations=3)
        # cut the increment where Fo reaches the target (w = 1: whole increment)
        w = np.clip((target[idx] - fo[idx]) / (fo_new - fo[idx]), 0.0, 1.0)
        state[idx] += w[:, None] * grams
        olivine[idx] += w[:, None] * grams
        added[idx] += w * step * mass
        steps[idx] += 1
        fo[idx], kd[idx] = fo[idx] + w * (fo_new - fo[idx]), kd_new
        done = fo_new >= target[idx]
        over = ~done & (added[idx] > cap * 100.0)
        for i in idx[over]:
            code[i] = "not_converged"
            reason[i] = (f"more than {max_olivine:.0%} olivine would be needed to reach "
                         f"Fo {target[i]:.4f} (reached Fo {fo[i]:.4f})")
        idx = idx[~done & ~over]
    return added, steps, olivine
