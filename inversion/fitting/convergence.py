"""Convergence diagnostics and warnings of a posterior: the content of diagnostics.json."""

from __future__ import annotations

import math

import numpy as np

from ... import forward
from ...forward.quantities import quantity
from .log_posterior import DERIVED
from ..observations.model_error import ERROR_DOMAIN
from ..study.seeds import generator

__all__ = ["DEEP_PRESSURE", "DEEP_SHARE", "MIN_ACCEPTANCE", "PHYSICAL_LIMITS",
           "converged_rhat", "deep_melt_share",
           "not_converged_advice", "diagnostics_dict", "posterior_warnings",
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


def not_converged_advice(assessment: dict, start: str) -> str:
    """What helps a run that did not converge, from what fell short ("" if it converged).

    Walkers that disagree (split R-hat) or are stranded out of the bulk are not fixed by
    a longer run: the ensemble moves rarely carry a walker between modes. A start around
    the optimum fixes a start from the prior (a 4-parameter study drawn from the prior
    ran 20 000 steps with split R-hat 4.3; around the optimum it converged in under a
    minute); after such a start, several modes are likely. Only a short chain (too few
    autocorrelation times or too small an ESS) needs more steps.
    """
    if assessment.get("converged", False):
        return ""
    text = " ".join(assessment.get("shortfalls", []))
    advice = []
    if assessment.get("stranded_walkers") or "R-hat" in text:
        if start == "prior":
            advice.append('the walkers disagree or some are stranded away from the main '
                          'mode, which running longer rarely mends: start them around the '
                          'optimum (`start = "map"` under `[sampler]`, the default)')
        else:
            advice.append("the walkers disagree or some are stranded although they "
                          "started around the optimum: the posterior may have more than "
                          "one mode; look at corner.png, fit again with other seeds, and "
                          "use more walkers (`walkers`) so the ensemble can cross "
                          "between modes")
    if "autocorrelation times long" in text or "effective sample size" in text:
        advice.append("the chain is too short for its autocorrelation time: raise "
                      "`max_steps` under `[sampler]`")
    if "acceptance" in text:
        advice.append("the walkers rarely move: check the units of the data and their "
                      "uncertainties, and priors far narrower than the posterior")
    if "does not vary" in text:
        advice.append("a parameter never moves: check that its prior has a width")
    return "What helps: " + "; ".join(advice) + "." if advice else ""


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
            f"kept chain >= {settings.tau_multiple:g} x max tau, no walker out of the "
            f"bulk after burn-in, every effective sample size >= {settings.ess_target:g}, "
            "split R-hat near its converged value and "
            f"mean acceptance >= {MIN_ACCEPTANCE:g}, checked every "
            f"{settings.check_interval} steps; cap {settings.max_steps} steps"
        ),
        "burn_in_rule": (
            "burn-in = the longer of 2 x max tau and the end of the last block (max tau "
            "steps) in which a walker's median log-posterior lies more than "
            f"{_round(assessment.get('straggler_threshold', math.nan), 3)} nats below the "
            "ensemble's median over the second half of the chain (a walker out of the "
            "bulk), at most half the chain; summaries, figures, samples.csv and PSIS-LOO "
            "use the steps after it"
        ),
        "walkers_out_of_bulk_after_burn_in": [
            int(w) for w in assessment.get("stranded_walkers", [])],
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
        "advice": not_converged_advice(assessment, settings.start),
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
    lines.extend(_deep_melt_warning(posterior))
    lines.extend(_melt_warning(posterior, derived))
    return lines


#: Values of a parameter that are physical limits rather than choices: a prior bound
#: there cannot sensibly be widened. Active upwelling 1 is passive flow (the upwelling
#: rate of plate separation alone; docs/model.md, "Melting regions").
PHYSICAL_LIMITS = {"active_upwelling": {1.0: "active upwelling 1 is passive flow"}}


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
            what, advice = _bound_kind(name, bound, edge, side)
            lines.append(f"the posterior of {name} piles against {what}, {bound:g} "
                         f"{unit}".rstrip() + f" ({100 * share:.0f} % of the samples lie "
                         f"within {_EDGE_ZONE:g} posterior sd of it): {advice}")
    return lines


def _bound_kind(name: str, bound: float, edge: float, side: str) -> tuple[str, str]:
    """The bound in words and what the user can do about it (two different cases)."""
    physical = PHYSICAL_LIMITS.get(name, {}).get(bound)
    if physical is not None or bound == edge:
        what = (f"a physical limit ({physical})" if physical is not None else
                "a limit of the model (the edge of its valid range)")
        return what, ("widening the prior cannot move it; the data ask for a value at or "
                      "beyond what the model allows, so read the estimate as 'at the "
                      "limit' and check the data, the values held fixed and the "
                      "parameterization")
    return (f"the {side} bound of its prior", "the bound, not the data, sets the estimate "
            "there; widen the prior if that range is physically possible, or check the "
            "data")


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


#: Melt made deeper than this (GPa) is beyond the calibration of the melting models
#: (docs/model.md, "Known limits"); a share above `DEEP_SHARE` of it earns a warning.
DEEP_PRESSURE = 5.0
#: A tenth of the melt resting on extrapolated melting behaviour is where we start to
#: warn: a choice, not a derived limit (Tp 1550 degC, dry, no lid, makes 10 %).
DEEP_SHARE = 0.10


def deep_melt_share(logpost, draws: np.ndarray, *, num: int = 128) -> np.ndarray:
    """Share of the melt made at pressures above `DEEP_PRESSURE`, per draw.

    The share is the sum of `MeltColumn.path` weights (melt made in each pressure
    interval of the path, normalised) over intervals whose midpoint lies deeper than
    `DEEP_PRESSURE`; 0 for a column that does not melt.

    Parameters
    ----------
    logpost : LogPosterior
    draws : ndarray, shape (n, ndim)
    num : int
        Path intervals (128: at 10 GPa of path, 0.08 GPa each).

    Returns
    -------
    ndarray, shape (n,)
    """
    path = logpost.column(draws).path(num)
    return np.sum(np.where(path.pressure > DEEP_PRESSURE, path.weight, 0.0), axis=-1)


def _deep_melt_warning(posterior) -> list[str]:
    share = deep_melt_share(posterior.logpost, posterior.predictive_draws())
    median = float(np.median(share))
    if not median > DEEP_SHARE:
        return []
    low, high = np.quantile(share, [0.025, 0.975])
    return [f"{100 * median:.0f} % of the melt (posterior median; 95 %: "
            f"{100 * low:.0f} to {100 * high:.0f} %) is made deeper than "
            f"{DEEP_PRESSURE:g} GPa, where the melting parameterization is extrapolated "
            "beyond its experiments (for Katz et al. 2003 the lherzolite-out and solidus "
            "curves there close to about 50 K apart); the estimates lean on that "
            f"extrapolation (reported above {100 * DEEP_SHARE:.0f} %; docs/model.md, "
            "Known limits)"]


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
