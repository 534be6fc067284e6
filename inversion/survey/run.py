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
from dataclasses import dataclass, replace
from os import PathLike
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ..errors import InputError
from ..outputs.folder import output_lock, output_path
from ..outputs.formats import checked_figure_format
from ..fitting.log_posterior import UNITS
from ..observations import THICKNESS_OF
from ..study.seeds import check_seed, integer_seed
from . import joint
from .executors import make_executor
from .job import GRID_MAX_FREE, QUANTILES, TP, SiteTask, run_site
from .outputs import AREA_COLUMNS, SurveyFolder, identity, summary_rows
from ..study.file import Study
from .settings import SPREAD, load_survey_study, survey_study
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

    @property
    def usable(self) -> list[dict]:
        """Records of the sites that gave a result (those the area-wide answer uses)."""
        return [r for r in self.records if r["status"] == "ok"]

    @property
    def in_tension(self) -> list[dict]:
        """Joint mode: used sites flagged by the consistency check (`joint.tension_p`)."""
        return [r for r in self.usable if r.get("in_tension")]


def survey(study: Study | str | PathLike[str], sites: str | PathLike[str], *,
           out: str | PathLike[str], mode: str = "independent", workers: int | None = None,
           scheduler: str | None = None, seed: int | None = None, resume: bool = False,
           force: bool = False, quiet: bool = False, keep_chains: bool = False,
           figure_format: str = "png") -> SurveyResult:
    """Run a survey: every site of `sites` under the model and priors of `study`.

    Parameters
    ----------
    study : Study, str or path-like
        Study file with a ``[survey]`` table (its own observations are not used), or a
        `Study` such as ``Study.from_file(path)`` of that file: its ``[survey]`` table
        (`Study.survey`; the defaults when it has none) is used and its observations
        are not. An unchanged study read from a file gives the survey of the file
        itself (same numbers, and either call resumes the other's folder).
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
        Master seed (default: ``[sampler] seed``); site k gets its own seed from the
        stream ``survey_site`` (`inversion.study.seeds`), by site order.
    resume, force, quiet, keep_chains : bool
        Continue the survey in `out`; replace a survey folder; no progress bar; keep each
        site's chain or grid.
    figure_format : {"png", "pdf", "svg"}
        File format of the profile figure.

    Returns
    -------
    SurveyResult

    Raises
    ------
    InputError
        Bad input (file, line, key), an existing folder without `resume`/`force`, and a
        call from a script outside its ``if __name__ == "__main__":`` guard with more
        than one local worker (`executors.check_main_guard`).

    Notes
    -----
    Local workers start by importing the calling script again, so a script (also one a
    batch scheduler runs) calls `survey` under ``if __name__ == "__main__":`` or passes
    ``workers=1``. A folder left by an interrupted or failed run is continued with
    ``resume=True`` (finished sites are kept; sites whose worker process failed run
    again) or replaced with ``force=True``.
    """
    figure_format = checked_figure_format(figure_format)
    plan = _Plan.build(study, sites, mode=mode, seed=seed, keep_chains=keep_chains)
    study_inputs = [] if plan.study.source is None else [Path(plan.study.source)]
    target = output_path(out, what="survey folder")
    _prepare_table(plan.study, quiet=quiet)  # a long first build shows its progress here
    executor = make_executor(workers, scheduler)  # a bad option stops before any folder
    try:
        with output_lock(target):  # held for the whole run: no second run writes here
            folder = SurveyFolder.open(target, plan.manifest, resume=resume, force=force,
                                       inputs=[*study_inputs, Path(sites)],
                                       site_names=[s.name for s in plan.table.sites])
            try:
                return _run(plan, folder, executor, mode=mode, quiet=quiet,
                            figure_format=figure_format)
            except InputError:
                if not resume:  # bad input found late: leave no half folder behind
                    folder.discard()
                raise
    finally:
        executor.close()


def _run(plan: _Plan, folder: SurveyFolder, executor, *, mode: str,
         quiet: bool, figure_format: str = "png") -> SurveyResult:
    """Run the sites, combine them (joint mode), write the tables and the report."""
    with _sigterm_as_interrupt():
        if mode == "independent":
            records = _run_phase(plan, folder, executor, "posterior", "final", quiet=quiet)
            area = None
        else:
            records, area = _run_joint(plan, folder, executor, quiet=quiet)
    from .report import write_report

    summary = summary_rows(records)
    folder.write_table("sites_summary.csv", summary)
    area_table = None if area is None else area_frame(area)
    if area_table is not None:
        folder.write_table("area.csv", area_table)
    from .netcdf import SURVEY_NETCDF, survey_dataset_bytes

    units = site_units(plan.study, plan.settings, plan.table.has_pressures)
    folder.write_bytes(SURVEY_NETCDF, survey_dataset_bytes(plan, folder, records, area,
                                                           units))
    result = SurveyResult(folder.path, summary, area_table, records)
    write_report(result, plan, folder, executor_name=executor.where,
                 figure_format=figure_format)
    return result


