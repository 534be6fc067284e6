"""`survey`: run a whole study area, site by site, and combine the sites in joint mode.

Order of work: validate the study, the ``[survey]`` table and the sites file; open (or
resume) the result folder; run the sites on the executor, writing each one's result as
it completes; in joint mode combine the sites' Tp likelihoods into the area posterior
and run the second, conditional pass; then write the tables, the figure and the report.
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ..errors import InputError
from ..outputs.formats import checked_figure_format
from ..fitting.log_posterior import UNITS
from ..observations import THICKNESS_OF
from . import joint
from .executors import make_executor
from .job import GRID_MAX_FREE, QUANTILES, TP, SiteTask, run_site
from .outputs import AREA_COLUMNS, SurveyFolder, identity, summary_rows
from .settings import SPREAD, load_survey_study
from .sites import read_sites

__all__ = ["MODES", "SurveyResult", "survey"]

#: Survey modes.
MODES = ("independent", "joint")


@dataclass(frozen=True)
class SurveyResult:
    """What a survey produced.

    Attributes
    ----------
    folder : pathlib.Path
    summary : pandas.DataFrame
        The content of sites_summary.csv.
    area : pandas.DataFrame or None
        The content of area.csv (joint mode).
    records : list of dict
        Every site's final record, in site order.
    """

    folder: Path
    summary: pd.DataFrame
    area: pd.DataFrame | None
    records: list

    @property
    def failed(self) -> list[dict]:
        """Records of the sites whose status is not "ok"."""
        return [r for r in self.records if r["status"] != "ok"]


def survey(study: str | PathLike[str], sites: str | PathLike[str], *,
           out: str | PathLike[str], mode: str = "independent", workers: int | None = None,
           scheduler: str | None = None, seed: int | None = None, resume: bool = False,
           force: bool = False, quiet: bool = False, keep_chains: bool = False,
           figure_format: str = "png") -> SurveyResult:
    """Run a survey: every site of `sites` under the model and priors of `study`.

    Parameters
    ----------
    study : str or path-like
        Study file with a ``[survey]`` table (its own observations are not used).
    sites : str or path-like
        Sites table (see `inversion.survey.sites`).
    out : str or path-like
        Result folder to create.
    mode : {"independent", "joint"}
        One posterior per site, or an area-wide Tp shared by (or, with ``tp_spread`` in
        ``[survey]``, drawn around an area mean for) every site.
    workers : int, optional
        Local processes (default: the number of cores).
    scheduler : str, optional
        Address of an existing Dask scheduler; the sites then run on its workers.
    seed : int, optional
        Master seed (default: ``[sampler] seed``); site k gets the k-th child of
        ``numpy.random.SeedSequence(seed).spawn``.
    resume, force, quiet, keep_chains : bool
        Continue the survey in `out`; replace a survey folder; no progress bar; keep each
        site's chain or grid.
    figure_format : {"png", "pdf", "svg"}
        File format of the profile figure.

    Returns
    -------
    SurveyResult
    """
    figure_format = checked_figure_format(figure_format)
    plan = _Plan.build(study, sites, mode=mode, seed=seed, keep_chains=keep_chains)
    folder = SurveyFolder.open(out, plan.manifest, resume=resume, force=force,
                               protected=[Path(study).parent, Path(sites).parent])
    executor = make_executor(workers, scheduler)
    try:
        with _sigterm_as_interrupt():
            if mode == "independent":
                records = _run_phase(plan, folder, executor, "posterior", "final",
                                     quiet=quiet)
                area = None
            else:
                records, area = _run_joint(plan, folder, executor, quiet=quiet)
    finally:
        executor.close()
    from .report import write_report

    summary = summary_rows(records)
    folder.write_table("sites_summary.csv", summary)
    area_table = None if area is None else area_frame(area)
    if area_table is not None:
        folder.write_table("area.csv", area_table)
    result = SurveyResult(folder.path, summary, area_table, records)
    write_report(result, plan, folder, executor_name=executor.where,
                 figure_format=figure_format)
    return result


@dataclass(frozen=True)
class _Plan:
    """Validated inputs of a survey and the seed of every site."""

    study: object
    settings: object
    table: object
    mode: str
    seed: int
    seeds: tuple
    keep_chains: bool
    manifest: dict

    @classmethod
    def build(cls, study_path, sites_path, *, mode, seed, keep_chains) -> _Plan:
        if mode not in MODES:
            raise InputError(f"unknown mode {mode!r}; choose 'independent' or 'joint'",
                             key="mode")
        study, settings = load_survey_study(study_path)
        table = read_sites(sites_path)
        _check_combination(study, settings, table, mode, Path(study_path))
        seed = int(study.sampler.seed if seed is None else seed)
        if not 0 <= seed < 2**32:
            raise InputError(f"seed {seed} must be from 0 to 2**32 - 1", key="seed")
        children = np.random.SeedSequence(seed).spawn(len(table))
        seeds = tuple(int(c.generate_state(1)[0]) for c in children)
        run = {"mode": mode, "seed": seed, "keep_chains": keep_chains,
               "survey": settings.record()}
        manifest = identity(study.file_hash, table.sha256, run)
        manifest.update(study_file=str(Path(study_path).resolve()),
                        sites_file=str(Path(sites_path).resolve()), sites=len(table))
        return cls(study, settings, table, mode, seed, seeds, keep_chains, manifest)

    def task(self, kind: str, index: int, **extra) -> SiteTask:
        return SiteTask(kind, self.study, self.settings, self.table.sites[index],
                        self.seeds[index], keep_chains=self.keep_chains, **extra)

    @property
    def predicted(self) -> str:
        return THICKNESS_OF[self.settings.thickness_of]

    @property
    def row_names(self) -> tuple[str, ...]:
        return (*self.study.free_parameters, self.predicted)


def _check_combination(study, settings, table, mode: str, study_path: Path) -> None:
    free = study.free_parameters
    if table.has_pressures and settings.equilibration is None:
        raise InputError("the sites carry melting pressures: set equilibration = \"top\", "
                         "\"pooled\" or \"path\" in the [survey] table", file=study_path,
                         key="survey.equilibration")
    if mode == "joint":
        if TP not in free:
            raise InputError("joint mode shares the potential temperature between sites: "
                             "give it a prior", file=study_path,
                             key=f"parameters.{TP}")
        if len(free) > GRID_MAX_FREE:
            raise InputError(f"joint mode integrates each site's own parameters on a grid, "
                             f"so at most {GRID_MAX_FREE} free parameters ({len(free)} "
                             f"given: {', '.join(free)}); fix some or use --mode "
                             "independent", file=study_path, key="parameters")
    elif settings.hierarchical:
        raise InputError("tp_spread is used by --mode joint only; remove it or use --mode "
                         "joint", file=study_path, key=f"survey.{SPREAD}")


def _run_phase(plan: _Plan, folder: SurveyFolder, executor, kind: str, phase: str, *,
               quiet: bool, indices: Sequence[int] | None = None,
               extra: dict | None = None) -> list[dict]:
    """Run `kind` tasks for the sites without a `phase` record; return all records."""
    indices = range(len(plan.table)) if indices is None else indices
    records, todo = {}, []
    for k in indices:
        site = plan.table.sites[k]
        record = folder.read_record(k, site.name, phase)
        if record is None:
            todo.append(k)
        else:
            records[k] = record
    tasks = [plan.task(kind, k, **(extra or {}).get(k, {})) for k in todo]
    label = {"posterior": "sites", "likelihood": "Tp likelihoods",
             "conditional": "site posteriors"}[kind]
    with tqdm(total=len(indices), initial=len(records), disable=quiet, unit="site",
              desc=label, smoothing=0.05) as bar:
        for number, outcome in executor.run(run_site, tasks):
            k = todo[number]
            outcome = _as_outcome(outcome, plan, k, kind)
            if phase == "likelihood":
                outcome.record["tp_axis"] = [float(v) for v in extra[k]["tp_axis"]]
            _fill_failed(outcome.record, plan.row_names)
            records[k] = folder.write_record(outcome.record, phase, outcome.arrays)
            bar.update(1)
    return [records[k] for k in indices]


def _as_outcome(outcome, plan: _Plan, k: int, kind: str):
    """A worker-level exception (a lost worker, a broken pool) as a failed record."""
    from .job import SiteOutcome, _base_record

    if isinstance(outcome, SiteOutcome):
        return outcome
    record = _base_record(plan.task(kind, k))
    record.update(status=f"failed: the worker running this site failed: "
                  f"{type(outcome).__name__}: {outcome}", seconds=None)
    return SiteOutcome(record)


def _fill_failed(record: dict, names: Sequence[str]) -> None:
    """Give a failed final record one NaN row per parameter (every site has its rows)."""
    if record["phase"] == "likelihood" or record.get("rows"):
        return
    record["rows"] = [{"parameter": n, "unit": UNITS[n], **{q: None for q in QUANTILES}}
                      for n in names]


def _run_joint(plan: _Plan, folder: SurveyFolder, executor, *, quiet: bool):
    """First pass (Tp likelihoods), area posterior, second pass (site posteriors)."""
    prior = plan.study.priors[TP]
    axis = joint.tp_axis(prior, plan.settings.tp_nodes)
    n = len(plan.table)
    first = _run_phase(plan, folder, executor, "likelihood", "likelihood", quiet=quiet,
                       extra={k: {"tp_axis": axis} for k in range(n)})
    used = [k for k, r in enumerate(first) if r["status"] == "ok"]
    if not used:
        raise InputError("no site could be used for the area-wide answer; see the "
                         "failed sites in the site folders", file=folder.path)
    profiles = np.array([first[k]["tp_log_likelihood"] for k in used])
    if plan.settings.hierarchical:
        area = joint.combine_hierarchical(axis, profiles, prior, plan.settings.tp_spread)
    else:
        area = joint.combine_shared(axis, profiles, prior)
    extra = {k: {"tp_factor": area.factors[j], "tp_box": area.boxes[j]}
             for j, k in enumerate(used)}
    alone = {k: dict(zip(QUANTILES, map(float, joint.alone_quantiles(
        axis, first[k]["tp_log_likelihood"], prior, list(QUANTILES.values()))), strict=True))
        for k in used}
    second = dict(zip(used, _run_phase(plan, folder, executor, "conditional", "final",
                                       quiet=quiet, indices=used, extra=extra),
                      strict=True))
    records = []
    for k, record in enumerate(first):
        if k in second:
            records.append({**second[k], "tp_alone": alone[k]})
            continue
        final = {**record, "phase": "final"}
        final.pop("tp_log_likelihood", None)
        final.pop("tp_axis", None)
        _fill_failed(final, plan.row_names)
        records.append(folder.write_record(final, "final"))
    return records, area


def area_frame(area) -> pd.DataFrame:
    """area.csv: one row per area-wide parameter."""
    post = area.posterior
    meaning = {TP: ("mean of the site potential temperatures" if area.hierarchical else
                    "one potential temperature shared by every site"),
               SPREAD: "spread (standard deviation) of the site potential temperatures"}
    rows = []
    for name in post.names:
        q = post.quantile(name, list(QUANTILES.values()))
        rows.append({"parameter": name, "unit": "degC", "meaning": meaning[name],
                     **dict(zip(QUANTILES, map(float, q), strict=True)),
                     "mean": post.mean(name), "sites": area.sites,
                     "method": "grid (product of site Tp likelihoods)"})
    return pd.DataFrame(rows, columns=list(AREA_COLUMNS))


class _sigterm_as_interrupt:
    """A job scheduler's SIGTERM stops the survey like Ctrl-C (finished sites are kept)."""

    def __enter__(self):
        self.previous = None
        if threading.current_thread() is threading.main_thread():
            self.previous = signal.signal(signal.SIGTERM, _raise_interrupt)
        return self

    def __exit__(self, *exc):
        if self.previous is not None:
            signal.signal(signal.SIGTERM, self.previous)
        return False


def _raise_interrupt(signum, frame):
    raise KeyboardInterrupt

