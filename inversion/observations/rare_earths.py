"""Kind ``rare_earths``: chondrite-normalised rare-earth ratios of basalts.

Table columns: ``sample`` (name), ``la_yb_cn`` (La/Yb of the chondrite-normalised
concentrations, Sun & McDonough 1989 CI chondrite; > 0) and its 1-sigma
``la_yb_sigma_cn`` (> 0, same units); optional pairs ``sm_yb_cn``/``sm_yb_sigma_cn`` and
``dy_yb_cn``/``dy_yb_sigma_cn``; remarks in columns starting with ``note``. The unit token
``cn`` marks a chondrite-normalised ratio (dimensionless), so the names follow the
``<quantity>_<unit>`` / ``<quantity>_sigma_<unit>`` scheme of every table.

Each ratio is compared with that of the melt pooled from the study's melting region
(``melting_region``: column or triangle), accumulated fractional melt with no
re-equilibration (`forward.trace.fast_trace_elements`; docs/model.md, "Rare-earth
elements along the melting path" and "Likelihoods"). Ratios are positive and their
errors mostly relative, so the likelihood is log-normal:

    log L = sum_rows sum_ratios [log N(ln obs; ln model, s^2) - ln obs],
    s^2 = (sigma / obs)^2 + model_error^2

with ``model_error`` a relative (log-unit) error of the model ratios (0.1: 10 %), fixed
or free. Block options: ``source`` (a packaged source composition, default
"workman_hart_2005", Workman & Hart 2005 DMM, or a table of the ten elements in ppm) and
``transition`` ([p_lo, p_hi] GPa,
default [2.5, 3.0]: garnet-in near 2.8 GPa, Robinson & Wood 1998; Klemme & O'Neill 2000).
Rows also get the no-melt penalty of `inversion.observations.base` (an analysed basalt
records melt).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ...forward.trace import DEFAULT_TRANSITION, ELEMENTS, SOURCES, fast_trace_elements
from ..errors import InputError, suggest
from .base import (
    NO_MELT_SLOPE,
    ObservationSet,
    Panel,
    PatternPanel,
    describe_errors,
    gaussian_logpdf,
    melting_distance,
    require_single,
)
from .model_error import combine_sigma
from .tables import ColumnRule

__all__ = ["RATIOS", "RareEarthRatios", "parse_source", "parse_transition"]

#: Ratio key -> (numerator, denominator); the first is required in every table.
RATIOS = {"la_yb": ("La", "Yb"), "sm_yb": ("Sm", "Yb"), "dy_yb": ("Dy", "Yb")}
_HIGH = 1000.0  # largest ratio a table may hold: basalts span about 0.3-100 (common practice)


def _rules(key: str) -> list[ColumnRule]:
    return [ColumnRule(f"{key}_cn", low=0.0, low_open=True, high=_HIGH, unit="",
                       why="a chondrite-normalised ratio of concentrations is positive, "
                       "and basalts lie far below 1000"),
            ColumnRule(f"{key}_sigma_cn", low=0.0, low_open=True, unit="",
                       why="a 1-sigma uncertainty must be positive")]


class RareEarthRatios(ObservationSet):
    """Chondrite-normalised La/Yb (and optionally Sm/Yb, Dy/Yb) of basalt samples.

    Parameters
    ----------
    data : pandas.DataFrame
        Columns ``sample``, ``la_yb_cn``, ``la_yb_sigma_cn`` and optional pairs.
    file, lines : as for every kind.
    model_error : float or Prior
        Relative error of the model ratios (log units), added in quadrature in log space.
    source : str or mapping
        A packaged source composition (``forward.trace.SOURCES``), or the ten elements
        La ... Lu in ppm (a mapping, e.g. a TOML table in the study file).
    transition : (float, float)
        GPa, the spinel-garnet transition interval (0 <= p_lo < p_hi).
    """

    kind = "rare_earths"
    quantity = "chondrite-normalised La/Yb"
    unit = "cn"
    id_column = "sample"
    value_column = "la_yb_cn"
    sigma_column = "la_yb_sigma_cn"
    option_keys = ("source", "transition")

    def __init__(self, data, *, file=None, model_error=0.0, lines=None,
                 source: str | Mapping[str, float] = "workman_hart_2005",
                 transition: tuple[float, float] = DEFAULT_TRANSITION) -> None:
        super().__init__(data, file=file, model_error=model_error, lines=lines)
        self.source = source if isinstance(source, str) else {e: float(source[e])
                                                              for e in ELEMENTS}
        self.transition = tuple(float(v) for v in transition)
        self.ratios = tuple(k for k in RATIOS if f"{k}_cn" in data.columns)
        # only the elements of the table's ratios: each element is computed on its own
        self._elements = tuple(sorted({e for k in self.ratios for e in RATIOS[k]}))
        observed = {k: np.asarray(data[f"{k}_cn"], float) for k in self.ratios}
        stated = {k: np.asarray(data[f"{k}_sigma_cn"], float) / observed[k]
                  for k in self.ratios}
        self._log_obs = {k: np.log(v) for k, v in observed.items()}
        self._log_stated = stated
        # the base class combined the model error (log units) with the data sigma: redo
        sigma = self.total_sigma() if not self.free_errors else np.exp(
            self._log_obs["la_yb"]) * stated["la_yb"]
        self._sigma = np.array(sigma, float)
        self._sigma.flags.writeable = False

    @classmethod
    def column_rules(cls, **options):
        required = [ColumnRule("sample", numeric=False), *_rules("la_yb")]
        return required, [_rules("sm_yb"), _rules("dy_yb")]

    @classmethod
    def _parse_options(cls, spec: Mapping, where: str) -> dict:
        source = parse_source(spec.get("source", "workman_hart_2005"), f"{where}.source")
        transition = parse_transition(spec.get("transition", list(DEFAULT_TRANSITION)),
                                      f"{where}.transition")
        return {"source": source, "transition": transition}

    @property
    def source_label(self) -> str:
        """The source's name, or "user-given source: La ... ppm" for given values."""
        if isinstance(self.source, str):
            return f"{self.source} source"
        values = ", ".join(f"{e} {self.source[e]:.4g}" for e in ELEMENTS)
        return f"user-given source: {values} ppm"

    def _short_source(self) -> str:
        return self.source_label if isinstance(self.source, str) else "user-given source"

    def _log_sd(self, key: str, errors: Mapping | None) -> np.ndarray:
        return combine_sigma(self._log_stated[key], self.model_error, "model_error", errors)

    def _model(self, column) -> dict[str, np.ndarray]:
        pooled = fast_trace_elements(column, source=self.source, transition=self.transition,
                                     elements=self._elements)
        return {k: pooled.ratio(*RATIOS[k], normalised=True) for k in self.ratios}

    def pointwise_log_likelihood(self, column, *, parameters: Mapping | None = None,
                                 errors: Mapping | None = None) -> np.ndarray:
        model = self._model(column)
        total = 0.0
        for k in self.ratios:  # log-normal: Gaussian in ln, Jacobian 1/obs
            total = total + gaussian_logpdf(self._log_obs[k], np.log(model[k])[..., None],
                                            self._log_sd(k, errors)) - self._log_obs[k]
        distance = melting_distance(column, parameters)[..., None]
        return total - NO_MELT_SLOPE * distance

    def _key(self, ratio: str) -> str:
        return "value" if ratio == "la_yb" else ratio

    def predict(self, column) -> dict[str, np.ndarray]:
        shape = np.shape(column.melt_thickness) + (len(self),)
        return {self._key(k): np.broadcast_to(v[..., None], shape).copy()
                for k, v in self._model(column).items()}

    def total_sigma(self, errors: Mapping | None = None) -> np.ndarray:
        """1-sigma of the main ratio in its units, to first order (obs x total log sd)."""
        return np.exp(self._log_obs["la_yb"]) * self._log_sd("la_yb", errors)

    def observed(self, errors: Mapping | None = None) -> dict[str, np.ndarray]:
        """Observed ratios and 1-sigma (first order: obs x the total log sd)."""
        out = {}
        for k in self.ratios:
            value = np.exp(self._log_obs[k])
            sd = self._log_sd(k, errors if self.free_errors else None)
            key = self._key(k)
            out[key] = value
            out["sigma" if key == "value" else f"{key}_sigma"] = value * np.reshape(
                sd, np.shape(sd)[-1:])
        return out

    def simulate(self, column, rng: np.random.Generator, *,
                 errors: Mapping | None = None) -> RareEarthRatios:
        require_single(column, "simulate")
        model = self._model(column)
        new = {}
        for k in self.ratios:
            sd = np.reshape(self._log_sd(k, errors), len(self))
            new[f"{k}_cn"] = float(np.ravel(model[k])[0]) * np.exp(
                sd * rng.standard_normal(len(self)))
        return self._replace_values(new, source=self.source, transition=self.transition)

    def panels(self) -> tuple[Panel, ...]:
        """One panel per ratio in the table, on a log axis (ratios span factors)."""
        out = []
        for k in self.ratios:
            num, den = RATIOS[k]
            key = self._key(k)
            out.append(Panel(key, "sigma" if key == "value" else f"{key}_sigma",
                             label=f"({num}/{den})$_N$ (cn)",
                             title=f"chondrite-normalised {num}/{den} of the pooled melt",
                             model=f"model {num}/{den} (posterior draws)", unit="cn",
                             log=True, relative_error=True))
        return tuple(out)

    def pattern_panels(self, column) -> tuple[PatternPanel, ...]:
        """The pooled melt's chondrite-normalised pattern La...Lu over the draws.

        The table holds ratios only, so this is the model's pattern alone: what the
        fitted ratios imply for the whole pattern (Sun & McDonough 1989 CI chondrite).
        """
        pooled = fast_trace_elements(column, source=self.source, transition=self.transition)
        draws = np.reshape(pooled.normalised, (-1, len(pooled.elements)))
        return (PatternPanel(tuple(pooled.elements), draws,
                             label="melt / CI chondrite",
                             title=f"chondrite-normalised pattern of the pooled melt implied "
                             f"by the fit ({self._short_source()}; model only, the table "
                             "holds ratios)",
                             model="model pooled melt (posterior draws)", log=True),)

    def describe(self) -> str:
        rows = "1 sample" if len(self) == 1 else f"{len(self)} samples"
        names = ", ".join("/".join(RATIOS[k]) for k in self.ratios)
        return (f"{rows} of chondrite-normalised {names} from {self.name}, compared with "
                f"the pooled fractional melt ({self.source_label})"
                + describe_errors(self, {"model_error": "(relative)"}))


