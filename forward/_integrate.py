"""The isentropic melting path as an explicit ODE, and a vectorised integrator.

State: ``sigma``, the dry-equivalent temperature less the solidus offset, so that
``F = F_dry(sigma, P)`` and ``T = sigma + shift - dT(F, P, water)``. With entropy
conserved, ``(c_p/T) dT - a dP + dS dF = 0`` (Katz et al. 2003, eq. 22 in substance),
``a = (1-F) alpha_s/rho_s + F alpha_f/rho_f``; substituting ``dF = F_s dsigma + F_P dP``
and ``dT = dsigma - dT_F dF - dT_P dP`` gives

    dsigma/dP = [a + (c_p/T)(dT_F F_P + dT_P) - dS F_P] / [(c_p/T)(1 - dT_F F_s) + dS F_s].

Both partials are explicit, so no implicit solve is needed per step. Pressure runs
along ``u = sqrt(P)``, which resolves the water-saturation layer near the surface.
"""

from __future__ import annotations

import numpy as np

from .adiabat import KELVIN

__all__ = ["column_temperature", "path_slope", "integrate_paths"]


def column_temperature(param, sigma, pressure, water, shift):
    """Temperature (degC) and melt fraction at state ``sigma``."""
    frac = param.dry_melt_fraction(sigma, pressure).fraction
    depression = param.water_depression(frac, pressure, water)[0]
    return sigma + shift - depression, frac


def path_slope(param, sigma, pressure, water, shift):
    """``(dsigma/dP in K/GPa, F)`` along the isentropic path."""
    th = param.thermo
    dry = param.dry_melt_fraction(sigma, pressure)
    frac = dry.fraction
    dep, dep_f, dep_p = param.water_depression(frac, pressure, water)
    cp_t = th.heat_capacity / (sigma + shift - dep + KELVIN)
    expansion = 1e9 * ((1.0 - frac) * th.alpha_solid / th.density_solid
                       + frac * th.alpha_melt / th.density_melt)
    top = expansion + cp_t * (dep_f * dry.d_pressure + dep_p) - th.entropy_of_fusion * dry.d_pressure
    bottom = cp_t * (1.0 - dep_f * dry.d_temperature) + th.entropy_of_fusion * dry.d_temperature
    return top / bottom, frac


def _derivatives(param, u, state, water, shift):
    """d/du of (sigma, I1 = int F dP, I2 = int P F dP), with P = u^2 (integrals from depth)."""
    p = u * u
    slope, frac = path_slope(param, state[0], p, water, shift)
    dp_du = 2.0 * u
    return np.stack([slope * dp_du, -frac * dp_du, -p * frac * dp_du])


def rk4_step(param, u, state, h, water, shift):
    """One classical Runge-Kutta step from ``u`` to ``u + h`` (h may be an array)."""
    k1 = _derivatives(param, u, state, water, shift)
    k2 = _derivatives(param, u + 0.5 * h, state + 0.5 * h * k1, water, shift)
    k3 = _derivatives(param, u + 0.5 * h, state + 0.5 * h * k2, water, shift)
    k4 = _derivatives(param, u + h, state + h * k3, water, shift)
    return state + h * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0


def integrate_paths(param, u_grid, onset_pressure, onset_sigma, melts, water, shift,
                    sub_steps=2, on_node=None):
    """Integrate many paths from their onsets up to the surface on a common grid.

    ``u_grid`` ascends from 0 (surface) to sqrt(MAX_PRESSURE). Returns an array
    ``(3, n_paths, len(u_grid))`` of sigma, I1 and I2, where deeper than the onset
    sigma is the solid adiabat value (supplied by the caller as ``onset_sigma`` at
    the onset, the nodes below are filled by the caller) and the integrals are 0.
    ``on_node(k)``, if given, is called after each of the ``len(u_grid) - 1`` node
    intervals with the number done (a build's progress report).
    """
    n_nodes = len(u_grid)
    u0 = np.sqrt(onset_pressure)
    start = np.stack([onset_sigma, np.zeros_like(onset_sigma), np.zeros_like(onset_sigma)])
    out = np.zeros((3, len(onset_sigma), n_nodes))
    state = start.copy()
    out[:, :, -1] = start
    for j in range(n_nodes - 2, -1, -1):
        u_hi, u_lo = u_grid[j + 1], u_grid[j]
        begins = melts & (u0 > u_lo) & (u0 <= u_hi)
        active = melts & (u0 > u_lo)
        u_from = np.where(begins, u0, u_hi)
        state = np.where(begins, start, state)
        h = (u_lo - u_from) / sub_steps
        u = u_from
        for _ in range(sub_steps):
            state = np.where(active, rk4_step(param, u, state, h, water, shift), state)
            u = u + h
        out[:, :, j] = np.where(active, state, start)
        if on_node is not None:
            on_node(n_nodes - 1 - j)
    return out
