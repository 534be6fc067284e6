"""Kind ``melting_pressure``: thermobarometric pressures (and temperatures) of basalts.

Table columns: ``sample`` (name), ``pressure_gpa`` (0-10 GPa) and ``pressure_sigma_gpa``
(> 0), optionally ``temperature_c`` (800-2000 degC, a sanity range) with
``temperature_sigma_c`` (> 0); the
two temperature columns come together, and then every row needs both. With temperatures,
an optional ``pt_correlation`` (-1 < rho < 1) gives the correlation of each row's
pressure and temperature errors (a thermobarometer's pressure depends on its
temperature, so these are often strongly correlated).

Where in the melting interval a primary melt last equilibrated is a modelling choice
(docs/model.md, "Likelihoods"; common practice), set by the required ``equilibration``:

``"top"``
    At the top of melting (the lid base, or the onset when the lid is deeper):
    L_i = N2((P_i, T_i); (P_top, T(P_top)), C_i).
``"pooled"``
    At the melt-production weighted mean melting pressure of the pooled melt
    (``MeltColumn.mean_melting_pressure``), with the melt-production weighted mean
    temperature along the path.
``"path"``
    Anywhere along the melting path, with probability proportional to the melt made
    there: L_i = sum_k w_k N2((P_i, T_i); (P_k, T_k), C_i), the midpoint rule on
    ``path_points`` equal-pressure intervals of the path (``MeltColumn.path``), evaluated
    for all walkers and rows at once with log-sum-exp.

N2 is the bivariate normal with covariance C_i = [[s_P^2, rho_i sigma_P sigma_T],
[rho_i sigma_P sigma_T, s_T^2]], where s_P^2 = pressure_sigma_gpa^2 + model_error^2
and s_T^2 = temperature_sigma_c^2 + temperature_model_error^2: the correlation belongs to the stated
(analytical) errors, and the model errors are added independently, so the correlation of
the total errors is rho_i sigma_P sigma_T / (s_P s_T). Without temperatures L_i is the
normal N(P_i; P, s_P^2); without ``pt_correlation`` rho_i = 0 (two independent normals).
Either model error may be free (`inversion.observations.model_error`).

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

from ..errors import InputError, suggest
from ..study.priors import Prior
from ...forward.quantities import quantity
from .base import (
    NO_MELT_SLOPE,
    ObservationSet,
    Panel,
    _fixed,
    _frozen,
    bivariate_logpdf,
    describe_errors,
    gaussian_logpdf,
    melting_distance,
    require_single,
)
from .model_error import combine_sigma, parse_error_setting
from .tables import ColumnRule

__all__ = ["EQUILIBRATION", "PRESSURE_RANGE", "TEMPERATURE_RANGE", "MeltingPressure"]

#: Where the observed melts are assumed to have equilibrated, and what each choice means.
EQUILIBRATION = {
    "top": "at the top of melting (the lid base, or the onset when the lid is deeper)",
    "pooled": "at the mean melting pressure and temperature of the pooled melt",
    "path": "anywhere along the melting path, weighted by melt production",
}
#: Accepted range of observed pressures, GPa (the forward model spans 0-10 GPa).
PRESSURE_RANGE = (0.0, 10.0)
#: Accepted range of observed temperatures, degC (a sanity check on units, not physics).
TEMPERATURE_RANGE = (800.0, 2000.0)
_PATH_POINTS = (8, 1024)
_EQUILIBRATION_CHOICES = ", ".join(f'"{k}" ({v})' for k, v in EQUILIBRATION.items())
_TEMPERATURE_COLUMNS = ("temperature_c", "temperature_sigma_c")


class MeltingPressure(ObservationSet):
    """Melting pressures (GPa), optionally with temperatures (degC), of primitive basalts.

    Parameters
    ----------
    data : pandas.DataFrame
        Columns ``sample``, ``pressure_gpa``, ``pressure_sigma_gpa`` [,
        ``temperature_c``, ``temperature_sigma_c`` [, ``pt_correlation``]] (validated).
    equilibration : {"top", "pooled", "path"}
        Required: where the melts last equilibrated (see the module docstring).
    file : path-like, optional
    model_error : float or Prior
        GPa, added to pressure_sigma_gpa in quadrature (a `Prior`: free).
    lines : sequence of int, optional
    path_points : int
        Number of path intervals for "pooled" temperatures and "path" (8-1024, default 64).
    temperature_model_error : float or Prior
        degC, added to temperature_sigma_c in quadrature (a `Prior`: free; needs temperatures).
    """

    kind = "melting_pressure"
    quantity = "melting pressure"
    unit = "GPa"
    id_column = "sample"
    value_column = "pressure_gpa"
    sigma_column = "pressure_sigma_gpa"
    option_keys = ("equilibration", "path_points", "temperature_model_error")
    error_options = ("model_error", "temperature_model_error")
    example_options = {"equilibration": "path"}
    parameter_options = error_options

    def __init__(self, data, *, equilibration: str, file=None, model_error=0.0,
                 lines=None, path_points: int = 64,
                 temperature_model_error: float | Prior = 0.0) -> None:
        super().__init__(data, file=file, model_error=model_error, lines=lines)
        # MeltingPressure's own keys (a subclass parses more keys of its own).
        options = MeltingPressure._parse_options({"equilibration": equilibration,
                                       "path_points": path_points,
                                       "temperature_model_error": temperature_model_error},
                                      "observations")
        self.equilibration = options["equilibration"]
        self.path_points = options["path_points"]
        self.temperature_model_error = options["temperature_model_error"]
        rows = len(data)
        if self.has_temperature:
            self._temperature = _frozen(data["temperature_c"])
            self._stated_t_sigma = _frozen(data["temperature_sigma_c"])
        elif isinstance(self.temperature_model_error, Prior):
            raise InputError("a free temperature_model_error needs temperatures "
                             "(columns temperature_c and temperature_sigma_c) in the table",
                             key="temperature_model_error")
        else:
            self._temperature = self._stated_t_sigma = _frozen(np.full(rows, np.nan))
        self._temperature_sigma = _frozen(combine_sigma(
            self._stated_t_sigma, _fixed(self.temperature_model_error), "", None))
        self._rho = _frozen(data["pt_correlation"] if "pt_correlation" in data.columns
                            else np.zeros(rows))

    @classmethod
    def column_rules(cls, **options):
        low, high = PRESSURE_RANGE
        t_low, t_high = TEMPERATURE_RANGE
        required = [
            ColumnRule("sample", numeric=False),
            ColumnRule("pressure_gpa", low=low, high=high, unit="GPa"),
            ColumnRule("pressure_sigma_gpa", low=1e-4, unit="GPa",
                       why="a 1-sigma uncertainty below 0.0001 GPa is no measurement error"),
        ]
        temperature = [
            ColumnRule("temperature_c", low=t_low, high=t_high, unit="degC",
                       why="outside this range the unit is probably not degC"),
            ColumnRule("temperature_sigma_c", low=1e-2, unit="degC",
                       why="a 1-sigma uncertainty below 0.01 degC is no measurement error"),
        ]
        correlation = [
            ColumnRule("pt_correlation", low=-1.0, high=1.0, low_open=True, high_open=True,
                       requires=_TEMPERATURE_COLUMNS,
                       why="a correlation coefficient lies strictly between -1 and 1"),
        ]
        return required, [temperature, correlation]

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
        t_error = parse_error_setting(spec.get("temperature_model_error", 0.0),
                                      f"{where}.temperature_model_error")
        return {"equilibration": equilibration, "path_points": points,
                "temperature_model_error": t_error}

    def _options(self) -> dict:
        return {"equilibration": self.equilibration, "path_points": self.path_points,
                "temperature_model_error": self.temperature_model_error}

    # ---- data views -------------------------------------------------------------------

    @property
    def has_temperature(self) -> bool:
        """Whether the table has temperatures (``temperature_c``, ``temperature_sigma_c``)."""
        return "temperature_c" in self.data.columns

    @property
    def has_correlation(self) -> bool:
        """Whether the table gives P-T error correlations (``pt_correlation``)."""
        return "pt_correlation" in self.data.columns

    @property
    def temperature(self) -> np.ndarray:
        """Observed temperatures, degC, shape (rows,) (read-only; NaN without them)."""
        return self._temperature

    @property
    def temperature_sigma(self) -> np.ndarray:
        """1-sigma temperature uncertainty incl. a fixed model error, degC, (rows,)."""
        return self._temperature_sigma

    @property
    def pt_correlation(self) -> np.ndarray:
        """Correlation of each row's stated P and T errors, shape (rows,) (0 if not given)."""
        return self._rho

    def total_temperature_sigma(self, errors: Mapping | None = None) -> np.ndarray:
        """Like `total_sigma`, for the temperatures: (rows,) or (n, rows)."""
        return self._sd(self._stated_t_sigma, "temperature_model_error",
                        self._temperature_sigma, errors)

    def observed(self, errors: Mapping | None = None) -> dict[str, np.ndarray]:
        out = super().observed(errors)
        if self.has_temperature:
            out["temperature"] = self.temperature
            out["temperature_sigma"] = self.temperature_sigma \
                if errors is None or "temperature_model_error" not in self.free_errors \
                else self.total_temperature_sigma(errors)
        return out

    # ---- figures ----------------------------------------------------------------------

    def panels(self) -> tuple[Panel, ...]:
        """Pressure (axis downwards) and, with temperatures, temperature, row by row."""
        how = {"top": "at the top of melting", "pooled": "at the mean melting pressure",
               "path": "anywhere on the melting path, weighted by melt production"}
        model = ("model, where the melts equilibrate along the path"
                 if self.equilibration == "path" else "model equilibration pressure")
        out = [Panel("value", "sigma", label=quantity("pressure").axis_label(),
                     title=f"melting pressure, equilibrated {how[self.equilibration]}",
                     model=model, unit="GPa", invert=True)]
        if self.has_temperature:
            out.append(Panel("temperature", "temperature_sigma",
                             label=quantity("temperature").axis_label(),
                             title=f"melting temperature, equilibrated "
                                   f"{how[self.equilibration]}",
                             model=model.replace("pressure", "temperature"), unit="degC",
                             error_option="temperature_model_error"))
        return tuple(out)

    def panel_draws(self, column, key: str) -> tuple[np.ndarray, np.ndarray]:
        """The equilibration points the likelihood uses (the path spread for "path")."""
        pressure, temperature, weight = self.equilibration_points(column)
        points = pressure if key == "value" else temperature
        if points is None:
            raise KeyError(f"{key!r}: this block has no temperatures")
        rows = len(self)
        return (np.repeat(points[:, None, :], rows, axis=1),
                np.repeat(weight[:, None, :], rows, axis=1))

    def pt_observed(self, errors: Mapping | None = None) -> dict[str, np.ndarray]:
        obs = self.observed(errors)
        out = {"pressure": obs["value"], "pressure_sigma": obs["sigma"]}
        if self.has_temperature:
            s_p, s_t = obs["sigma"], obs["temperature_sigma"]
            # The stated errors are correlated; the model errors are added independently.
            out |= {"temperature": obs["temperature"], "temperature_sigma": s_t,
                    "correlation": self._rho * self._stated_sigma * self._stated_t_sigma
                    / (s_p * s_t)}
        return out

    def pt_draws(self, column):
        return self.equilibration_points(column)

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

    def equilibration_points(self, column):
        """Where the model says the melts equilibrate: the distribution the likelihood uses.

        Returns
        -------
        pressure, temperature, weight : ndarray, shape (n, k)
            Candidate points (GPa, degC; temperature None without observed temperatures)
            and their probabilities, summing to 1 over the last axis: the melt-weighted
            path nodes for ``"path"`` (k = `path_points`), the single point for
            ``"top"`` and ``"pooled"`` (k = 1).
        """
        if self.equilibration == "path":
            return self._path(column)
        pressure, temperature = self._point(column)
        temperature = None if temperature is None else temperature[..., None]
        return pressure[..., None], temperature, np.ones(pressure.shape + (1,))

    def _observed_rows(self, errors: Mapping | None):
        """Observed P, T and the total errors of every row, as the likelihood uses them.

        Returns
        -------
        p, t : ndarray, shape (rows,) or (n, rows)
            Observed pressures (GPa) and temperatures (degC; None without them).
        s_p, s_t : ndarray, shape (rows,) or (n, rows)
            Total 1-sigma (stated and model error in quadrature; s_t None without
            temperatures).
        rho : ndarray or None
            Correlation of the total errors, rho sigma_P sigma_T / (s_P s_T): the stated
            errors are correlated, the model errors are added independently.
        """
        s_p = self.total_sigma(errors)
        if not self.has_temperature:
            return self.values, None, s_p, None, None
        s_t = self.total_temperature_sigma(errors)
        rho = self._rho * self._stated_sigma * self._stated_t_sigma / (s_p * s_t)
        return self.values, self.temperature, s_p, s_t, rho

    def _per_row(self, column, errors: Mapping | None) -> np.ndarray:
        """Log-likelihood of every row, shape (n, rows)."""
        p_obs, t_obs, s_p, s_t, rho = self._observed_rows(errors)
        if self.equilibration == "path":
            pressure, temperature, weight = self._path(column)
            # rows on axis -2, path points on the last axis: (n, rows, k)
            dp = p_obs[..., None] - pressure[..., None, :]
            if temperature is None or t_obs is None:
                terms = gaussian_logpdf(dp, 0.0, s_p[..., None])
            else:
                dt = t_obs[..., None] - temperature[..., None, :]
                terms = bivariate_logpdf(dp, dt, s_p[..., None], s_t[..., None],
                                         rho[..., None])
            with np.errstate(divide="ignore"):
                log_w = np.log(weight)[..., None, :]
            return logsumexp(terms + log_w, axis=-1)
        pressure, temperature = self._point(column)
        dp = p_obs - pressure[..., None]
        if temperature is None or t_obs is None:
            return gaussian_logpdf(dp, 0.0, s_p)
        return bivariate_logpdf(dp, t_obs - temperature[..., None], s_p, s_t, rho)

    def pointwise_log_likelihood(self, column, *, parameters: Mapping | None = None,
                                 errors: Mapping | None = None) -> np.ndarray:
        # The distance is 0 wherever melt forms, so the penalty needs no mask.
        penalty = NO_MELT_SLOPE * melting_distance(column, parameters)
        return self._per_row(column, errors) - penalty[..., None]

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

    def simulate(self, column, rng: np.random.Generator, *,
                 errors: Mapping | None = None) -> MeltingPressure:
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
        _, _, s_p, s_t, rho = self._observed_rows(errors)  # errors: scalar or (1,) each
        z_p = rng.standard_normal(rows)
        s_p = np.reshape(s_p, rows)
        new = {self.value_column: point_p + s_p * z_p}
        if point_t is not None:
            z_t = rng.standard_normal(rows)
            s_t, rho = np.reshape(s_t, rows), np.reshape(rho, rows)
            new["temperature_c"] = point_t + s_t * (rho * z_p + np.sqrt(1 - rho**2) * z_t)
        return self._replicate(new, errors)

    def _replicate(self, new: dict[str, np.ndarray], errors: Mapping | None):
        """A copy holding the simulated values `new` (column name -> (rows,))."""
        return self._replace_values(new, **self._options())

    def describe(self) -> str:
        where = {"top": "at the top of melting", "pooled": "at the mean melting pressure",
                 "path": EQUILIBRATION["path"]}
        what = "pressure-temperature point" if self.has_temperature else "pressure"
        what += "" if len(self) == 1 else "s"
        if self.has_correlation:
            what += " with correlated P-T errors"
        extra = describe_errors(self, {"model_error": "GPa",
                                       "temperature_model_error": "degC"})
        return (f"{len(self)} melting {what} from {self.name}, equilibrated "
                f"{where[self.equilibration]}{extra}")