def _prepare_table(study, *, quiet: bool) -> None:
    """Load (or build, showing its progress unless ``quiet``) the melting table the sites
    need, here in the main process: worker processes then load the cached file instead
    of building it where no progress can be shown."""
    from ...forward import melt_column
    from ..fitting.progress import table_progress

    wet = "water" in study.priors or study.fixed.get("water", 0.0) > 0.0
    with table_progress(quiet=quiet):
        melt_column(1350.0, 0.0, water=1.0 if wet else 0.0,
                    parameterization=study.model.parameterization)


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
    def build(cls, given, sites_path, *, mode, seed, keep_chains) -> _Plan:
        if mode not in MODES:
            raise InputError(f"unknown mode {mode!r}; choose 'independent' or 'joint'",
                             key="mode")
        if isinstance(given, Study):
            study, settings, study_hash = survey_study(given)
        else:
            study, settings = load_survey_study(given)
            study_hash = study.file_hash
        study_path = None if study.source is None else Path(study.source)
        table = read_sites(sites_path)
        if all(site.error is not None for site in table.sites):  # nothing could run
            raise InputError(f"no site could be used: every row has a bad value; the "
                             f"first, '{table.sites[0].name}': {table.sites[0].error}")
        _check_combination(study, settings, table, mode, study_path)
        seed = check_seed(study.sampler.seed if seed is None else seed)
        seeds = tuple(integer_seed(seed, "survey_site", k) for k in range(len(table)))
        run = {"mode": mode, "seed": seed, "keep_chains": keep_chains,
               "survey": settings.record()}
        manifest = identity(study_hash, table.sha256, run)
        manifest.update(study_file=study_path and str(study_path.resolve()),
                        sites_file=str(Path(sites_path).resolve()), sites=len(table))
        return cls(study, settings, table, mode, seed, seeds, keep_chains, manifest)

    def task(self, kind: str, index: int, **extra) -> SiteTask:
        return SiteTask(kind, self.study, self.settings, self.table.sites[index],
                        self.seeds[index], keep_chains=self.keep_chains, **extra)

    @property
    def predicted(self) -> str:
        return THICKNESS_OF[self.settings.thickness_of]

    @property
    def row_names(self) -> dict:
        """Rows of a site and their units: free parameters (model errors too), thickness."""
        units = site_units(self.study, self.settings, self.table.has_pressures)
        return {**units, self.predicted: UNITS[self.predicted]}


def site_units(study, settings, has_pressures: bool) -> dict:
    """Unit of every free parameter of a site (a pressure site when `has_pressures`),
    in column order, model errors included."""
    from ..fitting.log_posterior import LogPosterior
    from .sites import Site, site_observations

    pressure = {"pressure_gpa": 1.0, "pressure_sigma_gpa": 0.1} if has_pressures else {}
    probe = Site(0, "probe", 0, thickness_km=5.0, thickness_sigma_km=1.0, **pressure)
    if settings.equilibration is None:
        settings = replace(settings, equilibration="top")
    logpost = LogPosterior(study.with_observations(site_observations(probe, settings)))
    return {name: logpost.units.get(name) or UNITS.get(name) for name in logpost.names}


def _check_combination(study, settings, table, mode: str, study_path: Path | None) -> None:
    free = tuple(site_units(study, settings, table.has_pressures))
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
                             f"given: {', '.join(free)}); fix some or use the independent "
                             "mode", file=study_path, key="parameters")
    elif settings.hierarchical:
        raise InputError("tp_spread is used by the joint mode only; remove it or use "
                         "the joint mode", file=study_path, key=f"survey.{SPREAD}")


def _run_phase(plan: _Plan, folder: SurveyFolder, executor, kind: str, phase: str, *,
               quiet: bool, indices: Sequence[int] | None = None,
               extra: dict | None = None, area_key: str | None = None) -> list[dict]:
    """Run `kind` tasks for the sites without a usable `phase` record; return all records.

    A stored record is reused only when it is complete (`_RECORD_KEYS`) and, in the
    second joint pass, was made from the same set of sites (`area_key`).
    """
    indices = range(len(plan.table)) if indices is None else indices
    records, todo = {}, []
    for k in indices:
        site = plan.table.sites[k]
        record = folder.read_record(k, site.name, phase)
        if _usable(record, area_key) and _has_draws(folder, record, phase):
            records[k] = record
        else:
            todo.append(k)
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
            if area_key is not None:
                outcome.record["area_key"] = area_key
            _fill_failed(outcome.record, plan.row_names)
            records[k] = folder.write_record(outcome.record, phase, outcome.arrays)
            bar.update(1)
    return [records[k] for k in indices]


#: Keys every stored site record has (a damaged site.json without them runs again).
_RECORD_KEYS = ("site", "index", "line", "position_km", "seed", "phase", "method",
                "converged", "status")


