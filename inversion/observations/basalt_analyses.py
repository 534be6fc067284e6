"""Kind ``basalt_analyses``: major-element analyses of basalts, turned into P-T in the fit.

Each row is one sample: ``sample`` (name), the oxides in wt% ``sio2``, ``tio2``,
``al2o3``, total iron as ``feot`` *or* as ``feo`` with ``fe2o3``, ``mgo``, ``cao``,
``na2o``, ``k2o``, optionally ``mno``, ``p2o5`` (0 where not given), ``h2o`` and ``co2``,
and optional 1-sigma columns ``sigma_<oxide>`` (wt%, each only with its oxide). A
block-level ``relative_error`` (a fraction, e.g. 0.01) is added in quadrature to every
oxide's sigma. Iron given as FeO and Fe2O3 is summed to FeOt = FeO + 0.8998 Fe2O3; the
melt's Fe3+/ΣFe is always the stated ``fe3_fraction`` (an analysed rock's FeO/Fe2O3 is
not the melt's: alteration oxidises it; common practice).

Table rules (each an `InputError` naming file, line and column): oxides >= 0 wt%; the
total -- every oxide column as given (iron as given) plus ``h2o`` and ``co2`` -- within
97-101.5 wt% (common practice); ``sigma_*`` > 0.

Block keys (docs/model.md, "Basalt chemistry inside the posterior"):

``equilibration``, ``path_points``, ``model_error``, ``temperature_model_error``
    As for ``melting_pressure`` (the likelihood is its likelihood).
``thermobarometer``
    Required, a key of `METHODS` (``lee2009``, ``putirka2008_eq13`` ...).
``fe3_fraction``
    Required, Fe3+/ΣFe of the analysed melts: a number or a prior within [0, 0.5].
``olivine_fo``
    Fo of the mantle olivine the primary melts last equilibrated with: a number or a
    prior within [0.85, 0.95]; default 0.90.
``kd_model``
    ``"roeder_emslie_1970"`` (constant 0.30, default) or ``"toplis_2005"``.

At load, olivine is added to every sample (`petrology.olivine.add_olivine`) and the
thermobarometer applied, on a grid over the prior supports of the sampled choices
(`petrology.grid`); the analytical errors are propagated by linearisation and the
method's calibration errors added. A sample that olivine addition cannot serve anywhere
in that range is refused with one line naming it and the reason. In the fit, each
walker's (P, T) and covariance are interpolated at its Fo and Fe3+/ΣFe, and the row's
likelihood is the ``melting_pressure`` bivariate normal with those as data.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping

import numpy as np

from ..errors import InputError, suggest
from ..petrology.grid import build_pt_grid, nodes
from ..petrology.olivine import KdModel
from ..petrology.oxides import FEO_PER_FE2O3
from ..petrology.propagation import Uncertainties
from ..petrology.thermobarometers import METHODS
from ..study.priors import Prior, prior_from_spec
from .base import _frozen, describe_errors
from .pressure import MeltingPressure
from .tables import ColumnRule

__all__ = ["CORRECTION_RANGE", "KD_MODELS", "OXIDE_COLUMNS", "PRIMARY_COLUMNS",
           "TOTAL_RANGE", "BasaltAnalyses", "primary_melt_table"]

#: Table column of each oxide of `petrology.oxides.ANALYSIS_OXIDES` (iron: ``feot``).
OXIDE_COLUMNS = ("sio2", "tio2", "al2o3", "feot", "mno", "mgo", "cao", "na2o", "k2o",
                 "p2o5")
_REQUIRED_OXIDES = ("sio2", "tio2", "al2o3", "mgo", "cao", "na2o", "k2o")
_OPTIONAL = ("mno", "p2o5", "h2o", "co2")
#: Accepted analysis total, wt% (common practice), of the oxides and volatiles as given.
TOTAL_RANGE = (97.0, 101.5)
#: Physical range of each sampled correction choice (prior supports must lie inside).
CORRECTION_RANGE = {"olivine_fo": (0.85, 0.95), "fe3_fraction": (0.0, 0.5)}
#: K_D models and their descriptions.
KD_MODELS = {"roeder_emslie_1970": "constant K_D 0.30 (Roeder & Emslie 1970)",
             "toplis_2005": "composition-dependent K_D (Toplis 2005)"}
#: Nodes per sampled correction of the fine (P, T) grid.
GRID_NODES = 9
_CHEMISTRY_KEYS = ("thermobarometer", "olivine_fo", "fe3_fraction", "kd_model",
                   "relative_error")


class BasaltAnalyses(MeltingPressure):
    """Basalt analyses: primary melts and thermobarometry inside the likelihood.

    Parameters
    ----------
    data : pandas.DataFrame
        Validated table (see the module docstring for its columns).
    equilibration : {"top", "pooled", "path"}
        Where the melts last equilibrated (as for ``melting_pressure``).
    thermobarometer : str
        A key of `METHODS`.
    fe3_fraction : float or Prior
        Fe3+/ΣFe of the analysed melts (a `Prior`: sampled), within [0, 0.5].
    olivine_fo : float or Prior
        Target Fo (a `Prior`: sampled), within [0.85, 0.95]; default 0.90.
    kd_model : str
        A key of `KD_MODELS`.
    relative_error : float
        Relative 1-sigma of every oxide (fraction), added to ``sigma_*`` in quadrature.
    file, model_error, lines, path_points, temperature_model_error
        As for `MeltingPressure`.
    """

    kind = "basalt_analyses"
    quantity = "melting pressure from basalt chemistry"
    option_keys = MeltingPressure.option_keys + _CHEMISTRY_KEYS
    parameter_options = MeltingPressure.error_options + ("olivine_fo", "fe3_fraction")
    example_options = {"equilibration": "path", "thermobarometer": "lee2009",
                       "fe3_fraction": 0.12}
    option_units = {"olivine_fo": "-", "fe3_fraction": "-"}

    @classmethod
    def example_table(cls, rows: int):
        """A high-MgO basalt (invented, MORB-like) repeated with small shifts in MgO."""
        import pandas as pd  # noqa: PLC0415

        base = {"sio2": 48.5, "tio2": 1.0, "al2o3": 16.0, "feot": 9.5, "mno": 0.17,
                "mgo": 10.5, "cao": 11.8, "na2o": 2.3, "k2o": 0.1, "p2o5": 0.1}
        return pd.DataFrame({"sample": [f"r{k}" for k in range(rows)],
                             **{key: [value + (0.1 * k if key == "mgo" else 0.0)
                                      for k in range(rows)] for key, value in base.items()}})

    def __init__(self, data, *, equilibration: str, thermobarometer: str,
                 fe3_fraction: float | Prior, olivine_fo: float | Prior = 0.90,
                 kd_model: str = "roeder_emslie_1970", relative_error: float = 0.0,
                 file=None, model_error=0.0, lines=None, path_points: int = 64,
                 temperature_model_error: float | Prior = 0.0) -> None:
        chem = _parse_chemistry({"thermobarometer": thermobarometer,
                                 "fe3_fraction": fe3_fraction, "olivine_fo": olivine_fo,
                                 "kd_model": kd_model, "relative_error": relative_error},
                                "observations")
        self.thermobarometer = chem["thermobarometer"]
        self.fe3_fraction = chem["fe3_fraction"]
        self.olivine_fo = chem["olivine_fo"]
        self.kd_model = chem["kd_model"]
        self.relative_error = chem["relative_error"]
        lines = tuple(range(2, 2 + len(data))) if lines is None else tuple(lines)
        analysis, h2o, co2, sigma = _analyses(data, file, lines)
        self.analysis = _frozen(analysis)
        self._grid = build_pt_grid(
            analysis, fo_nodes=_nodes(self.olivine_fo), fe3_nodes=_nodes(self.fe3_fraction),
            h2o=h2o, co2=co2, kd_model=KdModel(self.kd_model), method=self.thermobarometer,
            uncertainties=Uncertainties(oxide_sigma=sigma,
                                        relative_sigma=self.relative_error))
        _refuse(self._grid, data, file, lines)
        self._shift = np.zeros((len(data), 2))  # simulated data: offsets of P and T
        super().__init__(self._derived(data), equilibration=equilibration, file=file,
                         model_error=model_error, lines=lines, path_points=path_points,
                         temperature_model_error=temperature_model_error)

    # ---- construction ------------------------------------------------------------------

    @classmethod
    def column_rules(cls, **options):
        def oxide(name):
            return ColumnRule(name, low=0.0, unit="wt%", why="an oxide cannot be negative")

        def sigma(name):
            return ColumnRule(f"sigma_{name}", low=0.0, low_open=True, unit="wt%",
                              requires=(name,), why="a 1-sigma uncertainty must be positive")

        required = [ColumnRule("sample", numeric=False)] + [
            oxide(name) for name in _REQUIRED_OXIDES]
        optional = [[oxide(name)] for name in ("feot", "feo", "fe2o3", *_OPTIONAL)]
        optional += [[sigma(name)] for name in (*_REQUIRED_OXIDES, "feot", "feo", "fe2o3",
                                                "mno", "p2o5")]
        return required, optional

    @classmethod
    def _parse_options(cls, spec: Mapping, where: str) -> dict:
        options = MeltingPressure._parse_options(spec, where)
        return options | _parse_chemistry(spec, where)

    def _options(self) -> dict:
        return super()._options() | {
            "thermobarometer": self.thermobarometer, "fe3_fraction": self.fe3_fraction,
            "olivine_fo": self.olivine_fo, "kd_model": self.kd_model,
            "relative_error": self.relative_error}

    def _reference(self) -> tuple[float, float]:
        """Fo and Fe3+/ΣFe of the stored P-T columns: fixed values or prior medians."""
        return tuple(float(s.ppf(0.5)) if isinstance(s, Prior) else float(s)
                     for s in (self.olivine_fo, self.fe3_fraction))

    def _derived(self, data):
        """`data` with the P-T columns of ``melting_pressure`` at the reference choices."""
        p, t, var_p, cov, var_t = (a[0] for a in self._grid.at(*self._reference()))
        out = data.copy()
        out["pressure_gpa"] = p + self._shift[:, 0]
        out["pressure_sigma_gpa"] = np.sqrt(var_p)
        out["temperature_c"] = t + self._shift[:, 1]
        out["temperature_sigma_c"] = np.sqrt(var_t)
        out["pt_correlation"] = cov / np.sqrt(var_p * var_t)
        return out

    # ---- the likelihood's data -----------------------------------------------------------

    @property
    def corrections_free(self) -> bool:
        """Whether Fo or Fe3+/ΣFe is sampled."""
        return isinstance(self.olivine_fo, Prior) or isinstance(self.fe3_fraction, Prior)

    def _choices(self, errors: Mapping | None) -> tuple[np.ndarray, np.ndarray]:
        values = []
        for option in ("olivine_fo", "fe3_fraction"):
            setting = getattr(self, option)
            if not isinstance(setting, Prior):
                values.append(np.atleast_1d(float(setting)))
            elif errors is None or option not in errors:
                raise ValueError(f"{option} is free ({setting.describe()}); pass its value"
                                 f" in errors={{'{option}': ...}}")
            else:
                values.append(np.atleast_1d(np.asarray(errors[option], float)))
        return values[0], values[1]

    def _observed_rows(self, errors: Mapping | None):
        """P, T, total sigmas and correlation at each vector's Fo and Fe3+/ΣFe.

        Shapes (n, rows) when the corrections are sampled; else the stored columns.
        """
        if not self.corrections_free:
            return super()._observed_rows(errors)
        p, t, var_p, cov, var_t = self._grid.at(*self._choices(errors))
        s_p = np.sqrt(var_p + np.square(self._error(errors, "model_error")))
        s_t = np.sqrt(var_t + np.square(self._error(errors, "temperature_model_error")))
        return (p + self._shift[:, 0], t + self._shift[:, 1], s_p, s_t,
                cov / (s_p * s_t))

    def _error(self, errors: Mapping | None, option: str) -> np.ndarray | float:
        setting = getattr(self, option)
        if not isinstance(setting, Prior):
            return setting
        if errors is None or option not in errors:
            raise ValueError(f"{option} is free ({setting.describe()}); pass its value in "
                             f"errors={{'{option}': ...}}")
        return np.atleast_1d(np.asarray(errors[option], float))[:, None]

    def observed(self, errors: Mapping | None = None) -> dict[str, np.ndarray]:
        """Derived P-T for plotting, at the given (scalar) corrections when sampled."""
        if not self.corrections_free or errors is None or \
                not all(option in errors for option in self.free_options):
            return super().observed(errors)
        p, t, s_p, s_t, _ = (a[0] for a in self._observed_rows(errors))
        return {"value": p, "sigma": s_p, "temperature": t, "temperature_sigma": s_t}

    def pt_observed(self, errors: Mapping | None = None) -> dict[str, np.ndarray]:
        """Derived P-T, total sigmas and their correlation at the given corrections."""
        if not self.corrections_free or errors is None or \
                not all(option in errors for option in self.free_options):
            return super().pt_observed(errors)
        p, t, s_p, s_t, rho = (np.asarray(a, float)[0] for a in self._observed_rows(errors))
        return {"pressure": p, "pressure_sigma": s_p, "temperature": t,
                "temperature_sigma": s_t, "correlation": rho}

    def _replicate(self, new: dict[str, np.ndarray], errors: Mapping | None):
        """A copy whose derived P-T at the given corrections equals the draws `new`."""
        p, t, *_ = self._observed_rows(errors)
        out = copy.copy(self)
        out._shift = self._shift + np.stack(
            [new["pressure_gpa"] - np.reshape(p, -1), new["temperature_c"] - np.reshape(t, -1)],
            axis=-1)
        out.data = out._derived(self.data)
        out._values = _frozen(out.data["pressure_gpa"])
        out._temperature = _frozen(out.data["temperature_c"])
        return out

    # ---- reporting ---------------------------------------------------------------------

    def describe(self) -> str:
        where = {"top": "at the top of melting", "pooled": "at the mean melting pressure",
                 "path": "anywhere along the melting path, weighted by melt production"}

        def setting(name, value):
            if isinstance(value, Prior):
                return f"{name} free, {value.describe()}"
            return f"{name} {value:g}"

        extra = describe_errors(self, {"model_error": "GPa",
                                       "temperature_model_error": "degC"})
        return (f"{len(self)} basalt analyses from {self.name} ({self.thermobarometer}; "
                f"olivine added to {setting('Fo', self.olivine_fo)}; "
                f"{setting('Fe3+/ΣFe', self.fe3_fraction)}; {self.kd_model}), "
                f"equilibrated {where[self.equilibration]}{extra}")


# ---- helpers ---------------------------------------------------------------------------

def _nodes(setting: float | Prior) -> np.ndarray:
    if not isinstance(setting, Prior):
        return np.array([float(setting)])
    low, high = setting.bounds
    return nodes(low, high, GRID_NODES)


def _parse_chemistry(spec: Mapping, where: str) -> dict:
    """Check the chemistry keys of a block; return them as constructor options."""
    method = spec.get("thermobarometer")
    choices = ", ".join(f'"{k}"' for k in METHODS)
    if method is None:
        raise InputError(f"missing 'thermobarometer'; choose one of {choices}",
                         key=f"{where}.thermobarometer")
    if not isinstance(method, str) or method not in METHODS:
        raise InputError(f"unknown thermobarometer {method!r}"
                         + suggest(str(method), tuple(METHODS), list_choices=False)
                         + f"; choose one of {choices}", key=f"{where}.thermobarometer")
    if "fe3_fraction" not in spec:
        raise InputError("missing 'fe3_fraction' (Fe3+/ΣFe of the analysed melts, e.g. "
                         "0.12, or a prior such as { prior = \"uniform\", min = 0.08, "
                         "max = 0.18 }); it moves the pressures strongly, so there is no "
                         "default", key=f"{where}.fe3_fraction")
    out = {"thermobarometer": method,
           "fe3_fraction": _choice(spec["fe3_fraction"], "fe3_fraction", where),
           "olivine_fo": _choice(spec.get("olivine_fo", 0.90), "olivine_fo", where)}
    kd = spec.get("kd_model", "roeder_emslie_1970")
    if not isinstance(kd, str) or kd not in KD_MODELS:
        raise InputError(f"unknown K_D model {kd!r}; choose "
                         + ", ".join(f'"{k}" ({v})' for k, v in KD_MODELS.items()),
                         key=f"{where}.kd_model")
    rel = spec.get("relative_error", 0.0)
    if isinstance(rel, bool) or not isinstance(rel, int | float) or \
            not math.isfinite(rel) or not 0.0 <= rel < 1.0:
        raise InputError(f"{rel!r} must be a fraction from 0 to below 1 (e.g. 0.01 for 1 %)",
                         key=f"{where}.relative_error")
    return out | {"kd_model": kd, "relative_error": float(rel)}


def _choice(value, name: str, where: str) -> float | Prior:
    """A correction choice: a number or a prior inside `CORRECTION_RANGE`."""
    key = f"{where}.{name}"
    low, high = CORRECTION_RANGE[name]
    if isinstance(value, Prior):
        p_low, p_high = value.bounds
        if not (low <= p_low and p_high <= high):
            raise InputError(f"prior {value.describe()} must lie within [{low:g}, {high:g}]",
                             key=key)
        return value
    if isinstance(value, bool) or not isinstance(value, int | float | Mapping):
        raise InputError(f"{value!r} must be a number or a prior table", key=key)
    spec = dict(value) if isinstance(value, Mapping) else {"value": value}
    return prior_from_spec(name, spec, where=key, domain=(low, high))


def _analyses(data, file, lines):
    """Analysis array (n, 10), H2O, CO2 and oxide sigmas (n, 10); totals checked."""
    columns = data.columns
    has_feot, has_split = "feot" in columns, "feo" in columns or "fe2o3" in columns
    if has_feot == has_split or ("feo" in columns) != ("fe2o3" in columns):
        raise InputError("give total iron either as 'feot' or as both 'feo' and 'fe2o3' "
                         "(wt%)", file=file, column="feot")
    n = len(data)

    def col(name):
        return np.asarray(data[name], float) if name in columns else np.zeros(n)

    def sig(name):
        return col(f"sigma_{name}")

    values = {name: col(name) for name in OXIDE_COLUMNS if name != "feot"}
    if has_feot:
        values["feot"], feot_sigma = col("feot"), sig("feot")
    else:
        values["feot"] = col("feo") + FEO_PER_FE2O3 * col("fe2o3")
        feot_sigma = np.hypot(sig("feo"), FEO_PER_FE2O3 * sig("fe2o3"))
    analysis = np.stack([values[name] for name in OXIDE_COLUMNS], axis=-1)
    sigma = np.stack([feot_sigma if name == "feot" else sig(name)
                      for name in OXIDE_COLUMNS], axis=-1)
    given = [c for c in (*OXIDE_COLUMNS, "feo", "fe2o3", "h2o", "co2") if c in columns]
    total = np.sum([col(c) for c in given], axis=0)
    low, high = TOTAL_RANGE
    for i in np.flatnonzero((total < low) | (total > high)):
        raise InputError(f"total {total[i]:.2f} wt% (the oxide columns as given, iron as "
                         f"given, plus h2o and co2) is outside {low:g}-{high:g} wt%; check "
                         "the analysis and its units", file=file, row=lines[i])
    for i in np.flatnonzero(values["mgo"] <= 0.0):
        raise InputError("MgO must be > 0 wt% for olivine addition", file=file,
                         row=lines[i], column="mgo")
    return analysis, col("h2o"), col("co2"), sigma


def _refuse(grid, data, file, lines) -> None:
    """One line for the first sample olivine addition cannot serve (an InputError)."""
    found = grid.first_refusal()
    if found is None:
        return
    i, why, fo, fe3 = found
    sample = data["sample"].iloc[i]
    raise InputError(f"sample '{sample}' refused at Fo {fo:.3f}, Fe3+/ΣFe {fe3:.3f}: {why};"
                     " olivine addition alone cannot give its primary melt there (remove "
                     "the row, or narrow olivine_fo / fe3_fraction)", file=file,
                     row=lines[i])


# ---- looking at analyses before a fit ----------------------------------------------------

#: Columns of `primary_melt_table`, in order (P-T columns named as in ``melting_pressure``).
PRIMARY_COLUMNS = ("sample", "olivine_fo", "fe3_fraction", "olivine_fraction", "sio2",
                   "tio2", "al2o3", "feo", "fe2o3", "mno", "mgo", "cao", "na2o", "k2o",
                   "p2o5", "h2o", "co2", "pressure_gpa", "pressure_sigma_gpa", "temperature_c",
                   "temperature_sigma_c", "pt_correlation", "flag", "refused")


def primary_melt_table(path, *, thermobarometer: str, fe3_fraction: float,
                       olivine_fo: float = 0.90, kd_model: str = "roeder_emslie_1970",
                       relative_error: float = 0.0):
    """Primary melts and P-T of every sample of a ``basalt_analyses`` table, no refusals.

    The same chain as the kind at fixed corrections: olivine added to `olivine_fo`
    (`add_olivine`), the thermobarometer applied, analytical errors propagated by
    linearisation, calibration errors added. Refused samples keep their row with empty
    results and the one-line reason in ``refused``; ``flag`` says where P-T lies outside
    the method's calibration range.

    Parameters
    ----------
    path : path-like
        The table (rules of `BasaltAnalyses`; a broken rule raises `InputError`).
    thermobarometer, fe3_fraction, olivine_fo, kd_model, relative_error
        As the block keys of the kind (numbers only).

    Returns
    -------
    pandas.DataFrame
        Columns `PRIMARY_COLUMNS`; compositions in wt% of the primary melt.
    """
    import pandas as pd

    from ..petrology.olivine import add_olivine
    from ..petrology.oxides import melt_from_analysis
    from ..petrology.propagation import estimate_linearised
    from .tables import read_table

    chem = _parse_chemistry({"thermobarometer": thermobarometer, "fe3_fraction": fe3_fraction,
                             "olivine_fo": olivine_fo, "kd_model": kd_model,
                             "relative_error": relative_error}, "observations")
    required, optional = BasaltAnalyses.column_rules()
    table = read_table(path, required, optional=optional)
    analysis, h2o, co2, sigma = _analyses(table.data, path, table.lines)
    fe3, fo, kd = chem["fe3_fraction"], chem["olivine_fo"], KdModel(chem["kd_model"])
    melt = melt_from_analysis(analysis, fe3_fraction=fe3, h2o=h2o, co2=co2)
    primary = add_olivine(melt, h2o=h2o, co2=co2, kd_model=kd, target_fo=fo)
    with np.errstate(invalid="ignore"):
        est = estimate_linearised(analysis, h2o=h2o, fe3_fraction=fe3, target_fo=fo,
                                  kd_model=kd, method=chem["thermobarometer"],
                                  uncertainties=Uncertainties(
                                      oxide_sigma=sigma,
                                      relative_sigma=chem["relative_error"]),
                                  co2=co2[:, None])
    out = pd.DataFrame({"sample": table.data["sample"], "olivine_fo": fo,
                        "fe3_fraction": fe3, "olivine_fraction": primary.olivine_fraction})
    for k, name in enumerate(PRIMARY_COLUMNS[4:15]):
        out[name] = primary.melt[:, k]
    out["h2o"], out["co2"] = primary.h2o, primary.co2
    out["pressure_gpa"], out["pressure_sigma_gpa"] = est.pressure_gpa, est.sigma_p_gpa
    out["temperature_c"], out["temperature_sigma_c"] = est.temperature_c, est.sigma_t_c
    out["pt_correlation"] = est.correlation
    method = METHODS[chem["thermobarometer"]]
    with np.errstate(invalid="ignore"):
        outside = method.outside_calibration(est.pressure_gpa, est.temperature_c)
    refused = [str(r) or ("" if np.isfinite(p) else "the thermobarometer gives no value")
               for r, p in zip(primary.reason, est.pressure_gpa, strict=True)]
    out["flag"] = ["outside calibration range" if o and not r else ""
                   for o, r in zip(outside, refused, strict=True)]
    out["refused"] = refused
    bad = np.array([bool(r) for r in refused])
    out.loc[bad, list(PRIMARY_COLUMNS[3:22])] = np.nan
    return out
