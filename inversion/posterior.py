"""Fit a study and hold the posterior: `fit` and `Posterior`.

`fit` validates the run settings, builds the vectorised log-posterior, starts the walkers
(from the prior or around the MAP), runs the sampler until the autocorrelation-based
stopping rule is met, polishes the MAP and returns a `Posterior`. With ``out`` the chain
is checkpointed in ``<out>.partial/`` while it runs (so ``resume=True`` can continue an
interrupted run) and all outputs are then written atomically to ``out``. Replacing an
old output follows the one rule of `inversion._safety`.
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Mapping
from functools import cached_property
from numbers import Integral
from os import PathLike
from pathlib import Path

import numpy as np
import pandas as pd

from . import _start
from ._checkpoint import CheckpointBackend, stored_steps
from ._errors import InputError, OutputConflict, PosteriorWarning, WriteError
from ._provenance import run_fingerprint, study_inputs
from ._safety import (
    check_output_folder,
    check_replaceable,
    output_lock,
    remove_listed,
    remove_stale_temporaries,
)
from .model import DERIVED, UNITS, LogPosterior
from .sampler import ChainResult, autocorrelation_time, run_chain

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
    provenance: Mapping | None = None,
) -> Posterior:
    """Sample the posterior of a study's free parameters.

    Parameters
    ----------
    study : inversion.Study
        What to fit (priors, fixed values, model settings, observations, sampler).
    seed : int, optional
        Master seed, 0 <= seed < 2**32; overrides ``study.sampler.seed``. Same seed, same
        results.
    out : str or path-like, optional
        Result folder. The chain is checkpointed in ``<out>.partial/`` during the run and
        every output is written to `out` at the end (atomically). None: nothing is
        written; call `Posterior.save` yourself.
    resume : bool
        Continue the interrupted run checkpointed for `out`; refused unless the study
        file, the tables, the seed and the lidmelt version are those of that run.
    quiet : bool
        Hide the progress bar.
    force : bool
        Replace an existing `out` folder and discard an old checkpoint, if lidmelt wrote
        them (see `inversion._safety.check_replaceable`).
    provenance : mapping, optional
        Extra entries for run.json (the command line passes its arguments).

    Returns
    -------
    Posterior

    Raises
    ------
    InputError
        A bad seed, or `out` cannot be used (its parent is missing, it is not lidmelt's to
        replace, another run is writing it). `OutputConflict` (an InputError) when `out`
        or a checkpoint exists and neither `force` nor `resume` says what to do, or when
        a resume does not match the stored run.
    WriteError
        A checkpoint record or the results could not be written (e.g. a full disk); the
        checkpoint up to the last complete record is kept.

    Warns
    -----
    NotConvergedWarning
        The step cap was reached before the stopping rule was met.
    PosteriorWarning
        One per entry of `Posterior.warnings` about the posterior itself.
    """
    seed = _check_seed(study.sampler.seed if seed is None else seed)
    if not study.priors:  # a scenario may fix everything (inversion.scenarios)
        raise InputError("every parameter is fixed, so there is nothing to sample; give "
                         "at least one a prior", key="parameters")
    if out is None:
        if resume:
            raise InputError("resuming needs the result folder of the interrupted run",
                             key="out")
        started = time.time()
        result = _sample(study, seed, None, resume=False, quiet=quiet)
        return _finish(study, seed, result, started, provenance)
    out = Path(out).absolute()
    with output_lock(out):
        partial = _prepare_folders(out, study, resume=resume, force=force)
        started = time.time()
        try:
            result = _sample(study, seed, partial, resume=resume, quiet=quiet)
        except BaseException:
            if not resume and not stored_steps(partial):
                CheckpointBackend(partial).remove()  # nothing worth keeping
            raise
        posterior = _finish(study, seed, result, started, provenance)
        try:
            posterior.save(out, force=force)
        except WriteError as err:
            raise WriteError(err.path, err.cause, kept_steps=stored_steps(partial),
                             checkpoint=partial) from err.cause
        CheckpointBackend(partial).remove()
    return posterior


def _check_seed(seed) -> int:
    if isinstance(seed, bool) or not isinstance(seed, Integral) or not 0 <= seed < 2**32:
        raise InputError(f"seed {seed!r} must be a whole number from 0 to {2**32 - 1}",
                         key="seed")
    return int(seed)


def _sample(study, seed: int, checkpoint, *, resume: bool, quiet: bool) -> ChainResult:
    """Start the walkers (unless resuming) and run the sampler to its stopping rule."""
    settings = study.sampler
    logpost = LogPosterior(study)
    s_emcee, s_start = np.random.SeedSequence(seed).spawn(2)
    rng = np.random.default_rng(s_start)
    if resume:  # positions come from the checkpoint
        initial = np.zeros((settings.walkers, logpost.ndim))
    elif settings.start == "map":
        initial = _start.map_start(logpost, settings.walkers, rng)[0]
    else:
        initial = _start.prior_start(logpost, settings.walkers, rng)
    return run_chain(
        logpost, initial, seed=int(s_emcee.generate_state(1)[0]),
        ess_target=settings.ess_target, tau_multiple=settings.tau_multiple,
        max_steps=settings.max_steps, check_interval=settings.check_interval,
        checkpoint=checkpoint, resume=resume, quiet=quiet, names=logpost.names,
        meta={"fingerprint": run_fingerprint(study, seed), "parameters": list(logpost.names)},
    )


def _finish(study, seed, result, started, provenance) -> Posterior:
    posterior = Posterior(study, result, seed=seed, run_info={
        **dict(provenance or {}),
        "sampling_seconds": round(time.time() - started, 3),
        "finished_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "resumed_from_step": result.resumed_from,
    })
    for line in posterior.posterior_warnings:
        warnings.warn(PosteriorWarning(line), stacklevel=3)
    return posterior


def _prepare_folders(out: Path, study, *, resume: bool, force: bool) -> Path:
    """Apply the output-folder rules before any work; return the checkpoint folder."""
    partial = out.with_name(out.name + ".partial")
    inputs = study_inputs(study)
    check_output_folder(out, force=force, inputs=inputs)
    if resume and not partial.is_dir():
        raise OutputConflict("there is no interrupted run to resume for this folder",
                             reason="no-checkpoint", file=partial)
    if not resume and (partial.exists() or partial.is_symlink()):
        if not force:
            raise OutputConflict("an interrupted run is stored here", reason="checkpoint",
                                 file=partial)
        remove_listed(partial, check_replaceable(partial, inputs=inputs,
                                                 what="checkpoint folder"))
    remove_stale_temporaries(out)
    if not resume:
        try:
            partial.mkdir()
        except OSError as err:
            raise InputError(f"cannot create the checkpoint folder ({err.strerror})",
                             file=partial) from None
    return partial


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
        finite = self.tau[np.isfinite(self.tau)]
        self.thin = max(1, int(np.min(finite) // 2)) if finite.size else 1

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
        tau = np.maximum(autocorrelation_time(kept), 1.0)
        ess = kept.shape[0] * kept.shape[1] / tau
        return _summary_table(DERIVED, kept, self.map, ess, tau, UNITS)

    @cached_property
    def diagnostics(self) -> dict:
        """Convergence diagnostics (the content of diagnostics.json)."""
        from ._diagnostics import diagnostics_dict

        return diagnostics_dict(self)

    @cached_property
    def posterior_warnings(self) -> list[str]:
        """What needs care about the posterior itself, one line each (see `warnings`)."""
        from ._diagnostics import posterior_warnings

        return posterior_warnings(self)

    @property
    def warnings(self) -> list[str]:
        """Everything a user must know before using the numbers, one line each.

        Why the run did not converge (each unmet part of the stopping rule), then
        `posterior_warnings`: a posterior piled against a prior bound or the edge of the
        model's range, samples whose melting starts at the model's base, no melt.
        """
        steps = self.chain.shape[0]
        return [f"NOT converged within the step cap ({steps} steps): {line}"
                for line in self.result.assessment["shortfalls"]] + self.posterior_warnings

    def save(self, directory: str | PathLike[str], *, force: bool = False) -> Path:
        """Write every output file to `directory` atomically.

        Files: summary.csv, derived.csv, samples.csv, chain.h5, diagnostics.json,
        run.json, corner.png, fit.png, pt.png, report.md and the manifest
        lidmelt-files.json. They are written to a temporary folder beside `directory`,
        which is then renamed into place.

        Parameters
        ----------
        directory : str or path-like
            Result folder; must not exist unless `force`.
        force : bool
            Replace an existing folder, if lidmelt wrote it and it holds nothing else
            (see `inversion._safety.check_replaceable`).

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
