"""The interface every observation kind implements, and the shared likelihood pieces.

An observation set is one ``[[observations]]`` block of a study file: a table of
measurements of one kind with their 1-sigma uncertainties. Its likelihood is Gaussian and
independent between rows; an optional ``model_error`` (same unit as the data, fixed or
free: `inversion.observations.model_error`) is added to each row's sigma in quadrature,
sigma_total = sqrt(sigma^2 + model_error^2), to allow for what the forward model leaves
out.

No-melt penalty
---------------
Where a parameter vector makes no melt (the lid base is at or below the onset of melting,
or the mantle is too cold to meet the solidus), an observed melt product cannot be
explained. Instead of ``-inf`` (which would leave a sampler or optimiser started there no
direction to move) the log-likelihood of each row that records melt is lowered by

    NO_MELT_SLOPE * d

where d (km, `melting_distance`) is how far the point is from making melt: the lid
thickness below the onset depth plus, for mantle too cold to meet the solidus at all,
the height the onset would have to rise: the amount (K) by which the adiabat misses the
solidus (``MeltColumn.solidus_margin``; for a column without it, 1100 degC - (Tp -
solidus offset), 1100 degC being about the surface solidus of dry peridotite) divided by
3.66 K/km, the difference between the solidus and adiabat slopes (about 113 K/GPa at
30.89 km/GPa; docs/model.md, "No-melt penalty"; the value only sets the penalty's
direction and scale). d is 0 on the melting boundary, and each kind evaluates its
Gaussian at the degenerate melting column there (top = onset), so the likelihood is
continuous across the boundary: finite, never NaN, and falling steadily away from it, so
the search slopes back toward melting. The lid thickness comes from the column
(``MeltColumn.lithosphere_thickness``) or from ``parameters=`` of `log_likelihood`;
without either, d is 0 and there is no slope.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from os import PathLike
from pathlib import Path
from typing import ClassVar

import numpy as np
import pandas as pd

from ..errors import InputError, suggest
from ..study.priors import Prior
from .model_error import combine_sigma, parse_error_setting
from .tables import ColumnRule, check_column_names, read_table, validate_frame

__all__ = [
    "NO_MELT_SLOPE",
    "ObservationSet",
    "Panel",
    "PatternPanel",
    "bivariate_logpdf",
    "gaussian_logpdf",
    "melting_distance",
]

#: Nats per km of distance from melting, per row that records melt (see module docstring).
NO_MELT_SLOPE = 1.0
_COLD_REFERENCE = 1100.0  # degC, surface solidus of dry peridotite (docs/model.md)
_COLD_GRADIENT = 3.66  # degC/km, solidus minus adiabat slope, 113 K/GPa / 30.89 km/GPa
_COMMON_KEYS = ("kind", "file", "model_error")
_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)


def gaussian_logpdf(x, mean, sd) -> np.ndarray:
    """Log density of the normal distribution N(mean, sd^2) at `x` (broadcasting)."""
    z = (np.asarray(x, float) - mean) / sd
    return -0.5 * z * z - np.log(sd) - _LOG_SQRT_2PI


def bivariate_logpdf(dx, dy, sx, sy, rho) -> np.ndarray:
    """Log density of a bivariate normal at residuals (dx, dy) (broadcasting).

    Parameters
    ----------
    dx, dy : array_like
        Observed minus mean, in the units of `sx` and `sy`.
    sx, sy : array_like
        Standard deviations (> 0).
    rho : array_like
        Correlation coefficient, -1 < rho < 1.

    Returns
    -------
    numpy.ndarray
        log N2 = -(zx^2 - 2 rho zx zy + zy^2) / (2 (1 - rho^2)) - log(2 pi sx sy
        sqrt(1 - rho^2)), with z = d / s; rho = 0 gives the sum of two `gaussian_logpdf`.
    """
    zx = np.asarray(dx, float) / sx
    zy = np.asarray(dy, float) / sy
    spare = 1.0 - np.square(rho)
    quad = (zx * zx - 2.0 * rho * zx * zy + zy * zy) / spare
    return -0.5 * quad - np.log(sx) - np.log(sy) - 0.5 * np.log(spare) - 2.0 * _LOG_SQRT_2PI


def melting_distance(column, parameters: Mapping | None = None) -> np.ndarray:
    """How far each point is from making melt, km; 0 where it makes melt.

    Parameters
    ----------
    column : forward.MeltColumn
        Melting columns, shape (n,) (any shape works). Its ``lithosphere_thickness`` and
        ``solidus_margin`` (K; negative when the adiabat never meets the solidus) are used
        when present.
    parameters : mapping, optional
        The melt_column inputs per point (``lithosphere_thickness`` in km,
        ``potential_temperature`` and ``solidus_offset`` in degC), each broadcastable to
        the column shape; used for what the column does not carry. Without either
        source of the lid thickness the distance is 0.

    Returns
    -------
    numpy.ndarray
        Distance d >= 0, the column's shape (see the module docstring for the formula).
    """
    shape = np.shape(column.melt_thickness)
    melts = np.asarray(column.produces_melt, bool)
    parameters = {} if parameters is None else parameters
    lid = getattr(column, "lithosphere_thickness", parameters.get("lithosphere_thickness"))
    if lid is None:
        return np.zeros(shape)
    lid = np.broadcast_to(np.asarray(lid, float), shape)
    onset = np.asarray(column.onset_depth, float)
    distance = np.maximum(lid - onset, 0.0)
    if not np.all(melts):  # the solidus margin costs a scan of the adiabat: only if needed
        # Too-cold mantle (margin < 0) is further away by the height the onset must rise,
        # whatever the lid: added everywhere it applies, so d stays continuous.
        cold = _cold_distance(column, parameters, shape)
        if cold is not None:
            distance = distance + cold
    return np.where(melts, 0.0, distance)


def _cold_distance(column, parameters: Mapping, shape) -> np.ndarray | None:
    """km the onset would have to rise to reach the surface, for too-cold mantle."""
    margin = getattr(column, "solidus_margin", None)
    if margin is not None:  # K by which the adiabat misses the solidus (negative)
        return np.maximum(-np.asarray(margin, float), 0.0) / _COLD_GRADIENT
    if "potential_temperature" not in parameters:
        return None
    theta = np.asarray(parameters["potential_temperature"], float) - np.asarray(
        parameters.get("solidus_offset", 0.0), float)
    return np.broadcast_to(np.maximum(_COLD_REFERENCE - theta, 0.0) / _COLD_GRADIENT, shape)


@dataclass(frozen=True)
class Panel:
    """How the figures draw one per-row quantity of a block against the model.

    The fit figure (``results.figures``) and the comparison figure
    (``comparison.figure``) draw one panel per entry of `ObservationSet.panels`: the
    observed ``observed()[key]`` ± ``observed()[sigma_key]`` of every row beside the
    model's distribution of the same quantity (`ObservationSet.panel_draws`, or data
    simulated by `ObservationSet.simulate`).

    Attributes
    ----------
    key : str
        Key of the quantity in `ObservationSet.observed` and `ObservationSet.predict`
        (``"value"`` for the main column).
    sigma_key : str
        Key of its 1-sigma (model error included) in `ObservationSet.observed`.
    label : str
        Axis label with the unit, e.g. ``"Pressure P (GPa)"``.
    title : str
        What the panel compares, in words, e.g. ``"melting pressure, equilibrated at the
        top of melting"``.
    model : str
        What the model side shows, for the legend, e.g. ``"model igneous crust
        thickness"``.
    unit : str
        Unit of the quantity, as in the table (``"km"``, ``"GPa"``, ``"degC"``).
    error_option : str
        The block's model-error setting included in the error bars (``"model_error"``).
    invert : bool
        Draw the axis increasing downwards (pressure and depth, as in the earth).
    log : bool
        Draw the value axis logarithmic (positive quantities spanning factors, such as
        chondrite-normalised ratios).
    relative_error : bool
        The model error `error_option` is relative (a fraction, shown in %), not in
        `unit`.
    """

    key: str
    sigma_key: str
    label: str
    title: str
    model: str
    unit: str
    error_option: str = "model_error"
    invert: bool = False
    log: bool = False
    relative_error: bool = False


@dataclass(frozen=True)
class PatternPanel:
    """A pattern over named items (such as the rare-earth elements La...Lu) of the model.

    The fit figure draws one panel per entry of `ObservationSet.pattern_panels` below the
    block's `Panel` rows: the posterior predictive median of each item joined by a line,
    with its 68 % and 95 % bands. Nothing observed is drawn (a kind whose table holds
    only some items, such as ratios, has no observed pattern).

    Attributes
    ----------
    items : tuple of str
        Names along the x-axis, in order (m,).
    draws : numpy.ndarray, shape (n, m)
        The model's value of each item in each of n posterior draws.
    label : str
        Y-axis label with its unit.
    title : str
        What the panel shows, in words.
    model : str
        What the line and bands are, for the legend.
    log : bool
        Draw the y-axis logarithmic.
    """

    items: tuple[str, ...]
    draws: np.ndarray
    label: str
    title: str
    model: str
    log: bool = False


class ObservationSet(ABC):
    """One block of observations of one kind, with its Gaussian likelihood.

    Subclasses set the class attributes and implement `pointwise_log_likelihood`,
    `predict`, `simulate`, `describe`, `column_rules` and (if they take options)
    `_parse_options`. The figure and survey parts have defaults that follow from those:
    `panels` (one panel of the value column), `panel_draws` (from `predict`),
    `site_columns` (from `column_rules`); `pt_observed` and `pt_draws` only for kinds
    that observe melting pressures and temperatures. DEVELOPERS.md, "Adding an
    observation kind", is the recipe; tests/test_kind_contract.py runs every registered
    kind through all of it.

    Attributes
    ----------
    kind : str
        Study-file ``kind``.
    quantity, unit : str
        What the main value column measures and its unit (for labels).
    id_column, value_column, sigma_column : str
        Column names of row labels, measured values and their 1-sigma uncertainties.
    file : pathlib.Path or None
        The table file (None when built in code).
    data : pandas.DataFrame
        The validated table, one row per observation, in file order.
    lines : tuple of int
        File line number of each row.
    model_error : float or Prior
        Added to every sigma in quadrature (unit of the values); a `Prior` when free.
    error_options : tuple of str
        Names of the block's model-error settings (class attribute).
    example_options : mapping
        Kind options that make a valid block of a table built from `column_rules` (class
        attribute; the contract tests use it, e.g. a required ``equilibration``).
    parameter_options : tuple of str
        Names of every block setting that may be a prior and then be sampled with the
        physical parameters (class attribute; the model errors, plus a kind's own, such
        as the correction choices of ``basalt_analyses``). See `free_options`.
    """

    kind: ClassVar[str]
    quantity: ClassVar[str]
    unit: ClassVar[str]
    id_column: ClassVar[str]
    value_column: ClassVar[str]
    sigma_column: ClassVar[str]
    option_keys: ClassVar[tuple[str, ...]] = ()
    error_options: ClassVar[tuple[str, ...]] = ("model_error",)
    example_options: ClassVar[Mapping[str, object]] = {}
    parameter_options: ClassVar[tuple[str, ...]] = ("model_error",)
    option_units: ClassVar[dict[str, str]] = {}

    def __init__(self, data: pd.DataFrame, *, file: str | PathLike[str] | None = None,
                 model_error: float | Prior = 0.0,
                 lines: Sequence[int] | None = None) -> None:
        self.data = data
        self.file = None if file is None else Path(file)
        self.model_error = parse_error_setting(model_error, "model_error")
        self.lines = tuple(range(2, 2 + len(data))) if lines is None else tuple(lines)
        # The likelihood runs in the sampler's inner loop: convert the columns once.
        self._values = _frozen(data[self.value_column])
        self._stated_sigma = _frozen(data[self.sigma_column])
        self._sigma = _frozen(combine_sigma(self._stated_sigma, _fixed(self.model_error),
                                            "model_error", None))

    # ---- construction ------------------------------------------------------------------

    @classmethod
    @abstractmethod
    def column_rules(cls, **options) -> tuple[list[ColumnRule], list[list[ColumnRule]]]:
        """Required column rules and optional all-or-none groups of column rules."""

    @classmethod
    def _parse_options(cls, spec: Mapping, where: str) -> dict:
        """Validate kind-specific keys of a study-file block; return constructor options."""
        return {}

    @classmethod
    def from_spec(cls, spec: Mapping, *, base_dir: str | PathLike[str] = ".",
                  where: str = "observations") -> ObservationSet:
        """Build from one ``[[observations]]`` table, reading its file.

        Parameters
        ----------
        spec : mapping
            The block: ``kind``, ``file``, optional ``model_error`` and kind options.
        base_dir : str or path-like
            Folder the ``file`` path is relative to (the study file's folder).
        where : str
            Dotted key of the block, named in messages (e.g. ``"observations[2]"``).
        """
        allowed = _COMMON_KEYS + cls.option_keys
        for key in spec:
            if key not in allowed:
                raise InputError(f"unknown key '{key}' for kind '{cls.kind}'"
                                 + suggest(key, allowed), key=f"{where}.{key}")
        if "file" not in spec:
            raise InputError("missing 'file' (the table of observations, relative to the "
                             "study file)", key=f"{where}.file")
        if not isinstance(spec["file"], str) or not spec["file"].strip():
            raise InputError(f"{spec['file']!r} must be a file name in quotes",
                             key=f"{where}.file")
        model_error = parse_error_setting(spec.get("model_error", 0.0),
                                          f"{where}.model_error")
        options = cls._parse_options(spec, where)
        path = Path(base_dir) / spec["file"]
        required, optional = cls.column_rules(**options)
        table = read_table(path, required, optional=optional, key=f"{where}.file")
        try:
            return cls(table.data, file=path, model_error=model_error, lines=table.lines,
                       **options)
        except InputError as err:  # a setting that does not fit the table: name the block
            if err.file is not None or err.key is None:
                raise
            raise InputError(err.message, key=f"{where}.{err.key}") from None

    @classmethod
    def from_frame(cls, data: pd.DataFrame, *, file: str | PathLike[str] | None = None,
                   model_error: float | Prior = 0.0, lines: Sequence[int] | None = None,
                   **options) -> ObservationSet:
        """Build from a table in memory, checked by the same rules as a file.

        `model_error` (and kind options such as ``temperature_model_error``) may be a
        number or a `Prior` (free). `lines` are the file lines of the rows, named in
        messages (default 2, 3, ...). An unknown column is refused as in a file.
        """
        model_error = parse_error_setting(model_error, "model_error")
        options = cls._parse_options(options, "observations")
        required, optional = cls.column_rules(**options)
        check_column_names(data.columns, [r.name for r in required]
                           + [r.name for group in optional for r in group], file=file)
        rules = list(required) + [r for group in optional if any(
            rule.name in data.columns for rule in group) for r in group]
        table = validate_frame(data, rules, file=file, lines=lines)
        return cls(table.data, file=file, model_error=model_error, lines=table.lines,
                   **options)

    @classmethod
    def example_table(cls, rows: int) -> pd.DataFrame | None:
        """A valid table of `rows` rows for the contract tests, or None.

        None (the default) lets the tests build one from `column_rules`, a value inside
        each rule's range; a kind whose rows must also agree with each other (the oxides
        of a basalt analysis) gives one here.
        """
        return None

    @classmethod
    def site_columns(cls) -> tuple[tuple[ColumnRule, ...], ...]:
        """The kind's columns in a survey sites file, as groups filled together.

        The first group is the kind's main measurement (value and 1-sigma); each later
        group is an optional extra that a row may give only beside the first (and beside
        any column its rules `ColumnRule.requires`). The rules, ranges and messages are
        those of the kind's own table (`column_rules` without the row-label column), so
        a sites file and an observation table accept the same values.
        """
        required, optional = cls.column_rules(**cls.example_options)
        main = tuple(rule for rule in required if rule.name != cls.id_column)
        return (main,) + tuple(tuple(group) for group in optional)

    @classmethod
    def from_site(cls, name: str, values: Mapping[str, float], *,
                  file: str | PathLike[str] | None = None, line: int | None = None,
                  model_error: float | Prior = 0.0, **options) -> ObservationSet:
        """A one-row block from a site of a survey sites file.

        `values` maps the `site_columns` a row filled to their numbers; `file` and `line`
        are named in any message (the row is checked again by the kind's rules).
        """
        data = pd.DataFrame({cls.id_column: [name]} | {k: [v] for k, v in values.items()})
        block = cls.from_frame(data, file=file, model_error=model_error,
                               lines=None if line is None else [line], **options)
        block.from_sites_file = True  # one site's row: labelled by its kind, not the file
        return block

    # ---- data views -------------------------------------------------------------------

    def __len__(self) -> int:
        return len(self.data)

    @property
    def ids(self) -> tuple[str, ...]:
        """Row labels (site or sample names), in file order."""
        return tuple(str(v) for v in self.data[self.id_column])

    @property
    def values(self) -> np.ndarray:
        """Measured values, shape (rows,), unit `unit` (read-only)."""
        return self._values

    @property
    def sigma(self) -> np.ndarray:
        """1-sigma uncertainty per row incl. a fixed model error, shape (rows,) (read-only).

        A free model error is not included (its value varies); see `total_sigma`.
        """
        return self._sigma

    @property
    def free_errors(self) -> dict[str, Prior]:
        """The block's free model errors: option name -> prior, in `error_options` order."""
        return {option: getattr(self, option) for option in self.error_options
                if isinstance(getattr(self, option), Prior)}

    @property
    def free_options(self) -> dict[str, Prior]:
        """Every sampled setting of the block: option name -> prior.

        In `parameter_options` order; the model errors among them are `free_errors`.
        Each becomes a parameter ``<block label>.<option>`` of the study
        (`inversion.study.BlockParameter`), and every likelihood call gets its values
        per parameter vector in ``errors={option: (n,)}``.
        """
        return {option: getattr(self, option) for option in self.parameter_options
                if isinstance(getattr(self, option), Prior)}

    def option_unit(self, option: str) -> str:
        """Unit of a sampled setting (a model error has the unit of its data)."""
        units = {"model_error": self.unit, "temperature_model_error": "degC"}
        return {**units, **self.option_units}[option]

    def total_sigma(self, errors: Mapping | None = None) -> np.ndarray:
        """Stated sigma and model error in quadrature: (rows,), or (n, rows) for (n,) errors.

        `errors` gives the values of the free model errors (see `free_errors`).
        """
        return self._sd(self._stated_sigma, "model_error", self._sigma, errors)

    def _sd(self, stated, option: str, fixed: np.ndarray, errors: Mapping | None):
        setting = getattr(self, option)
        return fixed if not isinstance(setting, Prior) else combine_sigma(
            stated, setting, option, errors)

    def observed(self, errors: Mapping | None = None) -> dict[str, np.ndarray]:
        """Observed values for plotting: ``{"value": (rows,), "sigma": (rows,)}``.

        ``sigma`` includes the model error: the fixed one, or a free one at the scalar
        values given in `errors` (without them, only the stated sigma).
        """
        sigma = self._sigma if not self.free_errors or errors is None else \
            self.total_sigma(errors)
        return {"value": self.values, "sigma": sigma}

    @property
    def name(self) -> str:
        """Short label: the file name, or the kind when built in code."""
        return self.file.name if self.file is not None else self.kind

    # ---- figures ----------------------------------------------------------------------

    def panels(self) -> tuple[Panel, ...]:
        """The per-row quantities the figures draw against the model, one `Panel` each.

        Default: the value column, labelled from `quantity` and `unit`.
        """
        return (Panel("value", "sigma", label=f"{self.quantity.capitalize()} ({self.unit})",
                      title=self.quantity, model=f"model {self.quantity}", unit=self.unit),)

    def pattern_panels(self, column) -> tuple[PatternPanel, ...]:
        """Model patterns the fit figure draws below this block's rows (default: none).

        Parameters
        ----------
        column : forward.MeltColumn
            Melting columns of n posterior draws.
        """
        return ()

    def panel_draws(self, column, key: str) -> tuple[np.ndarray, np.ndarray]:
        """The model's distribution of a panel's quantity, per draw and row.

        Parameters
        ----------
        column : forward.MeltColumn
            Melting columns of n posterior draws.
        key : str
            `Panel.key`.

        Returns
        -------
        points, weights : numpy.ndarray, shape (n, rows, k)
            k candidate values per draw and row (k = 1 for a single prediction) and their
            probabilities (summing to 1 over the last axis). Default: ``predict(column)
            [key]`` with weight 1.
        """
        values = np.asarray(self.predict(column)[key], float)[..., None]
        return values, np.ones_like(values)

    def pt_observed(self, errors: Mapping | None = None) -> dict[str, np.ndarray] | None:
        """Observed melting pressures and temperatures, for P-T diagrams; None if none.

        Returns
        -------
        dict or None
            ``"pressure"``, ``"pressure_sigma"`` (GPa, shape (rows,)) and, where the
            table has temperatures, ``"temperature"``, ``"temperature_sigma"`` (degC) and
            ``"correlation"`` (of the total errors, -1 < rho < 1). Sigmas include the
            model errors (free ones at the values in `errors`). Default: None.
        """
        return None

    def pt_draws(self, column) -> tuple[np.ndarray, np.ndarray | None, np.ndarray] | None:
        """Where the model puts the observed melts in P-T, per draw; None if not a P-T kind.

        Returns
        -------
        tuple or None
            pressure (GPa), temperature (degC, or None) and weight, each shape (n, k),
            weights summing to 1 over the last axis. Default: None.
        """
        return None

    # ---- model comparison --------------------------------------------------------------

    def log_likelihood(self, column, *, parameters: Mapping | None = None,
                       errors: Mapping | None = None) -> np.ndarray:
        """Log-likelihood summed over rows for each melting column.

        Parameters
        ----------
        column : forward.MeltColumn
            Computed for n parameter vectors (arrays of shape (n,)).
        parameters : mapping, optional
            The melt_column inputs per vector, each shape (n,); used only by the no-melt
            penalty (see `melting_distance`).
        errors : mapping, optional
            Value of each free model error (`free_errors`) per vector, shape (n,);
            required when the block has one.

        Returns
        -------
        numpy.ndarray
            Shape (n,); finite everywhere (never NaN). The sum over rows of
            `pointwise_log_likelihood`.
        """
        return self.pointwise_log_likelihood(column, parameters=parameters,
                                             errors=errors).sum(axis=-1)

    @abstractmethod
    def pointwise_log_likelihood(self, column, *, parameters: Mapping | None = None,
                                 errors: Mapping | None = None) -> np.ndarray:
        """Log-likelihood of every row (no-melt penalty included), shape ``(n, rows)``.

        Rows are independent given the parameters, so these are the terms a
        leave-one-out comparison needs; they sum to `log_likelihood` (same arguments).
        """

    @abstractmethod
    def predict(self, column) -> dict[str, np.ndarray]:
        """Model prediction for each row, ``{"value": (n, rows), ...}``."""

    @abstractmethod
    def simulate(self, column, rng: np.random.Generator, *,
                 errors: Mapping | None = None) -> ObservationSet:
        """A copy whose values are drawn from the likelihood at one melting column.

        The sigmas and model-error settings stay; `column` must hold a single parameter
        vector, and `errors` the value (a number or shape (1,)) of each free model error.
        The draws are not re-validated (a simulated thickness may come out negative).
        """

    @abstractmethod
    def describe(self) -> str:
        """One line in words: kind, file, number of rows, what the data are compared to."""

    def _replace_values(self, new: dict[str, np.ndarray], **options) -> ObservationSet:
        data = self.data.copy()
        for column, values in new.items():
            data[column] = np.asarray(values, float)
        return type(self)(data, file=self.file, model_error=self.model_error,
                          lines=self.lines, **options)

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {self.describe()}>"


def _frozen(values) -> np.ndarray:
    array = np.array(values, dtype=float)
    array.flags.writeable = False
    return array


def _fixed(setting: float | Prior) -> float:
    """The fixed part of a model-error setting (0 for a free one)."""
    return 0.0 if isinstance(setting, Prior) else float(setting)


def describe_errors(block, units: Mapping[str, str]) -> str:
    """E.g. ``" (model error 0.1 GPa; temperature model error free, uniform on [0, 50]
    degC)"``, or ``""`` when every model error is 0."""
    parts = []
    for option in block.error_options:
        setting, unit = getattr(block, option), units[option]
        words = option.replace("_", " ")
        if isinstance(setting, Prior):
            parts.append(f"{words} free, {setting.describe(unit=unit)}")
        elif setting:
            parts.append(f"{words} {setting:g} {unit}")
    return f" ({'; '.join(parts)})" if parts else ""


def require_single(column, who: str) -> None:
    """Raise ValueError unless `column` holds exactly one parameter vector."""
    size = np.size(column.melt_thickness)
    if size != 1:
        raise ValueError(f"{who} needs a column for one parameter vector, got {size}")
