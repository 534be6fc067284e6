"""The interface every melting parameterization implements.

A parameterization gives the melting curves of a peridotite source and its melt
fraction. Internally the melting path is integrated in the *dry-equivalent
temperature* ``tau``: the temperature at which the dry source would have the same
melt fraction. For a dry source ``tau`` is the temperature itself; a hydrous source
is colder by the water solidus depression ``dT(F, P, water)`` (Katz et al. 2003,
eq. 16 in substance), so ``T = tau - dT``. Both ``F(tau, P)`` and ``dT`` are explicit,
which keeps the isentropic path an explicit ODE (no implicit solve per step).
"""

from __future__ import annotations

import abc
from dataclasses import dataclass

import numpy as np

__all__ = ["MeltFraction", "Parameterization", "ThermoConstants"]


@dataclass(frozen=True)
class ThermoConstants:
    """Thermodynamic constants of the isentropic path (Katz et al. 2003, Table 2).

    ``alpha_solid``, ``alpha_melt`` and the densities are values from memory of the
    same table. Both parameterizations share them, so their differences come from the
    melting curves alone.
    """

    heat_capacity: float = 1000.0  # c_p, J/kg/K
    entropy_of_fusion: float = 300.0  # Delta S, J/kg/K
    alpha_solid: float = 40e-6  # thermal expansivity of the solid, 1/K
    alpha_melt: float = 68e-6  # thermal expansivity of the melt, 1/K
    density_solid: float = 3300.0  # kg/m^3
    density_melt: float = 2900.0  # kg/m^3

    @property
    def adiabat_coefficient(self) -> float:
        """alpha_s / (rho_s c_p) in 1/GPa: T(P) = Tp exp(coef * P), T in kelvin."""
        return self.alpha_solid / (self.density_solid * self.heat_capacity) * 1e9


@dataclass(frozen=True)
class MeltFraction:
    """Melt fraction and its partial derivatives (1/K and 1/GPa)."""

    fraction: np.ndarray
    d_temperature: np.ndarray
    d_pressure: np.ndarray


class Parameterization(abc.ABC):
    """Melting curves and melt fraction of a mantle source.

    Subclasses implement the dry curves and ``dry_melt_fraction``; hydrous ones also
    override ``water_depression``. Temperatures are in degC, pressures in GPa, water
    in ppm by weight of the bulk source.
    """

    name: str = ""
    title: str = ""
    supports_water: bool = False
    thermo: ThermoConstants

    @abc.abstractmethod
    def solidus(self, pressure):
        """Dry solidus temperature (degC) at ``pressure`` (GPa)."""

    @abc.abstractmethod
    def liquidus(self, pressure):
        """Liquidus temperature (degC) at ``pressure`` (GPa)."""

    @abc.abstractmethod
    def dry_melt_fraction(self, tau, pressure) -> MeltFraction:
        """Melt fraction of the dry source at temperature ``tau`` with partials."""

    def dry_fraction(self, tau, pressure) -> np.ndarray:
        """The melt fraction of ``dry_melt_fraction`` alone (override if it is cheaper)."""
        return self.dry_melt_fraction(tau, pressure).fraction

    def curves(self, pressure) -> dict[str, np.ndarray]:
        """Named melting curves (degC) for plotting, shallowest first."""
        return {"solidus": self.solidus(pressure), "liquidus": self.liquidus(pressure)}

    def water_depression(self, fraction, pressure, water):
        """Solidus lowering by water: ``(dT, d dT/dF, d dT/dP)`` in K, K, K/GPa.

        A dry parameterization has none.
        """
        zero = np.zeros(np.broadcast(fraction, pressure, water).shape)
        return zero, zero, zero

    def wet_solidus(self, pressure, water=0.0):
        """Solidus (degC) of a source with ``water`` ppm, at vanishing melt fraction."""
        depression, _, _ = self.water_depression(0.0, pressure, water)
        return self.solidus(pressure) - depression

    def melt_fraction(self, temperature, pressure, water=0.0, *, solidus_offset=0.0):
        """Equilibrium melt fraction ``F(T, P, water)`` and its partials in T and P.

        For a hydrous source F is implicit, ``F = F_dry(T + dT(F, P), P)`` (Katz et
        al. 2003); it is solved as a scalar root per point (slow, exact). The partials
        follow from the implicit-function theorem. ``solidus_offset`` (degC) moves all
        melting curves together.

        Examples
        --------
        >>> from lidmelt.forward import get_parameterization
        >>> katz = get_parameterization("katz2003")
        >>> round(float(katz.melt_fraction(1300.0, 1.0).fraction), 4)
        0.1293
        """
        t, p, w = np.broadcast_arrays(*map(np.asarray, (temperature, pressure, water)))
        t = t.astype(float) - solidus_offset
        tau = np.vectorize(self._solve_tau, otypes=[float])(t, p, w)
        dry = self.dry_melt_fraction(tau, p)
        _, dt_df, dt_dp = self.water_depression(dry.fraction, p, w)
        # dF = F_tau (dT + dT_F dF + dT_P dP) + F_P dP, solved for dF.
        denom = 1.0 - dry.d_temperature * dt_df
        return MeltFraction(
            fraction=dry.fraction,
            d_temperature=dry.d_temperature / denom,
            d_pressure=(dry.d_temperature * dt_dp + dry.d_pressure) / denom,
        )

    def _solve_tau(self, temperature, pressure, water):
        """Dry-equivalent temperature for one point: T = tau - dT(F(tau), P)."""
        if water == 0.0 or not self.supports_water:
            return float(temperature)

        def mismatch(tau):
            frac = self.dry_melt_fraction(tau, pressure).fraction
            return tau - self.water_depression(frac, pressure, water)[0] - temperature

        from scipy.optimize import brentq  # only this slow exact route needs scipy

        low = float(temperature)
        high = low + float(self.water_depression(0.0, pressure, water)[0]) + 1e-9
        return brentq(mismatch, low, high, xtol=1e-12, rtol=1e-14)
