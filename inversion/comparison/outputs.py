"""Writing a comparison folder, scenario by scenario, atomically and resumably.

Layout of ``DIR``::

    evidence.csv        one row per scenario (EVIDENCE_COLUMNS)
    compare.png         posteriors, predictions and scenario probabilities
    report.md           the comparison in words
    comparison.json     provenance: inputs (sha256), seed, settings, ranking
    lidmelt-files.json  the manifest that marks the folder as lidmelt's (`inversion.outputs.folder`)
    <scenario>/         what ``lidmelt fit`` writes, plus scenario.json (evidence, LOO,
                        checks, wall times), with a manifest of its own

Every file goes through `lidmelt._atomic`. While a comparison runs, each finished scenario
is staged beside its place in ``DIR.partial/`` and renamed into it in one step (it is
complete or absent); at the end the summary files are added and ``DIR.partial`` is
renamed to ``DIR``. A resumed run reloads the finished scenarios after checking that the
study file, its tables, the seed and the settings are unchanged.

What may be replaced follows lidmelt's one rule (`inversion.outputs.folder`): never a file, the
working folder or a folder holding an input; only a folder whose manifest lists
everything in it. A comparison folder holds scenario folders, which that rule (written
for flat folders) does not look into, so `check_replaceable` here checks each of them
with it and the top level against its own manifest, as the survey does for its sites.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import time
from importlib import metadata
from pathlib import Path

from ..._atomic import staged_folder, temporary_target, write_bytes
from ..errors import InputError, OutputConflict
from ..results.writers import _written as _guarded  # OSError (a full disk) -> WriteError
from ..outputs.identity import study_inputs
from ..outputs.folder import (
    MANIFEST,
    check_not_protected,
    output_lock,
    remove_listed,
    remove_stale_temporaries,
    write_manifest,
)
from ..outputs.folder import check_replaceable as check_flat_replaceable
from ..fitting.sampler import assess_chain, read_chain

__all__ = ["COMPARISON_FILES", "RECORD", "SCENARIO_FILE", "Checkpoint", "check_replaceable",
           "comparison_files", "save_comparison"]

RECORD = "comparison.json"
SCENARIO_FILE = "scenario.json"
#: Files at the top of a comparison folder (besides the scenario folders).
COMPARISON_FILES = ("evidence.csv", "compare.png", "report.md", RECORD, MANIFEST)


def comparison_files(figure_format: str = "png") -> tuple[str, ...]:
    """`COMPARISON_FILES` with the figure in `figure_format` (``compare.pdf`` ...)."""
    return tuple(f"compare.{figure_format}" if name == "compare.png" else name
                 for name in COMPARISON_FILES)
_KIND = "comparison"
_RUN_INFO = ("command_line", "sampling_seconds", "finished_utc", "resumed_from_step")


class Checkpoint:
    """The ``DIR.partial`` folder of a running comparison (see the module docstring)."""

    def __init__(self, out: Path, partial: Path, found, figure_format: str = "png") -> None:
        self.out, self.partial, self.found = out, partial, found
        self.figure_format = figure_format

    @classmethod
    def open(cls, out: Path, found, seed: int, *, resume: bool, force: bool,
             figure_format: str = "png") -> Checkpoint:
        """Check the folder rules before any work and create (or reopen) the checkpoint.

        Call it while holding `output_lock` for `out`.

        Raises
        ------
        OutputConflict
            `out` exists without `force`, a checkpoint exists without `resume`/`force`,
            `resume` without a checkpoint, or the inputs changed since it was made.
        InputError
            `out` or the checkpoint is not lidmelt's to replace, or `out`'s folder is
            missing.
        """
        out = Path(out).absolute()
        partial = out.with_name(out.name + ".partial")
        inputs = _inputs(found)
        record = _record(found, seed, figure_format)
        _check_target(out, force=force, inputs=inputs)
        remove_stale_temporaries(out)
        if resume:
            _check_same_run(partial, record)
        elif partial.exists() or partial.is_symlink():
            if not force:
                raise OutputConflict("an interrupted comparison is stored here",
                                     reason="checkpoint", file=partial)
            _remove(partial, check_replaceable(partial, inputs=inputs, what="checkpoint"))
        if not resume:
            partial.mkdir()
            _write_top_manifest(partial, figure_format)
            _write_json(partial / RECORD, record)
        return cls(out, partial, found, figure_format)

    def load(self, scenario) -> tuple[dict, object] | None:
        """The stored record and posterior of a finished scenario, or None.

        ``ScenarioResult.from_dict(*stored, ...)`` rebuilds the result (this module does
        not import `result`, which imports it to save).
        """
        folder = self.partial / scenario.name
        if not (folder / SCENARIO_FILE).is_file():
            return None
        return load_scenario(folder, scenario)

    def store(self, result: ScenarioResult) -> None:
        """Write one finished scenario into the checkpoint, atomically."""
        write_scenario(result, self.partial, figure_format=self.figure_format)

    def finish(self, comparison, *, force: bool) -> Path:
        """Add the summary files and move the checkpoint to the result folder."""
        write_summary(comparison, self.partial, figure_format=self.figure_format)
        _publish(self.partial, self.out, inputs=_inputs(self.found), replace=force)
        return self.out


def save_comparison(comparison, directory: Path, *, force: bool = False,
                    figure_format: str = "png") -> Path:
    """Write a whole comparison folder at once (see `Comparison.save`)."""
    directory = Path(directory).absolute()
    inputs = _inputs(comparison.scenarios)
    with output_lock(directory):
        _check_target(directory, force=force, inputs=inputs)
        remove_stale_temporaries(directory)
        with staged_folder(directory) as staged:
            _write_top_manifest(staged, figure_format)
            _write_json(staged / RECORD, _record(comparison.scenarios, comparison.seed,
                                                 figure_format))
            for result in comparison.results:
                write_scenario(result, staged, figure_format=figure_format)
            write_summary(comparison, staged, figure_format=figure_format)
            _publish(staged, directory, inputs=inputs, replace=force)
    return directory


def write_scenario(result: ScenarioResult, parent: Path, *,
                   figure_format: str = "png") -> Path:
    """``parent/<name>/``: the fit outputs and scenario.json, renamed into place at once."""
    target = parent / result.name
    files = _scenario_files(result, figure_format)
    remove_stale_temporaries(target)
    with staged_folder(target) as staged:
        _guarded(target, write_manifest, staged, files, kind="comparison scenario")
        for name, data in files.items():
            _guarded(target / name, write_bytes, staged / name, data)
        _guarded(target, os.rename, staged, target)
    return target


def _scenario_files(result: ScenarioResult, figure_format: str) -> dict[str, bytes]:
    """Name -> bytes of a scenario folder (built in memory before anything is written)."""
    files = {}
    if result.posterior is not None:
        from ..results.writers import _files as fit_files

        files.update(fit_files(result.posterior, figure_format=figure_format))
    files[SCENARIO_FILE] = _json_bytes(result.to_dict())
    return files


def load_scenario(folder: Path, scenario) -> tuple[dict, object]:
    """A stored scenario's record (scenario.json) and, if it has one, its posterior."""
    data = json.loads((folder / SCENARIO_FILE).read_text(encoding="utf-8"))
    posterior = None
    if scenario.n_free:
        from ..results.posterior import Posterior

        chain, _ = read_chain(folder / "chain.h5")
        run = json.loads((folder / "run.json").read_text(encoding="utf-8"))
        sampler = scenario.study.sampler
        assessment = assess_chain(chain.chain, tau_multiple=sampler.tau_multiple,
                                  ess_target=sampler.ess_target, accepted=chain.accepted,
                                  names=scenario.study.sampled_parameters)
        posterior = Posterior(scenario.study,
                              dataclasses.replace(chain, assessment=assessment),
                              seed=int(run["seed"]),
                              run_info={k: run[k] for k in _RUN_INFO if k in run})
    return data, posterior


