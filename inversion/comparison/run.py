"""`compare`: evidence, posterior, PSIS-LOO and checks for every scenario of a study."""

from __future__ import annotations

import time
import warnings
from collections.abc import Callable
from os import PathLike
from pathlib import Path

import numpy as np

from ..errors import InputError, NotConvergedWarning, PosteriorWarning
from ..fitting.log_posterior import LogPosterior
from ..outputs.formats import checked_figure_format
from ..study.scenarios import ComparisonSettings, Scenario, ScenarioSet, read_scenarios
from ..study.file import Study
from ..study.seeds import check_seed, generator, integer_seed
from .checks import fit_check
from .evidence import scenario_evidence
from .loo import loo_fixed, loo_from_draws, posterior_draws
from .result import Comparison, ScenarioResult

__all__ = ["ComparisonWarning", "compare", "evaluate_scenario", "scenario_seeds"]


class ComparisonWarning(UserWarning):
    """A caveat of a scenario comparison (also listed in its report.md)."""


def compare(
    study: Study | ScenarioSet | str | PathLike[str],
    *,
    seed: int | None = None,
    settings: ComparisonSettings | None = None,
    out: str | PathLike[str] | None = None,
    resume: bool = False,
    force: bool = False,
    quiet: bool = True,
    progress: Callable[[str], None] | None = None,
    figure_format: str = "png",
) -> Comparison:
    """Compare the scenarios of a study by their evidence and by PSIS-LOO.

    Parameters
    ----------
    study : Study, ScenarioSet, str or path-like
        A study file with ``[[scenarios]]`` (path); a `Study` read from a file (the
        scenarios of that file, which must be unchanged, are applied to it); a study
        built in code (then it is the only scenario); or a `ScenarioSet`.
    seed : int, optional
        Master seed (default: the study's ``[sampler] seed``). Each scenario's posterior
        is sampled with it, as ``lidmelt fit --seed`` would; the nested sampler of
        scenario i uses the i-th seed spawned from it.
    settings : ComparisonSettings, optional
        Overrides the study file's ``[comparison]`` table.
    out : str or path-like, optional
        Result folder. Finished scenarios are kept in ``<out>.partial/`` while the others
        run, and everything is moved to `out` at the end.
    resume : bool
        Skip the scenarios finished by an interrupted run for `out` (refused when the
        study file or its tables changed since).
    force : bool
        Replace a comparison folder (or checkpoint) lidmelt wrote before (the rule of
        `inversion.outputs.folder`: never the working folder, a folder holding the inputs, or
        anything lidmelt did not write).
    quiet : bool
        Hide the samplers' progress bars.
    progress : callable, optional
        Called with a short message as each part of each scenario starts.
    figure_format : {"png", "pdf", "svg"}
        File format of compare.png and of every scenario's figures (with `out`).

    Returns
    -------
    Comparison

    Warns
    -----
    ComparisonWarning
        For every caveat in `Comparison.warnings`.
    """
    from ..fitting.progress import table_progress

    found = _scenario_set(study, settings)
    seed = check_seed(found.base.sampler.seed if seed is None else seed)
    figure_format = checked_figure_format(figure_format)
    with table_progress(quiet=quiet):
        comparison = _compare(found, seed, out, resume=resume, force=force, quiet=quiet,
                              progress=progress, figure_format=figure_format)
    for message in comparison.warnings():
        warnings.warn(ComparisonWarning(message), stacklevel=2)
    return comparison


def _compare(found, seed: int, out, *, resume: bool, force: bool, quiet: bool,
             progress, figure_format: str) -> Comparison:
    """`compare` after its inputs are read: run every scenario, in `out` if given."""
    if out is None:
        if resume:
            raise InputError("resuming needs the result folder of the interrupted run",
                             key="out")
        comparison = _run(found, seed, None, quiet=quiet, progress=progress)
    else:
        from ..outputs.folder import output_lock, output_path
        from .outputs import Checkpoint

        out = output_path(out, what="comparison folder")
        with output_lock(out):
            checkpoint = Checkpoint.open(out, found, seed, resume=resume, force=force,
                                         figure_format=figure_format)
            try:
                comparison = _run(found, seed, checkpoint, quiet=quiet, progress=progress)
            except InputError:
                if not resume:  # bad input found late: leave no half folder behind
                    checkpoint.discard()
                raise
            checkpoint.finish(comparison, force=force)
    return comparison