def _usable(record: dict | None, area_key: str | None) -> bool:
    """Whether a stored record is kept on resume: complete, made from the same sites
    (`area_key`), and not failed by its worker (a lost process or a broken pool is no
    answer about the site, so the site runs again)."""
    if not isinstance(record, dict) or any(key not in record for key in _RECORD_KEYS):
        return False
    if record.get("worker_failed"):
        return False
    if record["phase"] != "likelihood" and not isinstance(record.get("rows"), list):
        return False
    if record["phase"] == "likelihood" and record["status"] == "ok" and not isinstance(
            record.get("tp_log_likelihood"), list):
        return False
    return area_key is None or record.get("area_key") == area_key


def _has_draws(folder: SurveyFolder, record: dict, phase: str) -> bool:
    """A final record with a result keeps its draws for survey.nc (a folder written
    without them runs the site again on resume)."""
    if phase != "final" or record["status"].startswith("failed"):
        return True
    return (folder.site_dir(record["index"], record["site"]) / "draws.npz").is_file()


def _as_outcome(outcome, plan: _Plan, k: int, kind: str):
    """A worker-level exception (a lost worker, a broken pool) as a failed record."""
    from .job import SiteOutcome, _base_record

    from concurrent.futures.process import BrokenProcessPool

    from .executors import GUARD_ADVICE

    if isinstance(outcome, SiteOutcome):
        return outcome
    record = _base_record(plan.task(kind, k))
    record.update(status=f"failed: the worker running this site failed: "
                  f"{type(outcome).__name__}: {outcome}", seconds=None, worker_failed=True)
    if isinstance(outcome, BrokenProcessPool):  # most often a script without a guard
        record["status"] = ("failed: the local worker processes stopped (from a script "
                            f"that is the usual cause: {GUARD_ADVICE})")
    return SiteOutcome(record)


def _fill_failed(record: dict, names: dict) -> None:
    """Give a failed final record one NaN row per parameter (every site has its rows)."""
    if record["phase"] == "likelihood" or record.get("rows"):
        return
    record["rows"] = [{"parameter": n, "unit": unit, **{q: None for q in QUANTILES}}
                      for n, unit in names.items()]


def _run_joint(plan: _Plan, folder: SurveyFolder, executor, *, quiet: bool):
    """First pass (Tp likelihoods), area posterior, second pass (site posteriors).

    Only sites that give a result make the area-wide answer: a site that fails its
    second pass (e.g. the model cannot fit it, `job._finish`) is left out, the area
    posterior is combined again from the others and their second pass rerun, until no
    site used fails (each round drops at least one site). Returns the final records and
    the area posterior, None when no site could be used.
    """
    prior = plan.study.priors[TP]
    axis = joint.tp_axis(prior, plan.settings.tp_nodes)
    n = len(plan.table)
    first = _run_phase(plan, folder, executor, "likelihood", "likelihood", quiet=quiet,
                       extra={k: {"tp_axis": axis} for k in range(n)})
    used = [k for k, r in enumerate(first) if r["status"] == "ok"]
    second, area = {}, None
    while used:
        profiles = np.array([first[k]["tp_log_likelihood"] for k in used])
        if plan.settings.hierarchical:
            area = joint.combine_hierarchical(axis, profiles, prior,
                                              plan.settings.tp_spread)
        else:
            area = joint.combine_shared(axis, profiles, prior)
        key = _area_key(used)
        extra = {k: {"tp_factor": area.factors[j], "tp_box": area.boxes[j]}
                 for j, k in enumerate(used)}
        second.update(zip(used, _run_phase(plan, folder, executor, "conditional", "final",
                                           quiet=quiet, indices=used, extra=extra,
                                           area_key=key), strict=True))
        dropped = [k for k in used if second[k]["status"] != "ok"]
        if not dropped:
            break
        used = [k for k in used if k not in dropped]
    if not used:
        area = None
    tension = {} if area is None else dict(zip(used, area.tension, strict=True))
    records = []
    for k, record in enumerate(first):
        if k in second:
            final = {**second[k], "tp_alone": dict(zip(QUANTILES, map(float, (
                joint.alone_quantiles(axis, record["tp_log_likelihood"], prior,
                                      list(QUANTILES.values())))), strict=True))}
            if k in tension:
                final.update(tension_p=tension[k],
                             in_tension=bool(tension[k] < joint.TENSION_P))
            records.append(final)
            continue
        final = {**record, "phase": "final"}
        final.pop("tp_log_likelihood", None)
        final.pop("tp_axis", None)
        _fill_failed(final, plan.row_names)
        records.append(folder.write_record(final, "final"))
    return records, area


def _area_key(used: Sequence[int]) -> str:
    """Which sites made the area posterior that a second-pass record depends on."""
    import hashlib

    return hashlib.sha256(",".join(map(str, used)).encode()).hexdigest()[:16]


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

