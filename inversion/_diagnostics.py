"""Convergence diagnostics of a posterior: the content of diagnostics.json."""

from __future__ import annotations

import numpy as np

__all__ = ["converged_rhat", "diagnostics_dict", "split_rhat"]


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


def diagnostics_dict(posterior) -> dict:
    """Sampler diagnostics of `posterior` as a JSON-ready dict (no timings, so that the
    same seed gives byte-identical files)."""
    settings = posterior.study.sampler
    acceptance = posterior.result.acceptance
    kept = posterior.chain[posterior.discard:]
    rhat = split_rhat(kept)
    expected = converged_rhat(kept.shape[0] // 2, posterior.tau)
    names = posterior.names
    return {
        "converged": posterior.converged,
        "stopping_rule": (
            f"kept chain >= {settings.tau_multiple:g} x max tau and every effective sample "
            f"size >= {settings.ess_target:g}, checked every "
            f"{getattr(settings, 'check_interval', 250)} steps; cap {settings.max_steps} steps"
        ),
        "steps": int(posterior.chain.shape[0]),
        "walkers": int(posterior.chain.shape[1]),
        "burn_in_steps": posterior.discard,
        "thin": posterior.thin,
        "kept_steps": int(kept.shape[0]),
        "tau_multiple_reached": _round(posterior.result.assessment["tau_multiple_reached"]),
        "acceptance_fraction": {
            "mean": _round(np.mean(acceptance)),
            "min": _round(np.min(acceptance)),
            "max": _round(np.max(acceptance)),
        },
        "tau_steps": {n: _round(t) for n, t in zip(names, posterior.tau, strict=True)},
        "ess": {n: _round(e) for n, e in zip(names, posterior.ess, strict=True)},
        "split_rhat_approximate": {n: _round(r) for n, r in zip(names, rhat, strict=True)},
        "split_rhat_if_converged": {
            n: _round(r) for n, r in zip(names, expected, strict=True)
        },
        "split_rhat_note": (
            "approximate: walkers of an ensemble sampler are not independent chains, and "
            "each is short, so even a converged ensemble gives about "
            "sqrt(1 - 1/n + tau/n) (n = half the kept steps; split_rhat_if_converged); "
            "values well above that suggest running longer"
        ),
        "resumed_from_step": int(posterior.result.resumed_from),
        "start": str(getattr(settings, "start", "prior")),
        "map_log_posterior": _round(posterior.map["log_posterior"]),
    }


def _round(value, digits: int = 6) -> float:
    return float(f"{float(value):.{digits}g}")
