"""Major-element compositions of basaltic melts: molar masses, iron, totals, normalisation.

Two layouts of the oxide axis (always the last axis of an array, in wt%):

- ``ANALYSIS_OXIDES`` -- what a laboratory reports: the ten major oxides with total iron
  as FeO (``FeOt``).
- ``MELT_OXIDES`` -- what the calculations carry: the same with iron split into FeO and
  Fe2O3 from a stated Fe3+/ΣFe, so that 11 columns.

Volatiles (H2O, CO2) are never in these arrays; they travel beside them as wt% of the
whole (hydrous) melt.

Normalisation rule (docs/model.md, "Basalt chemistry"): the anhydrous oxides of an
analysis are scaled so that they sum to ``100 - H2O - CO2``; the volatiles keep their
stated wt%. A dry melt therefore sums to 100 wt%. The total that the table reader checks
(97-101.5 wt% is common practice) is `analysis_total`: the ten oxides plus the stated
volatiles, before normalisation.

Molar masses follow the IUPAC standard atomic weights (conventional values, IUPAC 2021;
common practice), summed for each oxide.

Examples
--------
>>> import numpy as np
>>> round(FEO_PER_FE2O3, 4)             # FeOt = FeO + 0.8998 Fe2O3
0.8998
>>> feo, fe2o3 = split_iron(np.array(10.0), fe3_fraction=0.2)
>>> float(feo), round(float(fe2o3), 4)
(8.0, 2.2227)
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError

__all__ = [
    "ANALYSIS_OXIDES", "ATOMIC_WEIGHT", "CATIONS", "FEO_PER_FE2O3", "MELT_OXIDES",
    "MOLAR_MASS", "OXYGENS", "analysis_total", "as_analysis", "cation_fractions",
    "feo_total", "melt_from_analysis", "mole_fractions", "normalise_melt", "split_iron",
]

#: Standard atomic weights, g/mol (IUPAC 2021 conventional values; common practice).
ATOMIC_WEIGHT = {
    "H": 1.008, "C": 12.011, "O": 15.999, "Na": 22.98976928, "Mg": 24.305,
    "Al": 26.9815384, "Si": 28.085, "P": 30.973761998, "K": 39.0983, "Ca": 40.078,
    "Ti": 47.867, "Mn": 54.938043, "Fe": 55.845,
}

#: The ten reported major oxides, total iron as FeO.
ANALYSIS_OXIDES = ("SiO2", "TiO2", "Al2O3", "FeOt", "MnO", "MgO", "CaO", "Na2O", "K2O",
                   "P2O5")
#: The eleven oxides the calculations carry (iron split by valence).
MELT_OXIDES = ("SiO2", "TiO2", "Al2O3", "FeO", "Fe2O3", "MnO", "MgO", "CaO", "Na2O",
               "K2O", "P2O5")

# (cation, cations per formula unit, oxygens per formula unit) of each oxide
_FORMULA = {
    "SiO2": ("Si", 1, 2), "TiO2": ("Ti", 1, 2), "Al2O3": ("Al", 2, 3),
    "FeO": ("Fe", 1, 1), "FeOt": ("Fe", 1, 1), "Fe2O3": ("Fe", 2, 3),
    "MnO": ("Mn", 1, 1), "MgO": ("Mg", 1, 1), "CaO": ("Ca", 1, 1), "Na2O": ("Na", 2, 1),
    "K2O": ("K", 2, 1), "P2O5": ("P", 2, 5), "H2O": ("H", 2, 1), "CO2": ("C", 1, 2),
}
#: Molar mass of each oxide, g/mol, from `ATOMIC_WEIGHT`.
MOLAR_MASS = {ox: n * ATOMIC_WEIGHT[el] + o * ATOMIC_WEIGHT["O"]
              for ox, (el, n, o) in _FORMULA.items()}
#: Cations per formula unit of each oxide.
CATIONS = {ox: n for ox, (_, n, _) in _FORMULA.items()}
#: Oxygens per formula unit of each oxide.
OXYGENS = {ox: o for ox, (_, _, o) in _FORMULA.items()}

#: Mass of FeO per unit mass of Fe2O3 holding the same iron: 2 M(FeO) / M(Fe2O3).
FEO_PER_FE2O3 = 2.0 * MOLAR_MASS["FeO"] / MOLAR_MASS["Fe2O3"]

_MELT_MASS = np.array([MOLAR_MASS[ox] for ox in MELT_OXIDES])
_MELT_CATIONS = np.array([CATIONS[ox] for ox in MELT_OXIDES], dtype=float)
IDX = {ox: i for i, ox in enumerate(MELT_OXIDES)}


def as_analysis(columns: dict[str, ArrayLike]) -> NDArray[np.float64]:
    """Stack named oxide columns into an analysis array.

    Parameters
    ----------
    columns : dict
        wt% per oxide named as in `ANALYSIS_OXIDES`; an oxide left out is taken as 0
        (e.g. P2O5 not analysed). Values broadcast to one shape ``S``.

    Returns
    -------
    ndarray, shape ``S + (10,)``
        wt%, oxide axis last.

    Raises
    ------
    InputError
        For an unknown oxide name, a missing SiO2, MgO or FeOt, or a negative or
        non-finite value.

    Examples
    --------
    >>> as_analysis({"SiO2": 50.0, "MgO": 9.0, "FeOt": 9.0}).shape
    (10,)
    """
    unknown = sorted(set(columns) - set(ANALYSIS_OXIDES))
    if unknown:
        raise InputError(f"unknown oxide {unknown[0]!r}; expected one of "
                         f"{', '.join(ANALYSIS_OXIDES)}", column=unknown[0])
    for need in ("SiO2", "MgO", "FeOt"):
        if need not in columns:
            raise InputError(f"{need} is required for olivine addition and "
                             "thermobarometry", column=need)
    arrays = np.broadcast_arrays(*[np.asarray(columns.get(ox, 0.0), dtype=float)
                                   for ox in ANALYSIS_OXIDES])
    out = np.stack(arrays, axis=-1)
    _check_oxides(out, ANALYSIS_OXIDES)
    return out


def _check_oxides(values: NDArray[np.float64], names: tuple[str, ...]) -> None:
    bad = ~np.isfinite(values) | (values < 0.0)
    if bad.any():
        column = names[int(np.argwhere(bad)[0][-1])]
        raise InputError("oxide wt% must be finite and >= 0", column=column)


def analysis_total(analysis: ArrayLike, *, h2o: ArrayLike = 0.0,
                   co2: ArrayLike = 0.0) -> NDArray[np.float64]:
    """Total of an analysis as reported: the ten oxides (iron as FeOt) plus volatiles.

    This is the total the table reader compares with its accepted range (97-101.5 wt%,
    common practice).

    Parameters
    ----------
    analysis : array_like, shape ``S + (10,)``
        wt% in the order of `ANALYSIS_OXIDES`.
    h2o, co2 : array_like, broadcastable to ``S``
        Stated volatiles, wt%.

    Returns
    -------
    ndarray, shape ``S``
        wt%.

    Examples
    --------
    >>> float(analysis_total([50, 1, 15, 9, 0.2, 9, 11, 2.5, 0.2, 0.1], h2o=0.3))
    98.3
    """
    return np.sum(np.asarray(analysis, dtype=float), axis=-1) + h2o + co2


def split_iron(feot: ArrayLike, *, fe3_fraction: ArrayLike
               ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Split total iron (as FeO) into FeO and Fe2O3 by the molar ratio Fe3+/ΣFe.

    FeO = FeOt (1 - r) and Fe2O3 = FeOt r / 0.8998, with r = Fe3+/ΣFe, so that
    FeOt = FeO + 0.8998 Fe2O3 (stoichiometry; common practice).

    Parameters
    ----------
    feot : array_like
        Total iron as FeO, wt%.
    fe3_fraction : array_like
        Fe3+/ΣFe, molar, in [0, 1).

    Returns
    -------
    feo, fe2o3 : ndarray
        wt%, broadcast shape of the inputs.
    """
    r = np.asarray(fe3_fraction, dtype=float)
    if np.any(~np.isfinite(r) | (r < 0.0) | (r >= 1.0)):
        raise InputError("Fe3+/ΣFe must be in [0, 1)", column="fe3_fraction")
    feot = np.asarray(feot, dtype=float)
    return feot * (1.0 - r), feot * r / FEO_PER_FE2O3


