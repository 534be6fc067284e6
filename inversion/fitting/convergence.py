"""Convergence diagnostics and warnings of a posterior: the content of diagnostics.json."""

from __future__ import annotations

import math

import numpy as np

from ... import forward
from ...forward.quantities import quantity
from .log_posterior import DERIVED
from ..observations.model_error import ERROR_DOMAIN
from ..study.seeds import generator

__all__ = ["MIN_ACCEPTANCE", "converged_rhat", "diagnostics_dict", "posterior_warnings",
           "rhat_too_high", "split_rhat"]


#: Smallest mean acceptance fraction the stopping rule accepts. A well-mixed ensemble
#: typically accepts 0.2-0.5 of its proposals (Foreman-Mackey et al. 2013, sec. 4);
#: below 0.1 walkers sit still for tens of steps and tau is underestimated.
MIN_ACCEPTANCE = 0.1


def split_rhat(kept: np.ndarray) -> np.ndarray:
    """Split R-hat treating each walker as a chain (Gelman et al. 2013, BDA3 sec. 11.4).

    Parameters
    ----------
    kept : ndarray, shape (nsteps, nwalkers, ndim)
        Chain after burn-in.

    Returns
    -------
    ndarray, shape (ndim,)
        Potential scale reduction factor; near 1 for a well-mixed chain.

    Notes
    -----
    Walkers of an affine-invariant ensemble are not independent chains, so this value is
    approximate; emcee's autocorrelation-based effective sample size is the primary
    diagnostic.
    """
    n = kept.shape[0] // 2
    if n < 2:
        return np.full(kept.shape[2], np.nan)
    halves = np.concatenate([kept[:n], kept[n:2 * n]], axis=1)  # (n, 2 * nwalkers, ndim)
    chain_means = halves.mean(axis=0)
    within = halves.var(axis=0, ddof=1).mean(axis=0)
    between = n * chain_means.var(axis=0, ddof=1)
    pooled = (n - 1) / n * within + between / n
    return np.sqrt(pooled / np.maximum(within, 1e-300))


def converged_rhat(half_length: int, tau: np.ndarray) -> np.ndarray:
    """Split R-hat expected from a converged ensemble with chains this short.

    With m = half_length / tau effective draws per half-chain, chain means scatter by
    sigma^2 / m, so R-hat^2 = 1 - 1/n + 1/m (n = half_length) even at convergence:
    about 1 + tau / (2 n). Walkers of an emcee ensemble are short chains, so this is
    often 1.01-1.03; only values well above it point to poor mixing.
    """
    n = max(int(half_length), 2)
    return np.sqrt(1.0 - 1.0 / n + np.asarray(tau, float) / n)


def rhat_too_high(rhat, expected) -> np.ndarray:
    """Where a split R-hat is well above the `expected` value of a converged ensemble.

    "Well above" is an excess over 1 more than twice the expected excess plus 0.02: the
    excess of a converged ensemble scatters by about a quarter of itself between runs
    with 16 walkers (chain means of 2 x 16 half-chains), so this is several times that
    scatter, while the mixing failures it is for give 1.3 and more.
    """
    rhat, expected = np.asarray(rhat, float), np.asarray(expected, float)
    return np.isfinite(rhat) & (rhat - 1.0 > 2.0 * (expected - 1.0) + 0.02)


def diagnostics_dict(posterior) -> dict:
    """Sampler diagnostics of `posterior` as a JSON-ready dict.

    No timings and nothing about how the run was resumed (that is in run.json), so the
    same study and seed give byte-identical files however often the run was interrupted.
    Values that cannot be estimated (NaN) are written as null.
    """
    settings = posterior.study.sampler
    assessment = posterior.result.assessment
    acceptance = posterior.result.acceptance
    names = posterior.names

    def per_parameter(values) -> dict:
        return {n: _round(v) for n, v in zip(names, values, strict=True)}

    return {
        "converged": posterior.converged,
        "warnings": posterior.warnings,
        "stopping_rule": (
            f"kept chain >= {settings.tau_multiple:g} x max tau, every effective sample "
            f"size >= {settings.ess_target:g}, split R-hat near its converged value and "
            f"mean acceptance >= {MIN_ACCEPTANCE:g}, checked every "
            f"{settings.check_interval} steps; cap {settings.max_steps} steps"
        ),
        "steps": int(posterior.chain.shape[0]),
        "walkers": int(posterior.chain.shape[1]),
        "burn_in_steps": posterior.discard,
        "thin": posterior.thin,
        "kept_steps": int(assessment["kept_steps"]),
        "tau_multiple_reached": _round(assessment["tau_multiple_reached"]),
        "acceptance_fraction": {
            "mean": _round(np.mean(acceptance)),
            "min": _round(np.min(acceptance)),
            "max": _round(np.max(acceptance)),
        },
        "tau_steps": per_parameter(posterior.tau),
        "ess": per_parameter(posterior.ess),
        "split_rhat_approximate": per_parameter(assessment["split_rhat"]),
        "split_rhat_if_converged": per_parameter(assessment["rhat_if_converged"]),
        "split_rhat_note": (
            "approximate: walkers of an ensemble sampler are not independent chains, and "
            "each is short, so even a converged ensemble gives about "
            "sqrt(1 - 1/n + tau/n) (n = half the kept steps; split_rhat_if_converged); "
            "values well above that suggest running longer"
        ),
        "start": settings.start,
        "map_log_posterior": _round(posterior.map["log_posterior"]),
    }