def parse_source(source, key: str) -> str | dict[str, float]:
    """A packaged source's name, or a table of the ten elements in ppm (checked)."""
    if isinstance(source, str):
        if source not in SOURCES:
            raise InputError(f"unknown source {source!r}" + suggest(source, SOURCES)
                             + "; or give a table of La ... Lu in ppm", key=key)
        return source
    if not isinstance(source, Mapping):
        raise InputError(f"must be a source name ({', '.join(SOURCES)}) or a table of "
                         f"{', '.join(ELEMENTS)} in ppm", key=key)
    for name in source:
        if name not in ELEMENTS:
            raise InputError(f"unknown element {name!r}" + suggest(str(name), ELEMENTS),
                             key=key)
    missing = [e for e in ELEMENTS if e not in source]
    if missing:
        raise InputError(f"gives no value for {', '.join(missing)}: a source gives all of "
                         f"{', '.join(ELEMENTS)} in ppm", key=key)
    values = {}
    for e in ELEMENTS:
        value = source[e]
        if isinstance(value, bool) or not isinstance(value, (int, float)) \
                or not np.isfinite(value) or value <= 0.0:
            raise InputError(f"{e} must be a concentration > 0 in ppm, not {value!r}",
                             key=f"{key}.{e}")
        values[e] = float(value)
    return values


def parse_transition(transition, key: str) -> tuple[float, float]:
    """The spinel-garnet transition [p_lo, p_hi] in GPa, checked (0 <= p_lo < p_hi <= 10)."""
    try:
        lo, hi = (float(v) for v in transition)
    except (TypeError, ValueError):
        raise InputError("must be two pressures [p_lo, p_hi] in GPa", key=key) from None
    if not (np.isfinite(lo) and np.isfinite(hi) and 0.0 <= lo < hi <= 10.0):
        raise InputError(f"must be [p_lo, p_hi] GPa with 0 <= p_lo < p_hi <= 10, not "
                         f"[{lo:g}, {hi:g}]", key=key)
    return lo, hi