def feo_total(melt: ArrayLike) -> NDArray[np.float64]:
    """Total iron as FeO of a melt array: FeOt = FeO + 0.8998 Fe2O3.

    Parameters
    ----------
    melt : array_like, shape ``S + (11,)``
        wt% in the order of `MELT_OXIDES`.

    Returns
    -------
    ndarray, shape ``S``
        wt%.
    """
    melt = np.asarray(melt, dtype=float)
    return melt[..., IDX["FeO"]] + FEO_PER_FE2O3 * melt[..., IDX["Fe2O3"]]


def normalise_melt(melt: ArrayLike, *, volatiles: ArrayLike = 0.0) -> NDArray[np.float64]:
    """Scale the 11 oxides so that they sum to ``100 - volatiles`` wt%.

    Parameters
    ----------
    melt : array_like, shape ``S + (11,)``
        wt%, any total.
    volatiles : array_like, broadcastable to ``S``
        H2O + CO2 of the whole melt, wt%, in [0, 100).

    Returns
    -------
    ndarray, shape ``S + (11,)``
        wt% of the whole (hydrous) melt.
    """
    melt = np.asarray(melt, dtype=float)
    target = 100.0 - np.asarray(volatiles, dtype=float)
    return melt * (target / melt.sum(axis=-1))[..., None]