def _round(value, digits: int = 6) -> float | None:
    value = float(value)
    return float(f"{value:.{digits}g}") if math.isfinite(value) else None


#: A posterior "piles against" a bound when more than this share of its samples lies
#: within `_EDGE_ZONE` of its robust spread ((q84 - q16) / 2) from the bound. A normal
#: posterior 2 sd inside a bound puts about 1 % there, one cut off at its mode about 10 %.
_EDGE_SHARE = 0.02
_EDGE_ZONE = 0.2
#: Share of samples whose melting starts at the model's base that earns a warning.
_BASE_SHARE = 0.01
_PRIOR_DRAWS = 2000


def posterior_warnings(posterior) -> list[str]:
    """What needs care about the posterior itself, one line each.

    A posterior piled against a prior bound (or the edge of the model's valid range),
    samples whose melting starts at the model's base (10 GPa), and no melt in any
    posterior sample (and whether the prior has any).
    """
    kept = posterior.chain[posterior.discard:].reshape(-1, len(posterior.names))
    derived = posterior.derived_chain[posterior.discard:].reshape(-1, len(DERIVED))
    lines = []
    logpost = posterior.logpost
    for j, (name, prior) in enumerate(zip(posterior.names, logpost.priors, strict=True)):
        # A free model error's valid range is [0, inf); its unit is its block's.
        domain = forward.PARAMETER_DOMAIN.get(name, ERROR_DOMAIN)
        unit = quantity(name, unit=logpost.units[name]).unit_text
        lines.extend(_bound_warnings(name, kept[:, j], prior, domain, unit))
    lines.extend(_base_warning(posterior, derived))
    lines.extend(_melt_warning(posterior, derived))
    return lines


def _bound_warnings(name: str, x: np.ndarray, prior, domain, unit: str) -> list[str]:
    low, high = domain
    p_low, p_high = prior.bounds
    spread = 0.5 * float(np.subtract(*np.quantile(x, [0.84, 0.16])))
    if not spread > 0:
        return []  # a chain that does not move: the stopping rule says so already
    lines = []
    for side, bound, edge in (("lower", max(p_low, low), low), ("upper", min(p_high, high),
                                                                  high)):
        share = float(np.mean(np.abs(x - bound) <= _EDGE_ZONE * spread))
        if share > _EDGE_SHARE:
            what = ("the edge of the model's valid range" if bound == edge else
                    f"the {side} bound of its prior")
            lines.append(
                f"the posterior of {name} piles against {what}, {bound:g} "
                f"{unit} ({100 * share:.0f} % of the samples lie within "
                f"{_EDGE_ZONE:g} posterior sd of it): the bound, not the data, sets the "
                "estimate there; widen the prior or check the data")
    return lines


def _base_warning(posterior, derived: np.ndarray) -> list[str]:
    km = float(forward.depth_per_pressure(posterior.study.model.mantle_density))
    base = forward.MAX_PRESSURE * km
    onset = derived[:, DERIVED.index("onset_depth")]
    share = float(np.mean(onset >= base * (1.0 - 1e-9)))
    if share <= _BASE_SHARE:
        return []
    return [f"{100 * share:.0f} % of the posterior samples start melting at the model's "
            f"base ({forward.MAX_PRESSURE:g} GPa, {base:.0f} km): the mantle would cross "
            "its solidus deeper than the model reaches, so those columns are extrapolated "
            "beyond the parameterization's calibration"]


def _melt_warning(posterior, derived: np.ndarray) -> list[str]:
    crust = derived[:, DERIVED.index("crustal_thickness")]
    if np.any(crust > 0):
        return []
    logpost = posterior.logpost
    rng = generator(posterior.seed, "no_melt_draws")
    draws = np.column_stack([p.sample(rng, _PRIOR_DRAWS) for p in logpost.priors])
    if np.any(logpost.column(draws).produces_melt):
        return ["no posterior sample makes melt although parts of the prior do: the data "
                "pull the fit away from melting; check the observations and their units"]
    return [f"no melt anywhere in the prior: none of {_PRIOR_DRAWS} prior draws nor any "
            "posterior sample makes melt, so the data cannot be fitted; allow a hotter "
            "mantle or a thinner lid"]
