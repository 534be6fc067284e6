"""The common interface of the melt thermobarometers.

A `Thermobarometer` names a published method, its citation, its calibration errors
(1σ) and calibration range, and gives ``temperature(melt, h2o=, pressure_gpa=)`` in °C
and ``pressure(melt, h2o=, temperature_c=)`` in GPa for primary-melt compositions
(wt% in the order of `MELT_OXIDES`, of the whole melt; H2O in wt%). `solve` returns
both: in sequence where the thermometer does not need pressure, else by fixed-point
iteration (``joint`` is True).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["Thermobarometer"]

TemperatureFn = Callable[..., NDArray[np.float64]]
PressureFn = Callable[..., NDArray[np.float64]]


@dataclass(frozen=True)
class Thermobarometer:
    """A melt thermobarometer.

    Attributes
    ----------
    key : str
        Short name used to choose it (e.g. ``"lee2009"``).
    citation : str
        The publication(s), with equation numbers.
    sigma_p_gpa, sigma_t_c : float
        Calibration errors (1σ) of pressure (GPa) and temperature (°C), taken as
        independent.
    p_range_gpa, t_range_c : tuple of float
        Calibration range (inclusive), for flagging extrapolation.
    joint : bool
        True when the thermometer needs pressure, so P and T are solved together.
    temperature, pressure : callable
        ``temperature(melt, *, h2o, pressure_gpa)`` -> °C and
        ``pressure(melt, *, h2o, temperature_c)`` -> GPa.
    note : str
        What a user must know (pairing, what is unverified).
    """

    key: str
    citation: str
    sigma_p_gpa: float
    sigma_t_c: float
    p_range_gpa: tuple[float, float]
    t_range_c: tuple[float, float]
    joint: bool
    temperature: TemperatureFn
    pressure: PressureFn
    note: str = ""

    def solve(self, melt: ArrayLike, *, h2o: ArrayLike = 0.0, iterations: int = 30,
              start_gpa: float = 1.5) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Pressure (GPa) and temperature (°C) of equilibration of primary melts.

        Parameters
        ----------
        melt : array_like, shape ``S + (11,)``
            Primary melts, wt% of the whole melt, `MELT_OXIDES` order.
        h2o : array_like, broadcastable to ``S``
            Melt H2O, wt%.
        iterations : int
            Fixed-point rounds when ``joint`` (the map contracts by a factor ~0.1 per
            round for basalts, so 30 rounds reach machine precision).
        start_gpa : float
            Starting pressure of the iteration.

        Returns
        -------
        pressure_gpa, temperature_c : ndarray, shape ``S``
        """
        melt = np.asarray(melt, dtype=float)
        if not self.joint:
            t = self.temperature(melt, h2o=h2o, pressure_gpa=None)
            return self.pressure(melt, h2o=h2o, temperature_c=t), t
        p = np.full(melt.shape[:-1], start_gpa)
        for _ in range(iterations):
            t = self.temperature(melt, h2o=h2o, pressure_gpa=p)
            p = self.pressure(melt, h2o=h2o, temperature_c=t)
        return p, t

    def outside_calibration(self, pressure_gpa: ArrayLike,
                            temperature_c: ArrayLike) -> NDArray[np.bool_]:
        """True where (P, T) lies outside the calibration range (extrapolation)."""
        p, t = np.asarray(pressure_gpa), np.asarray(temperature_c)
        return ((p < self.p_range_gpa[0]) | (p > self.p_range_gpa[1])
                | (t < self.t_range_c[0]) | (t > self.t_range_c[1]))