def melt_from_analysis(analysis: ArrayLike, *, fe3_fraction: ArrayLike,
                       h2o: ArrayLike = 0.0, co2: ArrayLike = 0.0) -> NDArray[np.float64]:
    """Split iron and normalise an analysis (the rule in the module docstring).

    Parameters
    ----------
    analysis : array_like, shape ``S + (10,)``
        wt% in the order of `ANALYSIS_OXIDES`.
    fe3_fraction : array_like, broadcastable to ``S``
        Fe3+/ΣFe of the analysed melt, molar.
    h2o, co2 : array_like, broadcastable to ``S``
        Volatiles, wt% of the whole melt.

    Returns
    -------
    ndarray, shape ``S + (11,)``
        wt% in the order of `MELT_OXIDES`, summing to ``100 - h2o - co2``.

    Examples
    --------
    >>> melt = melt_from_analysis([50, 1, 15, 9, 0.2, 9, 11, 2.5, 0.2, 0.1],
    ...                           fe3_fraction=0.1, h2o=0.5)
    >>> round(float(melt.sum()), 6)
    99.5
    """
    analysis = np.asarray(analysis, dtype=float)
    _check_oxides(analysis, ANALYSIS_OXIDES)
    feo, fe2o3 = split_iron(analysis[..., 3], fe3_fraction=fe3_fraction)
    shape = np.broadcast_shapes(analysis.shape[:-1], np.shape(feo))
    analysis = np.broadcast_to(analysis, shape + (10,))
    melt = np.concatenate([analysis[..., :3], np.broadcast_to(feo, shape)[..., None],
                           np.broadcast_to(fe2o3, shape)[..., None], analysis[..., 4:]],
                          axis=-1)
    return normalise_melt(melt, volatiles=np.asarray(h2o) + np.asarray(co2))


def mole_fractions(melt: ArrayLike) -> NDArray[np.float64]:
    """Anhydrous mole fractions of the oxides of a melt, formula units as written.

    Parameters
    ----------
    melt : array_like, shape ``S + (11,)``
        wt% in the order of `MELT_OXIDES`.

    Returns
    -------
    ndarray, shape ``S + (11,)``
        Mole fractions of the oxides as written (Al2O3 counts once), summing to 1.
    """
    moles = np.asarray(melt, dtype=float) / _MELT_MASS
    return moles / moles.sum(axis=-1, keepdims=True)


def cation_fractions(melt: ArrayLike) -> NDArray[np.float64]:
    """Anhydrous cation fractions of a melt, one column per oxide of `MELT_OXIDES`.

    Parameters
    ----------
    melt : array_like, shape ``S + (11,)``
        wt% in the order of `MELT_OXIDES`.

    Returns
    -------
    ndarray, shape ``S + (11,)``
        Fraction of all cations carried by each oxide (FeO: Fe2+, Fe2O3: Fe3+); sums to 1.
    """
    cations = np.asarray(melt, dtype=float) / _MELT_MASS * _MELT_CATIONS
    return cations / cations.sum(axis=-1, keepdims=True)
