"""McKenzie & Bickle (1988), J. Petrology 29, 625-679: dry peridotite melting.

The constants are values from memory of that paper. Of the two recollections of the
liquidus arctan scale (2.2169 and 2.2369 GPa) we use 2.2169; below 5 GPa the choice
moves the liquidus by less than 3 degC.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .base import MeltFraction, Parameterization, ThermoConstants

__all__ = ["McKenzieBickle1988", "McKenzieBickleConstants"]


@dataclass(frozen=True)
class McKenzieBickleConstants:
    """Solidus, liquidus and melt-fraction constants (McKenzie & Bickle 1988, from memory)."""

    solidus_t0: float = 1100.0  # degC
    solidus_slope: float = 136.0  # degC/GPa
    solidus_exp_a: float = 4.968e-4  # GPa
    solidus_exp_b: float = 1.2e-2  # 1/degC
    liquidus_t0: float = 1736.2  # degC
    liquidus_slope: float = 4.343  # degC/GPa
    liquidus_arc: float = 180.0  # degC
    liquidus_scale: float = 2.2169  # GPa
    shape_a: float = 0.4256
    shape_b: float = 2.988


@dataclass(frozen=True)
class McKenzieBickle1988(Parameterization):
    """McKenzie & Bickle (1988) dry peridotite melting.

    Examples
    --------
    >>> mb = McKenzieBickle1988()
    >>> round(float(mb.solidus(0.0)), 1)
    1099.9
    """

    constants: McKenzieBickleConstants = field(default_factory=McKenzieBickleConstants)
    thermo: ThermoConstants = field(default_factory=ThermoConstants)
    name = "mckenzie-bickle1988"
    title = "McKenzie & Bickle (1988)"
    supports_water = False

    def _solidus_with_slope(self, p):
        """Invert P(T_s) = (T_s - T0)/s + a exp(b (T_s - T0)) by Newton; returns T, dT/dP."""
        c = self.constants
        t = c.solidus_t0 + c.solidus_slope * p  # right of the root: Newton descends monotonically
        for _ in range(60):
            growth = c.solidus_exp_a * np.exp(c.solidus_exp_b * (t - c.solidus_t0))
            residual = (t - c.solidus_t0) / c.solidus_slope + growth - p
            slope = 1.0 / c.solidus_slope + c.solidus_exp_b * growth
            step = residual / slope
            t = t - step
            if np.all(np.abs(step) < 1e-10):
                break
        growth = c.solidus_exp_a * np.exp(c.solidus_exp_b * (t - c.solidus_t0))
        return t, 1.0 / (1.0 / c.solidus_slope + c.solidus_exp_b * growth)

    def solidus(self, pressure):
        return self._solidus_with_slope(np.asarray(pressure, float))[0]

    def _liquidus_with_slope(self, p):
        c = self.constants
        ratio = p / c.liquidus_scale
        t = c.liquidus_t0 + c.liquidus_slope * p + c.liquidus_arc * np.arctan(ratio)
        dt = c.liquidus_slope + c.liquidus_arc / (c.liquidus_scale * (1.0 + ratio**2))
        return t, dt

    def liquidus(self, pressure):
        return self._liquidus_with_slope(np.asarray(pressure, float))[0]

    def dry_melt_fraction(self, tau, pressure) -> MeltFraction:
        """F = 0.5 + T' + (T'^2 - 0.25)(a + b T'), T' the scaled supersolidus temperature."""
        c = self.constants
        tau, p = np.broadcast_arrays(np.asarray(tau, float), np.asarray(pressure, float))
        t_s, d_s = self._solidus_with_slope(p)
        t_l, d_l = self._liquidus_with_slope(p)
        span = t_l - t_s
        scaled = (tau - 0.5 * (t_s + t_l)) / span
        inside = np.abs(scaled) < 0.5
        s = np.clip(scaled, -0.5, 0.5)
        frac = 0.5 + s + (s * s - 0.25) * (c.shape_a + c.shape_b * s)
        d_frac = 1.0 + 2.0 * s * (c.shape_a + c.shape_b * s) + c.shape_b * (s * s - 0.25)
        d_scaled_dp = -(0.5 * (d_s + d_l) + s * (d_l - d_s)) / span
        d_t = np.where(inside, d_frac / span, 0.0)
        d_p = np.where(inside, d_frac * d_scaled_dp, 0.0)
        return MeltFraction(frac, d_t, d_p)