def write_summary(comparison, folder: Path, *, figure_format: str = "png") -> None:
    """evidence.csv, compare.png (or .pdf/.svg), report.md and the final comparison.json."""
    from ...forward.figure_output import figure_bytes
    from .figure import comparison_figure
    from .report import render

    table = comparison.table().to_csv(index=False, float_format="%.6g", lineterminator="\n",
                                      na_rep="")
    figure = figure_bytes(comparison_figure(comparison), figure_format, dpi=150)
    record = _record(comparison.scenarios, comparison.seed, figure_format)
    record["finished_utc"] = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    record["ranking"] = comparison.ranking()
    for name, data in (("evidence.csv", table.encode("utf-8")),
                       (f"compare.{figure_format}", figure),
                       ("report.md", render(comparison, figure_format=figure_format)
                        .encode("utf-8")),
                       (RECORD, _json_bytes(record))):
        _guarded(folder / name, write_bytes, folder / name, data)


# ---- what may be replaced, and how a folder is swapped in --------------------------------

def check_replaceable(path: Path, *, inputs=(), what: str = "comparison folder") -> list:
    """Check that the comparison folder `path` may be replaced; return what to remove.

    The rule of `inversion.outputs.folder` (module docstring), applied to the top level (its
    manifest) and to each scenario folder (theirs).

    Returns
    -------
    list of (pathlib.Path, list of pathlib.Path)
        Each folder (scenario folders first, `path` last) with its files to remove.

    Raises
    ------
    InputError
        `path` is protected, not a comparison folder lidmelt wrote, or holds anything
        lidmelt did not write there.
    """
    path = Path(path).absolute()
    check_not_protected(path, inputs=inputs, what=what)
    listed = _manifest_files(path)
    if listed is None:
        raise InputError(f"the {what} was not written by lidmelt compare (it has no "
                         f"{MANIFEST} of a comparison); lidmelt replaces only folders it "
                         "wrote itself", file=path)
    plan, own = [], []
    for entry in sorted(path.iterdir()):
        if entry.is_dir() and not entry.is_symlink():
            plan.append((entry, check_flat_replaceable(entry, inputs=inputs,
                                                       what="scenario folder")))
        elif entry.name in listed or temporary_target(entry.name) in listed:
            own.append(entry)
        else:
            raise InputError(f"the {what} holds '{entry.name}', which lidmelt did not write "
                             "there; move it away or choose another folder", file=path)
    return [*plan, (path, own)]


