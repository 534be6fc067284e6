"""Prior distributions for the free parameters of a study.

Four families, each a small frozen dataclass with vectorised, normalised densities:

========================  ==========================================  =====================
study file                class                                       support
========================  ==========================================  =====================
``prior = "uniform"``     `Uniform` (min, max)                        [min, max]
``prior = "normal"``      `Normal` (mean, sd); with min and/or max a  (-inf, inf)
                          `TruncatedNormal`
``"truncated-normal"``    `TruncatedNormal` (mean, sd, min, max)      [min, max]
``"log-uniform"``         `LogUniform` (min, max), min > 0            [min, max]
========================  ==========================================  =====================

``{ value = x }`` fixes a parameter instead (`prior_from_spec` then returns the float).
Densities are evaluated by hand from the closed forms (numpy and scipy.special only), so
the tests can check them against `scipy.stats` as an independent route.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from dataclasses import dataclass
from numbers import Real
from typing import ClassVar

import numpy as np
from scipy import special

from ..errors import InputError, suggest

__all__ = [
    "PRIOR_NAMES",
    "LogUniform",
    "Normal",
    "Prior",
    "TruncatedNormal",
    "Uniform",
    "prior_from_spec",
]

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)
_HALF_ULP = 2.0**-54  # shifts Generator.random() from [0, 1) into the open interval (0, 1)


class Prior(ABC):
    """Interface of a one-dimensional prior distribution.

    Every method is vectorised over its array argument and returns an array of the same
    shape (float64).
    """

    family: ClassVar[str]

    @property
    @abstractmethod
    def bounds(self) -> tuple[float, float]:
        """(low, high) of the support; either may be infinite."""

    @abstractmethod
    def logpdf(self, x) -> np.ndarray:
        """Natural log of the normalised density at `x`; ``-inf`` outside the support."""

    @abstractmethod
    def cdf(self, x) -> np.ndarray:
        """Cumulative distribution function at `x`."""

    @abstractmethod
    def ppf(self, q) -> np.ndarray:
        """Quantile function (inverse of `cdf`) at probabilities `q` in [0, 1]."""

    @abstractmethod
    def describe(self, *, unit: str = "") -> str:
        """One-line description in words, e.g. ``"uniform on [1200, 1700] degC"``."""

    def sample(self, rng: np.random.Generator, size=None) -> np.ndarray:
        """Draw from the prior by inverse-transform sampling.

        Parameters
        ----------
        rng : numpy.random.Generator
            Source of randomness (the only one used).
        size : int or tuple of int, optional
            Output shape; None gives a 0-d array.

        Returns
        -------
        numpy.ndarray
            Draws, shape `size`.
        """
        if not isinstance(rng, np.random.Generator):
            raise TypeError(f"rng must be a numpy.random.Generator, got {type(rng).__name__}")
        return self.ppf(rng.random(size) + _HALF_ULP)


def _as_array(x) -> np.ndarray:
    return np.asarray(x, dtype=float)


def _log_ndtr_diff(b: float, a: float) -> float:
    """log(Phi(b) - Phi(a)) for a < b, accurate in either tail."""
    if a > 0.0:  # right tail: use the mirror image, where Phi is small and exact in logs
        a, b = -b, -a
    hi, lo = special.log_ndtr(b), special.log_ndtr(a)
    return float(hi + np.log1p(-np.exp(lo - hi)))


def _fmt(value: float) -> str:
    return f"{value:g}"


def _with_unit(text: str, unit: str) -> str:
    return f"{text} {unit}" if unit else text


@dataclass(frozen=True)
class Uniform(Prior):
    """Uniform prior on [min, max].

    Density 1 / (max - min) inside, 0 outside.

    Examples
    --------
    >>> p = Uniform(1200.0, 1700.0)
    >>> bool(float(p.logpdf(1400.0)) == -np.log(500.0))
    True
    >>> p.describe(unit="degC")
    'uniform on [1200, 1700] degC'
    """

    min: float
    max: float
    family: ClassVar[str] = "uniform"

    def __post_init__(self) -> None:
        _check_interval(self.min, self.max)

    @property
    def bounds(self) -> tuple[float, float]:
        return (float(self.min), float(self.max))

    def logpdf(self, x) -> np.ndarray:
        x = _as_array(x)
        inside = (x >= self.min) & (x <= self.max)
        return np.where(inside, -math.log(self.max - self.min), -np.inf)

    def cdf(self, x) -> np.ndarray:
        return np.clip((_as_array(x) - self.min) / (self.max - self.min), 0.0, 1.0)

    def ppf(self, q) -> np.ndarray:
        return self.min + _as_array(q) * (self.max - self.min)

    def describe(self, *, unit: str = "") -> str:
        return _with_unit(f"uniform on [{_fmt(self.min)}, {_fmt(self.max)}]", unit)


@dataclass(frozen=True)
class Normal(Prior):
    """Normal (Gaussian) prior with mean `mean` and standard deviation `sd` > 0.

    Examples
    --------
    >>> Normal(0.0, 20.0).describe(unit="degC")
    'normal with mean 0 and sd 20 degC'
    """

    mean: float
    sd: float
    family: ClassVar[str] = "normal"

    def __post_init__(self) -> None:
        _check_finite(mean=self.mean, sd=self.sd)
        if self.sd <= 0:
            raise ValueError(f"sd = {_fmt(self.sd)} must be > 0")

    @property
    def bounds(self) -> tuple[float, float]:
        return (-math.inf, math.inf)

    def logpdf(self, x) -> np.ndarray:
        z = (_as_array(x) - self.mean) / self.sd
        return -0.5 * z * z - math.log(self.sd) - _LOG_SQRT_2PI

    def cdf(self, x) -> np.ndarray:
        return special.ndtr((_as_array(x) - self.mean) / self.sd)

    def ppf(self, q) -> np.ndarray:
        return self.mean + self.sd * special.ndtri(_as_array(q))

    def describe(self, *, unit: str = "") -> str:
        return _with_unit(f"normal with mean {_fmt(self.mean)} and sd {_fmt(self.sd)}", unit)


@dataclass(frozen=True)
class TruncatedNormal(Prior):
    """Normal prior restricted to [min, max] and renormalised.

    One bound may be infinite (one-sided truncation). The density is
    ``phi((x - mean) / sd) / (sd * (Phi(b) - Phi(a)))`` with standardised bounds a, b.

    Examples
    --------
    >>> p = TruncatedNormal(0.0, 1.0, 0.0, math.inf)   # half-normal
    >>> round(float(np.exp(p.logpdf(0.0))), 6)         # 2 * phi(0) = 0.797885
    0.797885
    """

    mean: float
    sd: float
    min: float = -math.inf
    max: float = math.inf
    family: ClassVar[str] = "truncated-normal"

    def __post_init__(self) -> None:
        _check_finite(mean=self.mean, sd=self.sd)
        if self.sd <= 0:
            raise ValueError(f"sd = {_fmt(self.sd)} must be > 0")
        if math.isnan(self.min) or math.isnan(self.max) or not self.min < self.max:
            raise ValueError(
                f"min ({_fmt(self.min)}) must be less than max ({_fmt(self.max)})")
        if math.isinf(self.min) and math.isinf(self.max):
            raise ValueError("a truncated normal needs a finite min or max; use Normal")
        if self._a > 30.0 or self._b < -30.0:  # beyond ~37 sd, Phi underflows to 0
            raise ValueError(
                f"the interval [{_fmt(self.min)}, {_fmt(self.max)}] lies more than 30 sd "
                f"from the mean {_fmt(self.mean)} (sd {_fmt(self.sd)}) and holds almost no "
                "probability; check the mean, sd and bounds"
            )

    @property
    def _a(self) -> float:
        return (self.min - self.mean) / self.sd

    @property
    def _b(self) -> float:
        return (self.max - self.mean) / self.sd

    @property
    def _log_norm(self) -> float:
        return _log_ndtr_diff(self._b, self._a)

    @property
    def bounds(self) -> tuple[float, float]:
        return (float(self.min), float(self.max))

    def logpdf(self, x) -> np.ndarray:
        x = _as_array(x)
        z = (x - self.mean) / self.sd
        inside = (x >= self.min) & (x <= self.max)
        dens = -0.5 * z * z - math.log(self.sd) - _LOG_SQRT_2PI - self._log_norm
        return np.where(inside, dens, -np.inf)

    def cdf(self, x) -> np.ndarray:
        x = np.clip(_as_array(x), self.min, self.max)
        lower = special.ndtr(self._a)
        frac = (special.ndtr((x - self.mean) / self.sd) - lower) / np.exp(self._log_norm)
        return np.clip(frac, 0.0, 1.0)

    def ppf(self, q) -> np.ndarray:
        q = _as_array(q)
        a, b, sign = self._a, self._b, 1.0
        if a > 0.0:  # right tail: invert the mirror image for accuracy
            a, b, sign = -b, -a, -1.0
            q = 1.0 - q
        lower, upper = special.ndtr(a), special.ndtr(b)
        z = special.ndtri(lower + q * (upper - lower))
        return np.clip(self.mean + sign * self.sd * z, self.min, self.max)

    def describe(self, *, unit: str = "") -> str:
        text = (
            f"normal with mean {_fmt(self.mean)} and sd {_fmt(self.sd)} "
            f"truncated to [{_fmt(self.min)}, {_fmt(self.max)}]"
        )
        return _with_unit(text, unit)


@dataclass(frozen=True)
class LogUniform(Prior):
    """Log-uniform prior on [min, max], 0 < min < max: density 1 / (x ln(max / min)).

    Examples
    --------
    >>> LogUniform(1.0, 100.0).describe(unit="ppm")
    'log-uniform on [1, 100] ppm'
    """

    min: float
    max: float
    family: ClassVar[str] = "log-uniform"

    def __post_init__(self) -> None:
        _check_interval(self.min, self.max)
        if self.min <= 0:
            raise ValueError(f"min = {_fmt(self.min)} must be > 0 for a log-uniform prior")

    @property
    def bounds(self) -> tuple[float, float]:
        return (float(self.min), float(self.max))

    @property
    def _log_span(self) -> float:
        return math.log(self.max / self.min)

    def logpdf(self, x) -> np.ndarray:
        x = _as_array(x)
        inside = (x >= self.min) & (x <= self.max)
        with np.errstate(divide="ignore", invalid="ignore"):
            dens = -np.log(x) - math.log(self._log_span)
        return np.where(inside, dens, -np.inf)

    def cdf(self, x) -> np.ndarray:
        x = np.clip(_as_array(x), self.min, self.max)
        return np.log(x / self.min) / self._log_span

    def ppf(self, q) -> np.ndarray:
        return self.min * np.exp(_as_array(q) * self._log_span)

    def describe(self, *, unit: str = "") -> str:
        return _with_unit(f"log-uniform on [{_fmt(self.min)}, {_fmt(self.max)}]", unit)


def _check_finite(**values: float) -> None:
    for name, value in values.items():
        if not math.isfinite(value):
            raise ValueError(f"{name} = {value} must be a finite number")


def _check_interval(low: float, high: float) -> None:
    _check_finite(min=low, max=high)
    if not low < high:
        raise ValueError(f"min ({_fmt(low)}) must be less than max ({_fmt(high)})")


# Keys each family takes: (required, optional).
_FAMILY_KEYS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "uniform": (("min", "max"), ()),
    "normal": (("mean", "sd"), ("min", "max")),
    "truncated-normal": (("mean", "sd"), ("min", "max")),
    "log-uniform": (("min", "max"), ()),
}
PRIOR_NAMES: tuple[str, ...] = tuple(_FAMILY_KEYS)
_ALL_KEYS = ("value", "prior", "min", "max", "mean", "sd")


def prior_from_spec(
    name: str,
    spec,
    *,
    where: str,
    file=None,
    domain: tuple[float, float] | None = None,
    exclusive_low: bool = False,
) -> Prior | float:
    """Build a prior (free parameter) or a float (fixed parameter) from a study-file table.

    Parameters
    ----------
    name : str
        Parameter name, used in messages.
    spec : dict
        The table, e.g. ``{"prior": "uniform", "min": 0.0, "max": 150.0}`` or
        ``{"value": 0.0}``.
    where : str
        Dotted key of the table in the study file, e.g. ``"parameters.water"``; every
        `InputError` names it.
    file : str or path-like, optional
        Study file, named in error messages.
    domain : (float, float), optional
        Physical range (low, high) of the parameter, inclusive. A fixed value and every
        finite prior bound must lie inside it. A normal prior whose tails reach beyond it
        is returned as a `TruncatedNormal` cut to the domain, so that the prior is the
        normalised density the sampler actually explores.
    exclusive_low : bool, default False
        The low end of `domain` itself is not allowed for a fixed value (e.g. an active
        upwelling of exactly 0).

    Returns
    -------
    Prior or float

    Raises
    ------
    InputError
        Not a table, misspelt or missing key, non-numeric or non-finite number, unknown
        prior, min >= max, sd <= 0, log-uniform min <= 0, value or range outside `domain`.

    Examples
    --------
    >>> prior_from_spec("lithosphere_thickness", {"prior": "uniform", "min": 0, "max": 150},
    ...                 where="parameters.lithosphere_thickness")
    Uniform(min=0.0, max=150.0)
    >>> prior_from_spec("water", {"value": 0}, where="parameters.water")
    0.0
    """
    def fail(message: str, key: str = where) -> InputError:
        return InputError(message, file=file, key=key)

    if not isinstance(spec, dict):
        raise fail(
            "expected a table such as { value = ... } or { prior = \"uniform\", "
            f"min = ..., max = ... }} for '{name}', got {spec!r}"
        )
    if "value" in spec:
        return _fixed_from_spec(name, spec, where, fail, domain, exclusive_low)
    if "prior" not in spec:
        unknown = [k for k in spec if k not in _ALL_KEYS]
        if unknown:
            raise fail(f"unknown key '{unknown[0]}'" + suggest(unknown[0], _ALL_KEYS),
                       f"{where}.{unknown[0]}")
        raise fail(
            f"'{name}' needs either value = <number> (fixed) or prior = one of "
            + ", ".join(f"'{p}'" for p in PRIOR_NAMES) + " (free)"
        )
    family = spec["prior"]
    if family not in _FAMILY_KEYS:
        raise fail(f"unknown prior {family!r}" + suggest(str(family), PRIOR_NAMES),
                   f"{where}.prior")
    numbers = _prior_numbers(spec, family, where, fail)
    prior = _build_prior(family, numbers, fail, where)
    return _fit_to_domain(prior, name, domain, fail, where)


def _number(value, key: str, fail) -> float:
    if isinstance(value, bool) or not isinstance(value, Real):
        raise fail(f"{value!r} is not a number; write a plain number such as 1.0", key)
    value = float(value)
    if not math.isfinite(value):
        raise fail(f"{value} is not a finite number", key)
    return value


def _fixed_from_spec(name, spec, where, fail, domain, exclusive_low) -> float:
    extra = [k for k in spec if k != "value"]
    if extra:
        raise fail(
            f"'{name}' has value = ... (fixed) and also '{extra[0]}'; remove "
            "'value' to make it free, or the other keys to keep it fixed",
            f"{where}.{extra[0]}",
        )
    value = _number(spec["value"], f"{where}.value", fail)
    if domain is not None:
        low, high = float(domain[0]), float(domain[1])
        too_low = value <= low if exclusive_low else value < low
        if too_low or value > high:
            bracket = "(" if exclusive_low else "["
            raise fail(
                f"fixed value {_fmt(value)} is outside the physical range "
                f"{bracket}{_fmt(low)}, {_fmt(high)}] of '{name}'; choose a value inside it",
                f"{where}.value",
            )
    return value


def _prior_numbers(spec, family, where, fail) -> dict[str, float]:
    required, optional = _FAMILY_KEYS[family]
    allowed = ("prior", *required, *optional)
    for key in spec:
        if key not in allowed:
            hint = (f"; a {family} prior takes " + ", ".join(required + optional)
                    if key in _ALL_KEYS else suggest(key, allowed))
            raise fail(f"unknown key '{key}' for a {family} prior" + hint, f"{where}.{key}")
    for key in required:
        if key not in spec:
            raise fail(
                f"a {family} prior needs '{key}' (it takes " + ", ".join(required + optional)
                + ")", f"{where}.{key}"
            )
    return {key: _number(spec[key], f"{where}.{key}", fail) for key in spec if key != "prior"}


def _build_prior(family: str, numbers: dict[str, float], fail, where: str) -> Prior:
    if "min" in numbers and "max" in numbers and not numbers["min"] < numbers["max"]:
        raise fail(
            f"min ({_fmt(numbers['min'])}) must be less than max ({_fmt(numbers['max'])}); "
            "swap or widen them", f"{where}.min"
        )
    if "sd" in numbers and numbers["sd"] <= 0:
        raise fail(f"sd = {_fmt(numbers['sd'])} must be > 0", f"{where}.sd")
    if family == "truncated-normal" and "min" not in numbers and "max" not in numbers:
        raise fail("a truncated-normal prior needs min, max or both; or use "
                   "prior = \"normal\"", where)
    if family == "log-uniform" and numbers["min"] <= 0:
        raise fail(f"min = {_fmt(numbers['min'])} must be > 0 for a log-uniform prior",
                   f"{where}.min")
    try:
        if family == "uniform":
            return Uniform(numbers["min"], numbers["max"])
        if family == "log-uniform":
            return LogUniform(numbers["min"], numbers["max"])
        if "min" in numbers or "max" in numbers:
            return TruncatedNormal(numbers["mean"], numbers["sd"],
                                   numbers.get("min", -math.inf), numbers.get("max", math.inf))
        return Normal(numbers["mean"], numbers["sd"])
    except ValueError as err:  # e.g. a truncation interval with no probability mass
        raise fail(str(err)) from None


def _fit_to_domain(prior: Prior, name, domain, fail, where) -> Prior:
    if domain is None:
        return prior
    low, high = float(domain[0]), float(domain[1])
    p_low, p_high = prior.bounds
    rng_text = f"[{_fmt(low)}, {_fmt(high)}]"
    if isinstance(prior, Normal):
        if not low <= prior.mean <= high:
            raise fail(f"mean {_fmt(prior.mean)} is outside the physical range {rng_text} "
                       f"of '{name}'", f"{where}.mean")
        return TruncatedNormal(prior.mean, prior.sd, low, high)
    for key, bound in (("min", p_low), ("max", p_high)):
        if math.isfinite(bound) and not low <= bound <= high:
            raise fail(
                f"prior {key} {_fmt(bound)} is outside the physical range {rng_text} of "
                f"'{name}'; keep the prior inside it", f"{where}.{key}"
            )
    if isinstance(prior, TruncatedNormal) and (math.isinf(p_low) or math.isinf(p_high)):
        return TruncatedNormal(prior.mean, prior.sd, max(p_low, low), min(p_high, high))
    return prior
