"""Fit a study and hold the posterior: `fit` and `Posterior`.

`fit` validates the run settings, builds the vectorised log-posterior, starts the walkers
(from the prior or around the MAP), runs the sampler until the autocorrelation-based
stopping rule is met, polishes the MAP and returns a `Posterior`. With ``out`` the chain
is checkpointed in ``<out>.partial/chain.h5`` while it runs (so ``resume=True`` can
continue an interrupted run) and all outputs are then written atomically to ``out``.
"""

from __future__ import annotations

import shutil
import time
from collections.abc import Sequence
from functools import cached_property
from os import PathLike
from pathlib import Path

import emcee
import numpy as np
import pandas as pd

from . import _start
from ._errors import InputError
from .model import DERIVED, UNITS, LogPosterior
from .sampler import ChainResult, read_chain, run_chain

__all__ = ["SUMMARY_COLUMNS", "Posterior", "fit"]

#: Columns of summary.csv and derived.csv, in order.
SUMMARY_COLUMNS = ("parameter", "unit", "median", "mean", "sd", "q2.5", "q16", "q84",
                   "q97.5", "map", "ess", "tau")

_QUANTILES = (0.025, 0.16, 0.84, 0.975)


def fit(
    study,
    *,
    seed: int | None = None,
    out: str | PathLike[str] | None = None,
    resume: bool = False,
    quiet: bool = False,
    force: bool = False,
    command: Sequence[str] | None = None,
) -> Posterior:
    """Sample the posterior of a study's free parameters.

    Parameters
    ----------
    study : inversion.Study
        What to fit (priors, fixed values, model settings, observations, sampler).
    seed : int, optional
        Master seed; overrides ``study.sampler.seed``. Same seed, same results.
    out : str or path-like, optional
        Result folder. The chain is checkpointed in ``<out>.partial/`` during the run and
        every output is written to `out` at the end (atomically). None: nothing is
        written; call `Posterior.save` yourself.
    resume : bool
        Continue the interrupted run checkpointed for `out`.
    quiet : bool
        Hide the progress bar.
    force : bool
        Replace an existing `out` folder and discard an old checkpoint.
    command : sequence of str, optional
        Command line recorded in run.json (the CLI passes its arguments).

    Returns
    -------
    Posterior

    Raises
    ------
    InputError
        `out` exists without `force`, a checkpoint exists without `resume` or `force`,
        `resume` without a checkpoint, or a checkpoint from a different run.

    Warns
    -----
    NotConvergedWarning
        The step cap was reached before the stopping rule was met.
    """
    settings = study.sampler
    seed = int(settings.seed if seed is None else seed)
    out = None if out is None else Path(out).absolute()
    if resume and out is None:
        raise InputError("resume needs the result folder of the interrupted run", key="out")
    logpost = LogPosterior(study)
    _check_walkers(logpost, settings)
    checkpoint = None if out is None else _prepare_checkpoint(out, resume=resume, force=force)
    resume = resume and _has_steps(checkpoint)  # nothing stored yet: start afresh
    started = time.time()
    try:
        result = _sample(logpost, study, seed, checkpoint, resume=resume, quiet=quiet)
    except BaseException:
        if checkpoint is not None and not _has_steps(checkpoint):
            shutil.rmtree(checkpoint.parent, ignore_errors=True)  # nothing worth keeping
        raise
    posterior = Posterior(study, result, seed=seed, run_info={
        "command_line": list(command) if command is not None else ["inversion.fit"],
        "sampling_seconds": round(time.time() - started, 3),
        "finished_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "resumed_from_step": result.resumed_from,
    })
    if out is not None:
        posterior.save(out, force=force)
        shutil.rmtree(checkpoint.parent, ignore_errors=True)
    return posterior


def _sample(logpost, study, seed: int, checkpoint, *, resume: bool, quiet: bool):
    """Start the walkers (unless resuming) and run the sampler to its stopping rule."""
    settings = study.sampler
    s_emcee, s_start = np.random.SeedSequence(seed).spawn(2)
    rng = np.random.default_rng(s_start)
    initial = _initial_positions(logpost, settings, rng, skip=resume)
    return run_chain(
        logpost, initial, seed=int(s_emcee.generate_state(1)[0]), nblobs=logpost.nblobs,
        ess_target=settings.ess_target, tau_multiple=settings.tau_multiple,
        max_steps=settings.max_steps, check_interval=_check_interval(settings),
        path=checkpoint, resume=resume, meta=_chain_meta(study, seed, logpost),
        quiet=quiet, names=logpost.names,
    )


