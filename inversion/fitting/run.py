"""Fit a study: `fit` samples the posterior and returns a `Posterior`.

`fit` validates the run settings, builds the vectorised log-posterior, starts the walkers
(from the prior or around the MAP), runs the sampler until the autocorrelation-based
stopping rule is met and returns a `Posterior`. With ``out`` the chain is checkpointed in
``<out>.partial/`` while it runs (so ``resume=True`` can continue an interrupted run) and
all outputs are then written atomically to ``out``. Replacing an old output follows the
one rule of `inversion.outputs.folder`.
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Mapping
from os import PathLike
from pathlib import Path

import numpy as np

from ..errors import InputError, OutputConflict, PosteriorWarning, WriteError
from ..outputs.folder import (
    check_output_folder,
    discard_checkpoint,
    output_lock,
    output_path,
    remove_stale_temporaries,
)
from ..outputs.formats import checked_figure_format
from ..outputs.identity import run_fingerprint, study_inputs
from ..study.seeds import check_seed, generator, integer_seed
from ..results.posterior import Posterior
from . import start as _start
from .checkpoint import CheckpointBackend, stored_steps
from .log_posterior import LogPosterior
from .progress import table_progress
from .sampler import ChainResult, run_chain

__all__ = ["fit"]


def fit(
    study,
    *,
    seed: int | None = None,
    out: str | PathLike[str] | None = None,
    resume: bool = False,
    quiet: bool = False,
    force: bool = False,
    provenance: Mapping | None = None,
    figure_format: str = "png",
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
        them (see `inversion.outputs.folder.check_replaceable`).
    provenance : mapping, optional
        Extra entries for run.json (the command line passes its arguments).
    figure_format : {"png", "pdf", "svg"}
        File format of the figures in `out` (checked before sampling starts).

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
    seed = check_seed(study.sampler.seed if seed is None else seed)
    figure_format = checked_figure_format(figure_format)
    if not study.priors:  # a scenario may fix everything (inversion.study.scenarios)
        raise InputError("every parameter is fixed, so there is nothing to sample; give "
                         "at least one a prior", key="parameters")
    if out is None:
        if resume:
            raise InputError("resuming needs the result folder of the interrupted run",
                             key="out")
        started = time.time()
        result = _sample(study, seed, None, resume=False, quiet=quiet)
        return _finish(study, seed, result, started, provenance)
    out = output_path(out)
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
        try:  # the checkpoint goes in the same held step as the folder is published
            posterior.save(out, force=force, figure_format=figure_format,
                           after_publish=CheckpointBackend(partial).remove)
        except WriteError as err:
            raise WriteError(err.path, err.cause, kept_steps=stored_steps(partial),
                             checkpoint=partial) from err.cause
    return posterior


def _sample(study, seed: int, checkpoint, *, resume: bool, quiet: bool) -> ChainResult:
    """Start the walkers (unless resuming) and run the sampler to its stopping rule.

    A melting table built on the way (the first run of a lidmelt version) shows its
    progress on stderr unless ``quiet`` (`progress.table_progress`).
    """
    with table_progress(quiet=quiet):
        return _start_and_run(study, seed, checkpoint, resume=resume, quiet=quiet)


def _start_and_run(study, seed: int, checkpoint, *, resume: bool,
                          quiet: bool) -> ChainResult:
    settings = study.sampler
    logpost = LogPosterior(study)
    rng = generator(seed, "walker_start")
    if resume:  # positions come from the checkpoint
        initial = np.zeros((settings.walkers, logpost.ndim))
    elif settings.start == "map":
        initial = _start.map_start(logpost, settings.walkers, rng)[0]
    else:
        initial = _start.prior_start(logpost, settings.walkers, rng)
    return run_chain(
        logpost, initial, seed=integer_seed(seed, "sampler_moves"),
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
    check_output_folder(out, force=force, inputs=inputs, kind="fit result")
    if resume and not partial.is_dir():
        raise OutputConflict("there is no interrupted run to resume for this folder",
                             reason="no-checkpoint", file=partial)
    if not resume:
        discard_checkpoint(partial, force=force, inputs=inputs, kind="checkpoint",
                           problem="an interrupted run is stored here")
    remove_stale_temporaries(out)
    if not resume:
        try:
            partial.mkdir()
        except OSError as err:
            raise InputError(f"cannot create the checkpoint folder ({err.strerror})",
                             file=partial) from None
    return partial
