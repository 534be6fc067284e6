"""Checks of forward-model inputs, done once at the boundary."""

from __future__ import annotations

import numpy as np

from .quantities import QUANTITIES

__all__ = ["EXCLUSIVE_LOWER_BOUND", "PARAMETER_DOMAIN", "PARAMETER_UNITS", "DomainError",
           "check_inputs", "in_domain"]

#: Valid range (inclusive unless noted) of every numeric input of ``melt_column``.
#: The tabulated fast path covers exactly this box; the active upwelling must be > 0.
PARAMETER_DOMAIN: dict[str, tuple[float, float]] = {
    "potential_temperature": (1000.0, 1800.0),  # degC
    "lithosphere_thickness": (0.0, 400.0),  # km
    "water": (0.0, 1000.0),  # ppm H2O of the bulk source
    "active_upwelling": (0.0, 20.0),  # dimensionless, lower bound exclusive
    "solidus_offset": (-100.0, 100.0),  # degC
    "crust_density": (2000.0, 3500.0),  # kg/m^3
    "mantle_density": (2500.0, 4000.0),  # kg/m^3
}

#: Inputs whose lower bound in ``PARAMETER_DOMAIN`` is exclusive.
EXCLUSIVE_LOWER_BOUND = frozenset({"active_upwelling"})

#: Unit of every numeric input ("-" = dimensionless), from the table of quantities.
PARAMETER_UNITS: dict[str, str] = {name: QUANTITIES[name].unit for name in PARAMETER_DOMAIN}


class DomainError(ValueError):
    """An input lies outside the forward model's domain (carries the name and range)."""

    def __init__(self, name: str, value: float, low: float, high: float):
        self.name, self.value, self.low, self.high = name, value, low, high
        unit = PARAMETER_UNITS.get(name, "").strip("-")
        opening = "(" if name in EXCLUSIVE_LOWER_BOUND else "["  # interval notation
        shown = "not a number" if np.isnan(value) else f"{value:g} {unit}"
        super().__init__(
            f"{name} = {shown} is outside the model domain "
            f"{opening}{low:g}, {high:g}] {unit}".replace("  ", " ").rstrip()
        )


def _outside(name: str, values: np.ndarray) -> np.ndarray:
    low, high = PARAMETER_DOMAIN[name]
    bad = ~np.isfinite(values) | (values < low) | (values > high)
    if name in EXCLUSIVE_LOWER_BOUND:
        bad |= values <= low
    return bad


def in_domain(**values) -> np.ndarray:
    """Boolean mask, broadcast over the inputs, of points inside ``PARAMETER_DOMAIN``."""
    arrays = {k: np.asarray(v, float) for k, v in values.items()}
    shape = np.broadcast_shapes(*(a.shape for a in arrays.values()))
    ok = np.ones(shape, bool)
    for name, arr in arrays.items():
        ok &= ~_outside(name, arr)
    return ok


def check_inputs(**values) -> dict[str, np.ndarray]:
    """Convert inputs to float arrays and raise ``DomainError`` on the first bad one.

    A missing value (None) or a masked entry of a masked array is refused by name rather
    than computed with (numpy would turn None into NaN and drop the mask silently).
    """
    arrays = {}
    for name, value in values.items():
        if value is None:
            raise ValueError(f"{name} is missing (None); give a number or an array")
        if np.ma.is_masked(value):
            raise ValueError(f"{name} has masked entries; remove or fill them first "
                             "(lidmelt does not guess a value for a masked point)")
        arr = np.asarray(np.ma.getdata(value), dtype=float)
        bad = _outside(name, arr)
        if np.any(bad):
            low, high = PARAMETER_DOMAIN[name]
            raise DomainError(name, float(arr[bad].flat[0]), low, high)
        arrays[name] = arr
    return arrays
