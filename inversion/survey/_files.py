"""File safety of a survey folder: atomic writes and what ``force`` may replace.

Every file is written to a temporary name beside its target and renamed into place, so
a reader (or a resumed survey) sees either the old file or the complete new one, never
half of one. ``force`` replaces only a folder that a survey wrote: it holds the survey
manifest and nothing but files a survey writes, and `inversion.outputs.folder.check_not_protected`
allows it (not a file, not the working folder or a parent of it, not a folder holding the
study or sites file). lidmelt never deletes a file it did not write.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Iterable
from pathlib import Path

from ..._atomic import temporary_target, write_bytes
from ..errors import InputError
from ..outputs.folder import check_not_protected

__all__ = ["MANIFEST", "OWN_FILES", "SITE_FILES", "check_replaceable", "remove_own",
           "write_atomic", "write_json"]

#: The manifest that marks a survey folder as lidmelt's own.
MANIFEST = "survey.json"
#: Files and folders a survey writes at the top of its folder.
OWN_FILES = (MANIFEST, "sites_summary.csv", "area.csv", "profile.png", "profile.pdf",
             "profile.svg", "report.md", "sites")
#: Files a survey writes in each site's folder.
SITE_FILES = ("site.json", "summary.csv", "likelihood.json", "tp_likelihood.csv",
              "chain.h5", "grid.npz")


def write_atomic(path: Path, data: bytes | str) -> None:
    """Write `data` to `path` atomically (lidmelt's one writer, `lidmelt._atomic`)."""
    write_bytes(path, data.encode("utf-8") if isinstance(data, str) else data)


def write_json(path: Path, data: dict) -> None:
    """`write_atomic` of a JSON document (floats round-trip exactly)."""
    write_atomic(path, json.dumps(data, indent=1) + "\n")


def _is_own(path: Path, names: Iterable[str]) -> bool:
    target = temporary_target(path.name)  # a write that a killed survey left unfinished
    return path.name in names or (target is not None and target in names)


def check_replaceable(folder: Path, protected: Iterable[Path]) -> None:
    """Raise `InputError` unless `folder` may be replaced (module docstring)."""
    folder = Path(folder)
    check_not_protected(folder, inputs=protected, what="survey folder")
    if not (folder / MANIFEST).is_file():
        raise InputError("lidmelt replaces only a folder written by a survey, and this one "
                         f"has no {MANIFEST}; choose another folder", file=folder)
    foreign = [p for p in folder.iterdir() if not _is_own(p, OWN_FILES)]
    sites = folder / "sites"
    if sites.is_dir():
        for site in sites.iterdir():
            if not site.is_dir():
                foreign.append(site)
                continue
            foreign += [p for p in site.iterdir() if not _is_own(p, SITE_FILES)]
    if foreign:
        raise InputError(f"the survey folder holds files lidmelt did not write, e.g. "
                         f"'{foreign[0].relative_to(folder)}'; move them or choose another "
                         "folder", file=folder)


def remove_own(folder: Path) -> None:
    """Delete the survey files of a folder checked by `check_replaceable`."""
    for path in Path(folder).iterdir():
        if path.is_dir():
            shutil.rmtree(path)
        else:
            path.unlink()


def remove_temporaries(folder: Path) -> None:
    """Delete temporary files left by an interrupted write (they are never results)."""
    for path in Path(folder).rglob(".*"):
        if path.is_file() and temporary_target(path.name) is not None:
            path.unlink(missing_ok=True)