def _has_steps(checkpoint) -> bool:
    """Whether a checkpoint file holds at least one stored step."""
    if checkpoint is None or not Path(checkpoint).is_file():
        return False
    try:
        return read_chain(checkpoint)[0].nsteps > 0
    except (OSError, KeyError):
        return False


def _prepare_checkpoint(out: Path, *, resume: bool, force: bool) -> Path:
    """Check the output folder rules before any work; return the checkpoint file path."""
    partial = out.with_name(out.name + ".partial")
    if out.exists() and not force:
        raise InputError(
            "the result folder already exists; pass --force to replace it or choose "
            "another --out", file=out,
        )
    if resume and not partial.exists():
        raise InputError(
            "there is no interrupted run to resume here; run again without --resume",
            file=partial,
        )
    if partial.exists() and not resume:
        if not force:
            raise InputError(
                "an interrupted run is stored here; pass --resume to continue it or "
                "--force to start over", file=partial,
            )
        shutil.rmtree(partial)
    if not out.parent.is_dir():
        raise InputError("the parent folder of --out does not exist; create it first",
                         file=out.parent)
    partial.mkdir(exist_ok=True)
    return partial / "chain.h5"


def _check_walkers(logpost, settings) -> None:
    nwalkers = int(settings.walkers)
    if nwalkers < 2 * logpost.ndim:
        raise InputError(
            f"walkers = {nwalkers} is too few for {logpost.ndim} free parameters; the "
            f"ensemble needs at least {2 * logpost.ndim}", key="sampler.walkers",
        )


def _initial_positions(logpost, settings, rng, *, skip: bool) -> np.ndarray:
    nwalkers = int(settings.walkers)
    if skip:  # resuming: positions come from the checkpoint
        return np.zeros((nwalkers, logpost.ndim))
    if getattr(settings, "start", "prior") == "map":
        return _start.map_start(logpost, nwalkers, rng)[0]
    return _start.prior_start(logpost, nwalkers, rng)


def _check_interval(settings) -> int:
    return int(getattr(settings, "check_interval", 250))


def _chain_meta(study, seed, logpost) -> dict:
    return {
        "study_sha256": str(getattr(study, "file_hash", None) or ""),
        "seed": seed,
        "parameters": tuple(logpost.names),
        "derived": tuple(DERIVED),
    }


