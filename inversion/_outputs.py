"""Write every output of a fit into a folder, atomically.

Files go to a temporary folder beside the target, which is renamed into place only when
all of them are complete; an error on the way removes the temporary folder, so a crash
never leaves a half-written result.
"""

from __future__ import annotations

import json
import os
import platform
import shutil
import sys
import tempfile
from importlib import metadata
from pathlib import Path

from ._errors import InputError
from .model import DERIVED
from .sampler import write_chain

__all__ = ["OUTPUT_FILES", "save_posterior"]

#: Every file a saved result folder contains.
OUTPUT_FILES = ("summary.csv", "derived.csv", "samples.csv", "chain.h5", "diagnostics.json",
                "run.json", "corner.png", "fit.png", "pt.png", "report.md")

_PACKAGES = ("lidmelt", "numpy", "scipy", "pandas", "emcee", "h5py", "matplotlib", "corner",
             "tqdm")


def save_posterior(posterior, directory: Path, *, force: bool = False) -> Path:
    """Write all of `OUTPUT_FILES` for `posterior` to `directory` (see Posterior.save)."""
    directory = Path(directory)
    if directory.exists() and not force:
        raise InputError("the result folder already exists; pass --force to replace it "
                         "or choose another folder", file=directory)
    parent = directory.absolute().parent
    if not parent.is_dir():
        raise InputError("the parent folder does not exist; create it first", file=parent)
    tmp = Path(tempfile.mkdtemp(prefix=f".{directory.name}.writing-", dir=parent))
    os.chmod(tmp, 0o777 & ~_umask())  # mkdtemp makes it private; results are for sharing
    try:
        _write_all(posterior, tmp)
        _replace(tmp, directory)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return directory


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _write_all(posterior, folder: Path) -> None:
    from . import figures, report

    csv = {"index": False, "float_format": "%.6g", "lineterminator": "\n"}
    posterior.summary().to_csv(folder / "summary.csv", **csv)
    posterior.derived_summary().to_csv(folder / "derived.csv", **csv)
    posterior.samples.to_csv(folder / "samples.csv", **csv)
    write_chain(folder / "chain.h5", posterior.result, meta=_chain_meta(posterior))
    _write_json(folder / "diagnostics.json", posterior.diagnostics)
    _write_json(folder / "run.json", run_record(posterior))
    figures.save_figures(posterior, folder)
    (folder / "report.md").write_text(report.render(posterior), encoding="utf-8")


def _replace(tmp: Path, directory: Path) -> None:
    """Rename `tmp` to `directory`, moving an existing folder aside first."""
    old = None
    if directory.exists():
        old = directory.with_name(f".{directory.name}.old-{tmp.name.rsplit('-', 1)[-1]}")
        directory.rename(old)
    tmp.rename(directory)
    if old is not None and old.is_dir():
        shutil.rmtree(old, ignore_errors=True)
    elif old is not None:
        old.unlink()


def _write_json(path: Path, data: dict) -> None:
    path.write_text(json.dumps(data, indent=2, sort_keys=False) + "\n", encoding="utf-8")


def _chain_meta(posterior) -> dict:
    return {
        "study_sha256": str(getattr(posterior.study, "file_hash", None) or ""),
        "seed": posterior.seed,
        "parameters": tuple(posterior.names),
        "derived": tuple(DERIVED),
        "burn_in_steps": posterior.discard,
    }


def run_record(posterior) -> dict:
    """Provenance of the run (the content of run.json)."""
    study = posterior.study
    source = getattr(study, "source", None)
    return {
        "study_name": study.name,
        "study_file": None if source is None else str(Path(source).resolve()),
        "study_sha256": getattr(study, "file_hash", None),
        "seed": posterior.seed,
        "free_parameters": list(posterior.names),
        "fixed_parameters": {k: float(v) for k, v in study.fixed.items()},
        "parameterization": study.model.parameterization,
        "melting_region": study.model.melting_region,
        **posterior.run_info,
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "versions": {name: _version(name) for name in _PACKAGES},
    }


def _version(name: str) -> str | None:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return None