def _check_target(target: Path, *, force: bool, inputs) -> None:
    if not target.parent.is_dir():
        raise InputError("the folder to hold the comparison folder does not exist; create "
                         "it first", file=target.parent)
    if target.exists() or target.is_symlink():
        if not force:
            raise OutputConflict("the comparison folder already exists", reason="exists",
                                 file=target)
        check_replaceable(target, inputs=inputs)


def _publish(staged: Path, target: Path, *, inputs, replace: bool) -> None:
    """Move the complete folder `staged` to `target`; an old `target` only by the rule."""
    old, plan = None, []
    if replace and (target.exists() or target.is_symlink()):
        plan = check_replaceable(target, inputs=inputs)
        old = target.with_name(f".{target.name}.old-{os.getpid()}")
        _guarded(target, os.rename, target, old)
    _guarded(target, os.rename, staged, target)
    if old is not None:  # the same files, now under the old folder's new name
        _remove(old, [(old / folder.relative_to(target),
                       [old / file.relative_to(target) for file in files])
                      for folder, files in plan])


def _remove(root: Path, plan) -> None:
    """Remove what `check_replaceable` listed, folder by folder (each only if emptied)."""
    for folder, files in plan:
        remove_listed(Path(folder), files)
    if root.is_dir() and not any(root.iterdir()):
        root.rmdir()


def _manifest_files(folder: Path) -> set[str] | None:
    try:
        record = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if record.get("written_by") != "lidmelt" or record.get("kind") != _KIND:
        return None
    return set(record.get("files", [])) | {MANIFEST}


def _write_top_manifest(folder: Path, figure_format: str) -> None:
    _guarded(folder, write_manifest, folder, comparison_files(figure_format), kind=_KIND)


# ---- provenance -------------------------------------------------------------------------

def _inputs(found) -> list[Path]:
    return study_inputs(found.base)


def _record(found, seed: int, figure_format: str) -> dict:
    source = found.base.source
    return {
        "written_by": "lidmelt compare",
        "lidmelt_version": _version(),
        "study_name": found.base.name,
        "study_file": None if source is None else str(Path(source).resolve()),
        "inputs_sha256": dict(found.input_hashes),
        "seed": int(seed),
        "scenarios": list(found.names),
        "settings": dataclasses.asdict(found.settings),
        "figure_format": figure_format,
    }


def _check_same_run(partial: Path, record: dict) -> None:
    if not (partial / RECORD).is_file():
        raise OutputConflict("there is no interrupted comparison to resume for this folder",
                             reason="no-checkpoint", file=partial)
    stored = json.loads((partial / RECORD).read_text(encoding="utf-8"))
    old, new = stored.get("inputs_sha256", {}), record["inputs_sha256"]
    for path in sorted(set(old) | set(new)):
        if old.get(path) != new.get(path):
            what = "is new" if path not in old else "is no longer used" if path not in new \
                else "changed"
            raise OutputConflict(f"cannot resume: {Path(path).name} {what} since the "
                                 "interrupted comparison was started", reason="changed",
                                 file=partial)
    for key in ("seed", "scenarios", "settings", "lidmelt_version", "figure_format"):
        if stored.get(key, "png" if key == "figure_format" else None) != record[key]:
            raise OutputConflict(f"cannot resume: the interrupted comparison has {key} = "
                                 f"{stored.get(key)!r}, this run {record[key]!r}",
                                 reason="changed", file=partial)


def _write_json(path: Path, data: dict) -> None:
    _guarded(path, write_bytes, path, _json_bytes(data))


def _json_bytes(data: dict) -> bytes:
    return (json.dumps(_plain(data), indent=2, allow_nan=False) + "\n").encode("utf-8")


def _plain(value):
    """JSON-ready copy: numpy values as Python ones, NaN as null."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if hasattr(value, "tolist"):
        return _plain(value.tolist())
    if isinstance(value, float) and math.isnan(value):
        return None
    return value


def _version() -> str:
    try:
        return metadata.version("lidmelt")
    except metadata.PackageNotFoundError:
        return "0+unknown"

