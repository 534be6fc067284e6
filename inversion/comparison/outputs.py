"""Writing a comparison folder, scenario by scenario, atomically and resumably.

Layout of ``DIR``::

    evidence.csv      one row per scenario (EVIDENCE_COLUMNS)
    compare.png       posteriors, predictions and scenario probabilities
    report.md         the comparison in words
    comparison.json   provenance: inputs (sha256), seed, settings; marks the folder as
                      lidmelt's own (only such a folder may be replaced with --force)
    <scenario>/       what ``lidmelt fit`` writes, plus scenario.json (evidence, LOO,
                      checks, wall times)

While a comparison runs, each finished scenario is renamed into ``DIR.partial/`` in one
step (it is complete or absent); at the end the summary files are added and
``DIR.partial`` is renamed to ``DIR``. A resumed run reloads the finished scenarios after
checking that the study file, its tables, the seed and the settings are unchanged.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import shutil
import tempfile
import time
from importlib import metadata
from pathlib import Path

from .._errors import InputError
from .._outputs import save_posterior
from ..sampler import assess_chain, read_chain
from .result import ScenarioResult

__all__ = ["COMPARISON_FILES", "MANIFEST", "SCENARIO_FILE", "Checkpoint",
           "save_comparison"]

MANIFEST = "comparison.json"
SCENARIO_FILE = "scenario.json"
#: Files at the top of a comparison folder.
COMPARISON_FILES = ("evidence.csv", "compare.png", "report.md", MANIFEST)
_CREATOR = "lidmelt compare"
_RUN_INFO = ("command_line", "sampling_seconds", "finished_utc", "resumed_from_step")


class Checkpoint:
    """The ``DIR.partial`` folder of a running comparison (see the module docstring)."""

    def __init__(self, out: Path, partial: Path, found) -> None:
        self.out, self.partial, self.found = out, partial, found

    @classmethod
    def open(cls, out: Path, found, seed: int, *, resume: bool, force: bool) -> Checkpoint:
        """Check the folder rules before any work and create (or reopen) the checkpoint.

        Raises
        ------
        InputError
            `out` exists without `force` (or is not lidmelt's to replace), a checkpoint
            exists without `resume`/`force`, `resume` without a checkpoint, or the inputs
            changed since the checkpoint was made.
        """
        out = Path(out).absolute()
        partial = out.with_name(out.name + ".partial")
        manifest = _manifest(found, seed)
        if out.exists():
            if not force:
                raise InputError("the result folder already exists; pass --force to "
                                 "replace it or choose another --out", file=out)
            _check_replaceable(out, found)
        if not out.parent.is_dir():
            raise InputError("the parent folder of --out does not exist; create it first",
                             file=out.parent)
        if resume:
            _check_same_run(partial, manifest)
        elif partial.exists():
            if not force:
                raise InputError("an interrupted comparison is stored here; pass --resume "
                                 "to continue it or --force to start over", file=partial)
            _check_replaceable(partial, found)
            shutil.rmtree(partial)
        if not resume:
            partial.mkdir()
            _write_json(partial / MANIFEST, manifest)
        return cls(out, partial, found)

    def load(self, scenario) -> ScenarioResult | None:
        """The stored result of a finished scenario, or None."""
        folder = self.partial / scenario.name
        if not (folder / SCENARIO_FILE).is_file():
            return None
        return load_scenario(folder, scenario)

    def store(self, result: ScenarioResult) -> None:
        """Write one finished scenario into the checkpoint, atomically."""
        write_scenario(result, self.partial)

    def finish(self, comparison) -> Path:
        """Add the summary files and move the checkpoint to the result folder."""
        write_summary(comparison, self.partial)
        _install_folder(self.partial, self.out)
        return self.out


def save_comparison(comparison, directory: Path, *, force: bool = False) -> Path:
    """Write a whole comparison folder at once (see `Comparison.save`)."""
    directory = Path(directory).absolute()
    if directory.exists():
        if not force:
            raise InputError("the result folder already exists; pass --force to replace "
                             "it or choose another folder", file=directory)
        _check_replaceable(directory, comparison.scenarios)
    if not directory.parent.is_dir():
        raise InputError("the parent folder does not exist; create it first",
                         file=directory.parent)
    tmp = _temporary_folder(directory)
    try:
        _write_json(tmp / MANIFEST, _manifest(comparison.scenarios, comparison.seed))
        for result in comparison.results:
            write_scenario(result, tmp)
        write_summary(comparison, tmp)
        _install_folder(tmp, directory)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return directory


def write_scenario(result: ScenarioResult, parent: Path) -> Path:
    """``parent/<name>/``: the fit outputs and scenario.json, renamed into place at once."""
    final = parent / result.name
    tmp = parent / f".{result.name}.writing"
    shutil.rmtree(tmp, ignore_errors=True)  # left by a crash; it is lidmelt's own
    try:
        if result.posterior is not None:
            save_posterior(result.posterior, tmp)
        else:
            tmp.mkdir()
        _write_json(tmp / SCENARIO_FILE, result.to_dict())
        _install_folder(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def load_scenario(folder: Path, scenario) -> ScenarioResult:
    """Rebuild a stored scenario result (numbers and, if it has one, its posterior)."""
    data = json.loads((folder / SCENARIO_FILE).read_text(encoding="utf-8"))
    posterior = None
    if scenario.n_free:
        from ..posterior import Posterior

        chain, _ = read_chain(folder / "chain.h5")
        run = json.loads((folder / "run.json").read_text(encoding="utf-8"))
        sampler = scenario.study.sampler
        assessment = assess_chain(chain.chain, tau_multiple=sampler.tau_multiple,
                                  ess_target=sampler.ess_target)
        posterior = Posterior(scenario.study,
                              dataclasses.replace(chain, assessment=assessment),
                              seed=int(run["seed"]),
                              run_info={k: run[k] for k in _RUN_INFO if k in run})
    return ScenarioResult.from_dict(data, scenario, posterior)


def write_summary(comparison, folder: Path) -> None:
    """evidence.csv, compare.png, report.md and the final comparison.json."""
    from .figure import comparison_figure
    from .report import render

    comparison.table().to_csv(folder / "evidence.csv", index=False, float_format="%.6g",
                              lineterminator="\n", na_rep="")
    figure = comparison_figure(comparison)
    figure.savefig(folder / "compare.png", dpi=150, metadata={"Software": None})
    (folder / "report.md").write_text(render(comparison), encoding="utf-8")
    manifest = _manifest(comparison.scenarios, comparison.seed)
    manifest["finished_utc"] = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    manifest["ranking"] = comparison.ranking()
    _write_json(folder / MANIFEST, manifest)


# ---- rules for replacing folders, and the atomic install ----------------------------------

def _manifest(found, seed: int) -> dict:
    source = found.base.source
    return {
        "created_by": _CREATOR,
        "lidmelt_version": _version(),
        "study_name": found.base.name,
        "study_file": None if source is None else str(Path(source).resolve()),
        "inputs_sha256": dict(found.input_hashes),
        "seed": int(seed),
        "scenarios": list(found.names),
        "settings": dataclasses.asdict(found.settings),
    }


def _check_same_run(partial: Path, manifest: dict) -> None:
    if not (partial / MANIFEST).is_file():
        raise InputError("there is no interrupted comparison to resume here; run again "
                         "without --resume", file=partial)
    stored = json.loads((partial / MANIFEST).read_text(encoding="utf-8"))
    old, new = stored.get("inputs_sha256", {}), manifest["inputs_sha256"]
    for path in sorted(set(old) | set(new)):
        if old.get(path) != new.get(path):
            what = "is new" if path not in old else "is no longer used" if path not in new \
                else "changed"
            raise InputError(f"{Path(path).name} {what} since the interrupted comparison "
                             "was started; start again with --force", file=partial)
    for key in ("seed", "scenarios", "settings"):
        if stored.get(key) != manifest[key]:
            raise InputError(f"the interrupted comparison has {key} = {stored.get(key)!r}, "
                             f"this run {manifest[key]!r}; resume with the same study and "
                             "seed, or start again with --force", file=partial)


def _check_replaceable(target: Path, found) -> None:
    """Refuse unless `target` is a comparison folder lidmelt wrote, away from the inputs."""
    target = target.resolve()
    protected = [Path.cwd().resolve(), Path.home().resolve()]
    if found.base.source is not None:
        protected.append(Path(found.base.source).resolve().parent)
    for place in protected:
        if target == place or target in place.parents:
            raise InputError(f"will not replace {target}: it is (or holds) the working "
                             "folder, the home folder or the study's folder; choose "
                             "another --out", file=target)
    manifest = target / MANIFEST
    mine = False
    if target.is_dir() and manifest.is_file():
        try:
            mine = json.loads(manifest.read_text(encoding="utf-8")).get(
                "created_by") == _CREATOR
        except (OSError, ValueError):
            mine = False
    if not mine:
        raise InputError("will not replace this folder: lidmelt compare did not write it "
                         f"(no {MANIFEST} of its own); choose another --out", file=target)


def _temporary_folder(target: Path) -> Path:
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.writing-", dir=target.parent))
    mask = os.umask(0)
    os.umask(mask)
    os.chmod(tmp, 0o777 & ~mask)  # mkdtemp makes it private; results are for sharing
    return tmp


def _install_folder(tmp: Path, target: Path) -> None:
    """Rename the complete folder `tmp` to `target`, moving an old `target` aside first."""
    old = None
    if target.exists():
        old = target.with_name(f".{target.name}.old-{os.getpid()}")
        shutil.rmtree(old, ignore_errors=True)
        target.rename(old)
    tmp.rename(target)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _write_json(path: Path, data: dict) -> None:
    tmp = path.with_name(path.name + ".writing")
    text = json.dumps(_plain(data), indent=2, allow_nan=False)
    tmp.write_text(text + "\n", encoding="utf-8")
    os.replace(tmp, path)


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

