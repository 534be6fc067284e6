"""Kind ``melting_pressure``: thermobarometric pressures (and temperatures) of basalts.

Table columns: ``sample`` (name), ``pressure_gpa`` (0-10 GPa) and ``sigma_gpa`` (> 0),
optionally ``temperature_c`` (800-2000 degC, a sanity range) with ``sigma_c`` (> 0); the
two temperature columns come together, and then every row needs both.

Where in the melting interval a primary melt last equilibrated is a modelling choice
(docs/model.md, common practice), set by ``equilibration``:

``"top"``
    At the top of melting (the lid base, or the onset when the lid is deeper):
    log L_i = log N(P_i; P_top, s_P^2) [+ log N(T_i; T(P_top), s_T^2)].
``"pooled"``
    At the melt-production weighted mean melting pressure of the pooled melt
    (``MeltColumn.mean_melting_pressure``), with the melt-production weighted mean
    temperature along the path.
``"path"``
    Anywhere along the melting path, with probability proportional to the melt made
    there: L_i = sum_k w_k N(P_i; P_k, s_P^2) [N(T_i; T_k, s_T^2)], the midpoint rule on
    ``path_points`` equal-pressure intervals of the path (``MeltColumn.path``), evaluated
    for all walkers and rows at once with log-sum-exp.

s_P^2 = sigma_gpa^2 + model_error^2 and s_T^2 = sigma_c^2 + temperature_model_error^2.
Each row is an observed melt, so where the model makes no melt every row gets the
sloping no-melt penalty of `inversion.observations.base`. The likelihood is then
evaluated at the degenerate point top = onset, which is also the limit of each
equilibration model as the melting interval shrinks to nothing, so the log-likelihood
joins the melting side continuously (no constant offset) and falls by `NO_MELT_SLOPE` nats
per km per row away from it.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from scipy.special import logsumexp

from .._errors import InputError, suggest
from .base import (
    NO_MELT_SLOPE,
    ObservationSet,
    _frozen,
    _non_negative,
    gaussian_logpdf,
    melting_distance,
    require_single,
)
from .tables import ColumnRule

__all__ = ["EQUILIBRATION", "PRESSURE_RANGE", "TEMPERATURE_RANGE", "MeltingPressure"]

#: Where the observed melts are assumed to have equilibrated, and what each choice means.
EQUILIBRATION = {
    "top": "at the top of melting (the lid base, or the onset when the lid is deeper)",
    "pooled": "at the mean melting pressure and temperature of the pooled melt",
    "path": "anywhere along the melting path, weighted by melt production",
}
#: Accepted range of observed pressures, GPa (issue 3: 0-10 GPa).
PRESSURE_RANGE = (0.0, 10.0)
#: Accepted range of observed temperatures, degC (a sanity check on units, not physics).
TEMPERATURE_RANGE = (800.0, 2000.0)
_PATH_POINTS = (8, 1024)
_EQUILIBRATION_CHOICES = ", ".join(f'"{k}" ({v})' for k, v in EQUILIBRATION.items())


class MeltingPressure(ObservationSet):
    """Melting pressures (GPa), optionally with temperatures (degC), of primitive basalts.

    Parameters
    ----------
    data : pandas.DataFrame
        Columns ``sample``, ``pressure_gpa``, ``sigma_gpa`` [, ``temperature_c``,
        ``sigma_c``] (validated).
    file : path-like, optional
    model_error : float
        GPa, added to sigma_gpa in quadrature.
    lines : sequence of int, optional
    equilibration : {"top", "pooled", "path"}
    path_points : int
        Number of path intervals for "pooled" temperatures and "path" (8-1024, default 64).
    temperature_model_error : float
        degC, added to sigma_c in quadrature.
    """

    kind = "melting_pressure"
    quantity = "melting pressure"
    unit = "GPa"
    id_column = "sample"
    value_column = "pressure_gpa"
    sigma_column = "sigma_gpa"
    option_keys = ("equilibration", "path_points", "temperature_model_error")

    def __init__(self, data, *, equilibration: str, file=None, model_error=0.0,
                 lines=None, path_points: int = 64,
                 temperature_model_error: float = 0.0) -> None:
        super().__init__(data, file=file, model_error=model_error, lines=lines)
        options = self._parse_options({"equilibration": equilibration,
                                       "path_points": path_points,
                                       "temperature_model_error": temperature_model_error},
                                      "observations")
        self.equilibration = options["equilibration"]
        self.path_points = options["path_points"]
        self.temperature_model_error = options["temperature_model_error"]
        if self.has_temperature:
            self._temperature = _frozen(data["temperature_c"])
            self._temperature_sigma = _frozen(np.hypot(data["sigma_c"].to_numpy(float),
                                                       self.temperature_model_error))

    @classmethod
    def column_rules(cls, **options):
        low, high = PRESSURE_RANGE
        t_low, t_high = TEMPERATURE_RANGE
        required = [
            ColumnRule("sample", numeric=False),
            ColumnRule("pressure_gpa", low=low, high=high, unit="GPa"),
            ColumnRule("sigma_gpa", low=0.0, low_open=True, unit="GPa",
                       why="a 1-sigma uncertainty must be positive"),
        ]
        temperature = [
            ColumnRule("temperature_c", low=t_low, high=t_high, unit="degC",
                       why="outside this range the unit is probably not degC"),
            ColumnRule("sigma_c", low=0.0, low_open=True, unit="degC",
                       why="a 1-sigma uncertainty must be positive"),
        ]
        return required, [temperature]

    @classmethod
    def _parse_options(cls, spec: Mapping, where: str) -> dict:
        if "equilibration" not in spec:
            raise InputError("missing 'equilibration', where the basalts last equilibrated"
                             " with the mantle: " + _EQUILIBRATION_CHOICES,
                             key=f"{where}.equilibration")
        equilibration = spec["equilibration"]
        if not isinstance(equilibration, str) or equilibration not in EQUILIBRATION:
            hint = suggest(str(equilibration), tuple(EQUILIBRATION))
            hint = hint if hint.startswith("; did you mean") else ""
            raise InputError(f"unknown value {equilibration!r}{hint}; choose "
                             + _EQUILIBRATION_CHOICES, key=f"{where}.equilibration")
        points = spec.get("path_points", 64)
        low, high = _PATH_POINTS
        if isinstance(points, bool) or not isinstance(points, int) or \
                not low <= points <= high:
            raise InputError(f"{points!r} must be a whole number from {low} to {high}",
                             key=f"{where}.path_points")
        t_error = _non_negative(spec.get("temperature_model_error", 0.0),
                                f"{where}.temperature_model_error")
        return {"equilibration": equilibration, "path_points": points,
                "temperature_model_error": t_error}

    def _options(self) -> dict:
        return {"equilibration": self.equilibration, "path_points": self.path_points,
                "temperature_model_error": self.temperature_model_error}

    # ---- data views -------------------------------------------------------------------

    @property
    def has_temperature(self) -> bool:
        """Whether the table has temperatures (``temperature_c``, ``sigma_c``)."""
        return "temperature_c" in self.data.columns

    @property
    def temperature(self) -> np.ndarray:
        """Observed temperatures, degC, shape (rows,) (read-only)."""
        return self._temperature

    @property
    def temperature_sigma(self) -> np.ndarray:
        """Total 1-sigma temperature uncertainty incl. model error, degC, shape (rows,)."""
        return self._temperature_sigma

    def observed(self) -> dict[str, np.ndarray]:
        out = super().observed()
        if self.has_temperature:
            out["temperature"] = self.temperature
            out["temperature_sigma"] = self.temperature_sigma
        return out

    # ---- model side --------------------------------------------------------------------

    @staticmethod
    def _top_temperature(column) -> np.ndarray:
        temperature, _ = column.profile(np.asarray(column.top_pressure, float)[..., None])
        return np.asarray(temperature, float)[..., 0]

    def _path(self, column) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
        """Path pressures, temperatures (or None) and weights, each shape (n, num).

        Where no melt forms the weights are all zero in the forward model; here the whole
        weight goes to the top of melting instead, so the likelihood stays finite there.
        """
        path = column.path(num=self.path_points)
        weight = np.asarray(path.weight, float)
        pressure = np.asarray(path.pressure, float)
        temperature = np.asarray(path.temperature, float) if self.has_temperature else None
        dry = weight.sum(axis=-1) <= 0.0
        if np.any(dry):
            weight = np.where(dry[..., None], 0.0, weight)
            weight[..., 0] = np.where(dry, 1.0, weight[..., 0])
            top = np.asarray(column.top_pressure, float)[..., None]
            pressure = np.where(dry[..., None], top, pressure)
            if temperature is not None:
                t_top = self._top_temperature(column)[..., None]
                temperature = np.where(dry[..., None], t_top, temperature)
        return pressure, temperature, weight

    def _point(self, column) -> tuple[np.ndarray, np.ndarray | None]:
        """Model pressure and temperature (or None) of "top" / "pooled", shape (n,)."""
        if self.equilibration == "top":
            pressure = np.asarray(column.top_pressure, float)
            temperature = self._top_temperature(column) if self.has_temperature else None
            return pressure, temperature
        pressure = np.asarray(column.mean_melting_pressure, float)
        if not self.has_temperature:
            return pressure, None
        path_p, path_t, weight = self._path(column)
        return pressure, (weight * path_t).sum(axis=-1)

    def _per_row(self, column) -> np.ndarray:
        """Log-likelihood of every row, shape (n, rows)."""
        s_p = self.sigma
        if self.equilibration == "path":
            pressure, temperature, weight = self._path(column)
            terms = gaussian_logpdf(self.values[:, None], pressure[..., None, :],
                                    s_p[:, None])
            if temperature is not None:
                terms = terms + gaussian_logpdf(self.temperature[:, None],
                                                temperature[..., None, :],
                                                self.temperature_sigma[:, None])
            with np.errstate(divide="ignore"):
                log_w = np.log(weight)[..., None, :]
            return logsumexp(terms + log_w, axis=-1)
        pressure, temperature = self._point(column)
        per_row = gaussian_logpdf(self.values, pressure[..., None], s_p)
        if temperature is not None:
            per_row = per_row + gaussian_logpdf(self.temperature, temperature[..., None],
                                                self.temperature_sigma)
        return per_row

    def pointwise_log_likelihood(self, column, *,
                                 parameters: Mapping | None = None) -> np.ndarray:
        # The distance is 0 wherever melt forms, so the penalty needs no mask.
        penalty = NO_MELT_SLOPE * melting_distance(column, parameters)
        return self._per_row(column) - penalty[..., None]

    def predict(self, column) -> dict[str, np.ndarray]:
        """Model prediction per row, arrays of shape (n, rows).

        ``"value"``: pressure (GPa) of the equilibration point ("path": the melt-weighted
        mean along the path); ``"temperature"`` (degC) likewise when the table has
        temperatures; ``"low"`` and ``"high"``: top and onset pressure of melting.
        """
        rows = len(self)
        if self.equilibration == "path":
            pressure, temperature, weight = self._path(column)
            point_p = (weight * pressure).sum(axis=-1)
            point_t = None if temperature is None else (weight * temperature).sum(axis=-1)
        else:
            point_p, point_t = self._point(column)

        def spread(a) -> np.ndarray:
            a = np.asarray(a, float)[..., None]
            return np.broadcast_to(a, a.shape[:-1] + (rows,)).copy()

        out = {"value": spread(point_p), "low": spread(column.top_pressure),
               "high": spread(np.maximum(column.onset_pressure, column.top_pressure))}
        if point_t is not None:
            out["temperature"] = spread(point_t)
        return out

    def simulate(self, column, rng: np.random.Generator) -> MeltingPressure:
        require_single(column, "simulate")
        rows = len(self)
        if self.equilibration == "path":
            pressure, temperature, weight = (None if a is None else np.reshape(a, -1)
                                             for a in self._path(column))
            index = rng.choice(weight.size, size=rows, p=weight / weight.sum())
            point_p = pressure[index]
            point_t = None if temperature is None else temperature[index]
        else:
            p, t = self._point(column)
            point_p = np.full(rows, float(np.ravel(p)[0]))
            point_t = None if t is None else np.full(rows, float(np.ravel(t)[0]))
        new = {self.value_column: point_p + self.sigma * rng.standard_normal(rows)}
        if point_t is not None:
            new["temperature_c"] = point_t + self.temperature_sigma * rng.standard_normal(rows)
        return self._replace_values(new, **self._options())

    def describe(self) -> str:
        where = {"top": "at the top of melting", "pooled": "at the mean melting pressure",
                 "path": EQUILIBRATION["path"]}
        what = "pressure-temperature point(s)" if self.has_temperature else "pressure(s)"
        errors = []
        if self.model_error:
            errors.append(f"{self.model_error:g} GPa")
        if self.has_temperature and self.temperature_model_error:
            errors.append(f"{self.temperature_model_error:g} degC")
        extra = f" (model error {', '.join(errors)})" if errors else ""
        return (f"{len(self)} melting {what} from {self.name}, equilibrated "
                f"{where[self.equilibration]}{extra}")
