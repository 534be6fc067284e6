"""Katz, Spiegelman & Langmuir (2003), G-cubed 4(9) 1073: hydrous peridotite melting."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .base import MeltFraction, Parameterization, ThermoConstants

__all__ = ["Katz2003", "KatzConstants"]


@dataclass(frozen=True)
class KatzConstants:
    """Melting constants of Katz et al. (2003), Table 2 (M_cpx is a value from memory).

    Edit with :func:`dataclasses.replace`, e.g. a more fertile source
    ``replace(KatzConstants(), cpx_mode=0.25)``.
    """

    a1: float = 1085.7  # solidus, degC
    a2: float = 132.9  # degC/GPa
    a3: float = -5.1  # degC/GPa^2
    b1: float = 1475.0  # lherzolite liquidus
    b2: float = 80.0
    b3: float = -3.2
    c1: float = 1780.0  # liquidus
    c2: float = 45.0
    c3: float = -2.0
    r1: float = 0.50  # cpx reaction coefficient R_cpx = r1 + r2 P
    r2: float = 0.08  # 1/GPa
    beta1: float = 1.50
    beta2: float = 1.50
    cpx_mode: float = 0.17  # M_cpx, modal cpx of the source
    water_k: float = 43.0  # K, degC / wt%^gamma
    water_gamma: float = 0.75
    sat_chi1: float = 12.00  # wt% / GPa^lambda
    sat_chi2: float = 1.00  # wt% / GPa
    sat_lambda: float = 0.60
    water_partition: float = 0.01  # bulk D_H2O


def _power(x, exponent):
    """x ** exponent, by square or cube roots for the published exponents (3/2, 2/3)."""
    if exponent == 1.5:
        return x * np.sqrt(x)
    if exponent == 2.0 / 3.0:
        return np.cbrt(x * x)
    return x ** exponent


def _quadratic(c0, c1, c2, p):
    return c0 + c1 * p + c2 * p * p, c1 + 2.0 * c2 * p


@dataclass(frozen=True)
class Katz2003(Parameterization):
    """Katz et al. (2003) hydrous peridotite melting (the lidmelt default).

    Examples
    --------
    >>> katz = Katz2003()
    >>> round(float(katz.solidus(1.0)), 1)
    1213.5
    """

    constants: KatzConstants = field(default_factory=KatzConstants)
    thermo: ThermoConstants = field(default_factory=ThermoConstants)
    name = "katz2003"
    title = "Katz et al. (2003)"
    supports_water = True

    def solidus(self, pressure):
        c = self.constants
        return _quadratic(c.a1, c.a2, c.a3, np.asarray(pressure, float))[0]

    def lherzolite_out(self, pressure):
        """Temperature (degC) at which clinopyroxene is exhausted (Katz et al. 2003, eq. 8)."""
        return self._cpx_out(np.asarray(pressure, float))[1]

    def liquidus(self, pressure):
        c = self.constants
        return _quadratic(c.c1, c.c2, c.c3, np.asarray(pressure, float))[0]

    def curves(self, pressure):
        return {
            "solidus": self.solidus(pressure),
            "lherzolite-out": self.lherzolite_out(pressure),
            "liquidus": self.liquidus(pressure),
        }

    def _cpx_out(self, p):
        """F, T and their P-derivatives at clinopyroxene exhaustion (eqs. 7-8)."""
        c = self.constants
        t_sol, d_sol = _quadratic(c.a1, c.a2, c.a3, p)
        t_lz, d_lz = _quadratic(c.b1, c.b2, c.b3, p)
        reaction = c.r1 + c.r2 * p
        f_cpx = c.cpx_mode / reaction
        df_cpx = -c.cpx_mode * c.r2 / reaction**2
        root = f_cpx ** (1.0 / c.beta1)
        t_cpx = root * (t_lz - t_sol) + t_sol
        dt_cpx = (root / (c.beta1 * f_cpx)) * df_cpx * (t_lz - t_sol) + root * (d_lz - d_sol) + d_sol
        return f_cpx, t_cpx, df_cpx, dt_cpx

    def dry_melt_fraction(self, tau, pressure) -> MeltFraction:
        """Dry melt fraction, Katz et al. (2003) eqs. 3 and 9, with analytic partials."""
        c = self.constants
        tau, p = np.broadcast_arrays(np.asarray(tau, float), np.asarray(pressure, float))
        t_sol, d_sol = _quadratic(c.a1, c.a2, c.a3, p)
        t_lz, d_lz = _quadratic(c.b1, c.b2, c.b3, p)
        t_liq, d_liq = _quadratic(c.c1, c.c2, c.c3, p)
        f_cpx, t_cpx, df_cpx, dt_cpx = self._cpx_out(p)
        # Branch 1: lherzolite melting (cpx present).
        span1 = t_lz - t_sol
        x = np.clip((tau - t_sol) / span1, 0.0, 1.0)
        xb = x ** (c.beta1 - 1.0)
        f1 = x * xb
        f1_t = c.beta1 * xb / span1
        f1_p = -c.beta1 * xb * (d_sol + x * (d_lz - d_sol)) / span1
        # Branch 2: harzburgite melting (cpx exhausted).
        span2 = t_liq - t_cpx
        y = np.clip((tau - t_cpx) / span2, 0.0, 1.0)
        yb = y ** (c.beta2 - 1.0)
        f2 = f_cpx + (1.0 - f_cpx) * y * yb
        f2_t = (1.0 - f_cpx) * c.beta2 * yb / span2
        f2_p = df_cpx * (1.0 - y * yb) - (1.0 - f_cpx) * c.beta2 * yb * (
            dt_cpx + y * (d_liq - dt_cpx)
        ) / span2
        below, lherz, molten = tau <= t_sol, tau < t_cpx, tau >= t_liq
        frac = np.where(lherz, f1, f2)
        d_t = np.where(lherz, f1_t, f2_t)
        d_p = np.where(lherz, f1_p, f2_p)
        frac = np.where(molten, 1.0, np.where(below, 0.0, frac))
        d_t = np.where(molten | below, 0.0, d_t)
        d_p = np.where(molten | below, 0.0, d_p)
        return MeltFraction(frac, d_t, d_p)

    def wet_solidus(self, pressure, water=0.0):
        """Solidus (degC) at vanishing melt fraction: T_sol - K min(X_bulk / D, X_sat)^gamma.

        Katz et al. (2003) eqs. 16-19 at F = 0; the same as the interface's default, with
        none of the derivative work of ``water_depression``.
        """
        c = self.constants
        p = np.asarray(pressure, float)
        if not np.any(water):
            return self.solidus(p) + 0.0 * np.asarray(water, float)
        in_melt = np.asarray(water, float) * 1e-4 / c.water_partition
        p_safe = np.maximum(p, 1e-12)  # as in water_depression
        saturation = c.sat_chi1 * p_safe**c.sat_lambda + c.sat_chi2 * p_safe
        return self.solidus(p) - c.water_k * np.minimum(in_melt, saturation) ** c.water_gamma

    def dry_fraction(self, tau, pressure):
        """Dry melt fraction alone (Katz et al. 2003, eqs. 3 and 9), without partials."""
        c = self.constants
        tau, p = np.broadcast_arrays(np.asarray(tau, float), np.asarray(pressure, float))
        t_sol = c.a1 + (c.a2 + c.a3 * p) * p
        t_lz = c.b1 + (c.b2 + c.b3 * p) * p
        t_liq = c.c1 + (c.c2 + c.c3 * p) * p
        f_cpx = c.cpx_mode / (c.r1 + c.r2 * p)
        t_cpx = _power(f_cpx, 1.0 / c.beta1) * (t_lz - t_sol) + t_sol
        lherz = _power(np.clip((tau - t_sol) / (t_lz - t_sol), 0.0, 1.0), c.beta1)
        harz = f_cpx + (1.0 - f_cpx) * _power(np.clip((tau - t_cpx) / (t_liq - t_cpx), 0.0, 1.0),
                                              c.beta2)
        return np.where(tau < t_cpx, lherz, harz)

    def water_depression(self, fraction, pressure, water):
        """Solidus depression by water, Katz et al. (2003) eqs. 16-19.

        Water in the melt is ``X = X_bulk / (D + F (1 - D))``, capped at saturation
        ``X_sat = chi1 P^lambda + chi2 P``; the solidus drops by ``K X^gamma``.
        Returns ``(dT, d dT/dF, d dT/dP)`` in K, K and K/GPa.
        """
        c = self.constants
        if not np.any(water):  # dry source: skip the work (the common case in fits)
            zero = np.zeros(np.broadcast_shapes(np.shape(fraction), np.shape(pressure),
                                                np.shape(water)))
            return zero, zero, zero
        f, p, w = np.broadcast_arrays(*(np.asarray(v, float) for v in (fraction, pressure, water)))
        p_safe = np.maximum(p, 1e-12)  # X_sat' is singular at P = 0
        bulk = w * 1e-4  # ppm -> wt%
        mixing = c.water_partition + f * (1.0 - c.water_partition)
        in_melt = bulk / mixing
        saturation = c.sat_chi1 * p_safe**c.sat_lambda + c.sat_chi2 * p_safe
        d_saturation = c.sat_chi1 * c.sat_lambda * p_safe ** (c.sat_lambda - 1.0) + c.sat_chi2
        saturated = in_melt >= saturation
        x = np.where(saturated, saturation, in_melt)
        depression = c.water_k * x**c.water_gamma
        safe_x = np.where(x > 0.0, x, 1.0)
        slope_x = np.where(x > 0.0, c.water_k * c.water_gamma * safe_x ** (c.water_gamma - 1.0), 0.0)
        d_frac = np.where(saturated, 0.0, -slope_x * in_melt * (1.0 - c.water_partition) / mixing)
        d_pres = np.where(saturated, slope_x * d_saturation, 0.0)
        return depression, d_frac, d_pres