class Posterior:
    """Posterior samples of a study's free parameters and derived quantities.

    Parameters
    ----------
    study : inversion.Study
        The fitted study.
    result : ChainResult
        The sampler output.
    seed : int
        Master seed of the run.
    run_info : dict, optional
        Extra provenance stored in run.json.

    Attributes
    ----------
    names : tuple of str
        Free parameters (column order of `chain`).
    chain : ndarray, shape (nsteps, nwalkers, ndim)
        Every walker position (emcee axis order), burn-in included.
    log_prob : ndarray, shape (nsteps, nwalkers)
        Log-posterior of every position.
    derived_chain : ndarray, shape (nsteps, nwalkers, len(DERIVED))
        Derived quantities of every position.
    discard : int
        Burn-in steps left out of samples and summaries.
    thin : int
        Thinning of `samples` (about half the shortest autocorrelation time).
    converged : bool
        Whether the stopping rule was met before the step cap.
    """

    def __init__(self, study, result: ChainResult, *, seed: int,
                 run_info: dict | None = None) -> None:
        self.study = study
        self.result = result
        self.seed = int(seed)
        self.run_info = dict(run_info or {})
        self.logpost = LogPosterior(study)
        self.names = self.logpost.names
        self.chain = result.chain
        self.log_prob = result.log_prob
        self.derived_chain = result.blobs
        assessment = result.assessment
        self.discard = int(assessment["discard"])
        self.tau = np.asarray(assessment["tau"], dtype=float)
        self.ess = np.asarray(assessment["ess"], dtype=float)
        self.converged = bool(assessment["converged"])
        self.thin = max(1, int(np.min(self.tau) // 2))

    @cached_property
    def map(self) -> dict:
        """Maximum a posteriori point: free parameters, derived values, log-posterior.

        Found by Nelder-Mead started from the highest-posterior sample of the chain.
        """
        step, walker = np.unravel_index(np.argmax(self.log_prob), self.log_prob.shape)
        start = self.chain[step, walker][None, :]
        flat = self._kept(self.chain).reshape(-1, len(self.names))
        scale = np.maximum(np.std(flat, axis=0), 1e-9)
        theta, value = _start.find_map(self.logpost, start, scale)
        derived = self.logpost(theta[None, :])[0, 1:]
        out = {name: float(v) for name, v in zip(self.names, theta, strict=True)}
        out.update({name: float(v) for name, v in zip(DERIVED, derived, strict=True)})
        out["log_posterior"] = value
        return out

    @cached_property
    def samples(self) -> pd.DataFrame:
        """Flat posterior sample after burn-in, thinned by `thin`.

        Columns: ``step``, ``walker``, the free parameters, the derived quantities,
        ``log_posterior``; one row per kept walker position.
        """
        nsteps, nwalkers, _ = self.chain.shape
        steps = np.arange(self.discard, nsteps, self.thin)
        frame = {
            "step": np.repeat(steps, nwalkers),
            "walker": np.tile(np.arange(nwalkers), steps.size),
        }
        for j, name in enumerate(self.names):
            frame[name] = self.chain[steps, :, j].ravel()
        for j, name in enumerate(DERIVED):
            frame[name] = self.derived_chain[steps, :, j].ravel()
        frame["log_posterior"] = self.log_prob[steps].ravel()
        return pd.DataFrame(frame)

    def summary(self) -> pd.DataFrame:
        """One row per free parameter with the columns of `SUMMARY_COLUMNS`.

        Free model errors follow the physical parameters, named as in
        `inversion.study.ErrorParameter` (e.g. ``basalts.model_error``).

        Statistics use every kept step (after burn-in, not thinned); ``ess`` and ``tau``
        are emcee's autocorrelation estimates (tau in steps).
        """
        return _summary_table(self.names, self._kept(self.chain), self.map, self.ess,
                              self.tau, self.logpost.units)

    def derived_summary(self) -> pd.DataFrame:
        """Like `summary` for the derived quantities of `DERIVED`."""
        kept = self._kept(self.derived_chain)
        # Same burn-in as the parameters; tau of each derived quantity on the kept chain.
        tau = np.maximum(emcee.autocorr.integrated_time(kept, tol=0, quiet=True), 1.0)
        ess = kept.shape[0] * kept.shape[1] / tau
        return _summary_table(DERIVED, kept, self.map, ess, tau, UNITS)

    @cached_property
    def diagnostics(self) -> dict:
        """Convergence diagnostics (the content of diagnostics.json)."""
        from ._diagnostics import diagnostics_dict

        return diagnostics_dict(self)

    def save(self, directory: str | PathLike[str], *, force: bool = False) -> Path:
        """Write every output file to `directory` atomically.

        Files: summary.csv, derived.csv, samples.csv, chain.h5, diagnostics.json,
        run.json, corner.png, fit.png, pt.png, report.md. They are written to a
        temporary folder beside `directory`, which is then renamed into place.

        Parameters
        ----------
        directory : str or path-like
            Result folder; must not exist unless `force`.
        force : bool
            Replace an existing folder.

        Returns
        -------
        pathlib.Path
            The result folder.
        """
        from ._outputs import save_posterior

        return save_posterior(self, Path(directory), force=force)

    def predictive_draws(self, n: int = 200) -> np.ndarray:
        """A reproducible subset of `n` kept positions, shape (n, ndim), for plots."""
        flat = self._kept(self.chain).reshape(-1, len(self.names))
        rng = np.random.default_rng(np.random.SeedSequence(self.seed).spawn(3)[2])
        index = rng.choice(flat.shape[0], size=min(n, flat.shape[0]), replace=False)
        return flat[np.sort(index)]

    def _kept(self, array: np.ndarray) -> np.ndarray:
        return array[self.discard:]

    def __repr__(self) -> str:
        state = "converged" if self.converged else "NOT converged"
        return (f"Posterior({self.study.name!r}, {', '.join(self.names)}; "
                f"{self.chain.shape[0]} steps x {self.chain.shape[1]} walkers, {state})")


def _summary_table(names, kept: np.ndarray, map_point: dict, ess, tau,
                   units) -> pd.DataFrame:
    flat = kept.reshape(-1, kept.shape[-1])
    rows = []
    for j, name in enumerate(names):
        x = flat[:, j]
        q = np.quantile(x, _QUANTILES)
        rows.append({
            "parameter": name, "unit": units[name], "median": float(np.median(x)),
            "mean": float(np.mean(x)), "sd": float(np.std(x, ddof=1)),
            "q2.5": q[0], "q16": q[1], "q84": q[2], "q97.5": q[3],
            "map": map_point[name], "ess": float(ess[j]), "tau": float(tau[j]),
        })
    return pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))