def _run(found, seed: int, checkpoint, *, quiet: bool, progress) -> Comparison:
    """Every scenario in turn; a finished one is loaded from the checkpoint."""
    seeds = scenario_seeds(seed, len(found.scenarios))
    results = []
    for scenario, nested_seed in zip(found.scenarios, seeds, strict=True):
        stored = None if checkpoint is None else checkpoint.load(scenario)
        done = None
        if stored is not None:
            record, posterior = stored
            done = ScenarioResult.from_dict(record, scenario, posterior)
        if done is None:
            done = evaluate_scenario(scenario, seed=seed, nested_seed=nested_seed,
                                     settings=found.settings, quiet=quiet,
                                     progress=progress)
            if checkpoint is not None:
                checkpoint.store(done)
        results.append(done)
    return Comparison(found, results, seed=seed)


def scenario_seeds(seed: int, count: int) -> list[int]:
    """Nested-sampling seed of each scenario (stream ``scenario_nested`` of `seeds`)."""
    return [integer_seed(seed, "scenario_nested", i) for i in range(count)]


def evaluate_scenario(scenario: Scenario, *, seed: int, nested_seed: int,
                      settings: ComparisonSettings, quiet: bool = True,
                      progress: Callable[[str], None] | None = None) -> ScenarioResult:
    """Evidence, posterior, LOO and checks of one scenario.

    Parameters
    ----------
    scenario : Scenario
    seed : int
        Seed of the posterior sampler (and of the predictive check).
    nested_seed : int
        Seed of the nested sampler.
    settings : ComparisonSettings
    quiet : bool
        Hide the posterior sampler's progress bar.
    progress : callable, optional
        Receives a message as each part starts.
    """
    from ..fitting.run import fit

    say = progress or (lambda message: None)
    logpost = LogPosterior(scenario.study)
    say(f"{scenario.name}: evidence (nested sampling"
        + (", quadrature)" if 0 < logpost.ndim <= 3 else ")"))
    evidence = scenario_evidence(logpost, live_points=settings.live_points,
                                 effective_samples=settings.effective_samples,
                                 grid_points=settings.grid_points, seed=nested_seed)
    seconds = {"nested": evidence.seconds_nested, "quadrature": evidence.seconds_quadrature}
    posterior, caveats = None, ()
    started = time.perf_counter()
    if logpost.ndim:
        say(f"{scenario.name}: posterior (emcee)")
        with warnings.catch_warnings():  # listed by the comparison (Posterior.warnings)
            warnings.simplefilter("ignore", NotConvergedWarning)
            warnings.simplefilter("ignore", PosteriorWarning)
            posterior = fit(scenario.study, seed=seed, quiet=quiet)
        seconds["posterior"] = time.perf_counter() - started
        caveats = tuple(posterior.warnings)
        say(f"{scenario.name}: leave-one-out (PSIS-LOO)")
        draws = posterior_draws(posterior)
        loo = loo_from_draws(posterior.logpost, draws)
        flat = draws.reshape(-1, logpost.ndim)
    else:
        seconds["posterior"] = 0.0
        loo, flat = loo_fixed(logpost), np.zeros((1, 0))
    seconds["loo"] = loo.seconds
    started = time.perf_counter()
    check = fit_check(logpost, flat, generator(seed, "scenario_check"))
    seconds["checks"] = time.perf_counter() - started
    return ScenarioResult(scenario, evidence, loo, check, posterior, caveats,
                          {k: round(float(v), 3) for k, v in seconds.items()})


def _scenario_set(study, settings: ComparisonSettings | None) -> ScenarioSet:
    if isinstance(study, ScenarioSet):
        found = study
    elif isinstance(study, Study):
        found = _from_study(study)
    elif isinstance(study, (str, PathLike)):
        found = read_scenarios(study)
    else:
        raise TypeError(f"compare needs a Study, a ScenarioSet or a study file path, got "
                        f"{type(study).__name__}")
    if settings is not None:
        found = ScenarioSet(found.base, found.scenarios, settings, found.input_hashes)
    return found


def _from_study(study: Study) -> ScenarioSet:
    """The scenarios of the study's file applied to `study`; just `study` without a file."""
    if study.source is None or not Path(study.source).is_file():
        return ScenarioSet.from_study(study)
    return read_scenarios(study.source, base=study)
