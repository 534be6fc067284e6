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
study file, its tables, the seed and the settings are unchanged (`identity.check_same_run`).

What may be replaced follows lidmelt's one rule (`inversion.outputs.folder`): the top
manifest (kind ``comparison``) lists the summary files and the scenario folders, each of
which carries its own manifest.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import math
import os
import time
from pathlib import Path

from ..._atomic import staged_folder, write_bytes
from ..errors import InputError, OutputConflict
from ..outputs.folder import (
    MANIFEST,
    check_output_folder,
    check_replaceable,
    discard_checkpoint,
    output_lock,
    output_path,
    publish_folder,
    remove_listed,
    remove_stale_temporaries,
    write_manifest,
    write_staged,
    written,
)
from ..outputs.identity import (
    check_same_run,
    digest,
    files_fingerprint,
    package_version,
    study_inputs,
    with_version,
)
from ..fitting.sampler import assess_chain, read_chain

__all__ = ["COMPARISON_FILES", "KIND", "RECORD", "SCENARIO_FILE", "Checkpoint",
           "comparison_files", "save_comparison"]

RECORD = "comparison.json"
SCENARIO_FILE = "scenario.json"
#: Files at the top of a comparison folder (besides the scenario folders).
COMPARISON_FILES = ("evidence.csv", "compare.png", "report.md", RECORD, MANIFEST)


def comparison_files(figure_format: str = "png") -> tuple[str, ...]:
    """`COMPARISON_FILES` with the figure in `figure_format` (``compare.pdf`` ...)."""
    return tuple(f"compare.{figure_format}" if name == "compare.png" else name
                 for name in COMPARISON_FILES)

#: The manifest kind of a comparison folder (and of its checkpoint ``DIR.partial``).
KIND = "comparison"
_WHAT = "comparison folder"
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
        out = output_path(out, what=_WHAT)
        partial = out.with_name(out.name + ".partial")
        inputs = _inputs(found)
        record = _record(found, seed, figure_format)
        check_output_folder(out, force=force, inputs=inputs, what=_WHAT, kind=KIND)
        remove_stale_temporaries(out)
        if resume:
            _check_resumable(partial, record)
        else:
            discard_checkpoint(partial, force=force, inputs=inputs, kind=KIND,
                               what="checkpoint", problem="an interrupted comparison is "
                               "stored here")
            remove_stale_temporaries(partial)
            with staged_folder(partial) as staged:
                _write_top_manifest(staged, found.names, figure_format)
                _write_json(staged / RECORD, record)
                written(partial, os.rename, staged, partial)
        return cls(out, partial, found, figure_format)

    def discard(self) -> None:
        """Remove the checkpoint (a fresh run that stopped on bad input), by the rule."""
        with contextlib.suppress(InputError):  # something foreign appeared: keep it all
            remove_listed(self.partial, check_replaceable(self.partial, kind=KIND))

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
        written(self.out, publish_folder, self.partial, self.out, inputs=_inputs(self.found),
                replace=force, kind=KIND, what=_WHAT)
        return self.out


def save_comparison(comparison, directory: Path, *, force: bool = False,
                    figure_format: str = "png") -> Path:
    """Write a whole comparison folder at once (see `Comparison.save`)."""
    directory = output_path(directory, what=_WHAT)
    inputs = _inputs(comparison.scenarios)
    with output_lock(directory):
        check_output_folder(directory, force=force, inputs=inputs, what=_WHAT, kind=KIND)
        remove_stale_temporaries(directory)
        with staged_folder(directory) as staged:
            _write_top_manifest(staged, comparison.scenarios.names, figure_format)
            _write_json(staged / RECORD, _record(comparison.scenarios, comparison.seed,
                                                 figure_format))
            for result in comparison.results:
                write_scenario(result, staged, figure_format=figure_format)
            write_summary(comparison, staged, figure_format=figure_format)
            written(directory, publish_folder, staged, directory, inputs=inputs,
                    replace=force, kind=KIND, what=_WHAT)
    return directory


def write_scenario(result: ScenarioResult, parent: Path, *,
                   figure_format: str = "png") -> Path:
    """``parent/<name>/``: the fit outputs and scenario.json, renamed into place at once."""
    target = parent / result.name
    files = _scenario_files(result, figure_format)
    remove_stale_temporaries(target)
    with staged_folder(target) as staged:
        write_staged(staged, files, kind="comparison scenario", shown=target)
        written(target, os.rename, staged, target)
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
                                  names=scenario.study.sampled_parameters,
                                  log_prob=chain.log_prob)
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
        written(folder / name, write_bytes, folder / name, data)


def _write_top_manifest(folder: Path, scenarios, figure_format: str = "png") -> None:
    written(folder, write_manifest, folder, comparison_files(figure_format), kind=KIND,
            folders=scenarios)


# ---- provenance -------------------------------------------------------------------------

def _inputs(found) -> list[Path]:
    return study_inputs(found.base)


def _record(found, seed: int, figure_format: str) -> dict:
    source = found.base.source
    return {
        "written_by": "lidmelt compare",
        "lidmelt_version": package_version("lidmelt") or "0+unknown",
        "study_name": found.base.name,
        "study_file": None if source is None else str(Path(source).resolve()),
        "inputs_sha256": dict(found.input_hashes),
        "seed": int(seed),
        "scenarios": list(found.names),
        "settings": dataclasses.asdict(found.settings),
        "figure_format": figure_format,
        "fingerprint": _fingerprint(found, seed, figure_format),
    }


def _fingerprint(found, seed: int, figure_format: str) -> dict[str, str]:
    """What a resumed comparison must share with the stored one (`check_same_run`)."""
    return with_version({
        **files_fingerprint(found.input_hashes, study_file=found.base.source),
        "the seed": str(int(seed)),
        "the scenarios": digest(json.dumps(list(found.names))),
        "the comparison settings": digest(json.dumps(_plain(
            dataclasses.asdict(found.settings)), sort_keys=True)),
        "the figure format": figure_format,
    })


def _check_resumable(partial: Path, record: dict) -> None:
    if partial.is_symlink() or not (partial / RECORD).is_file():
        raise OutputConflict("there is no interrupted comparison to resume for this folder",
                             reason="no-checkpoint", file=partial)
    try:
        stored = json.loads((partial / RECORD).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        stored = {}
    check_same_run(stored.get("fingerprint"), record["fingerprint"],
                   since="the interrupted comparison was started", file=partial)


def _write_json(path: Path, data: dict) -> None:
    written(path, write_bytes, path, _json_bytes(data))


def _json_bytes(data: dict) -> bytes:
    return (json.dumps(_plain(data), indent=2, allow_nan=False) + "\n").encode("utf-8")


def _plain(value):
    """JSON-ready copy: numpy values as Python ones, every non-finite number (NaN, inf,
    -inf) as null (JSON has none of them; null reads back as NaN)."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if hasattr(value, "tolist"):
        return _plain(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value
