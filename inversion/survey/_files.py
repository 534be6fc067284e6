"""File safety of a survey folder: atomic writes and what ``--force`` may replace.

Every file is written to a temporary name beside its target and renamed into place, so
a reader (or a resumed survey) sees either the old file or the complete new one, never
half of one. ``--force`` replaces only a folder that a survey wrote: it holds the
survey manifest and nothing but files a survey writes, and it is neither the working
folder nor a folder holding the study or sites file. lidmelt never deletes a file it did
not write.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from collections.abc import Iterable
from pathlib import Path

from .._errors import InputError

__all__ = ["MANIFEST", "OWN_FILES", "SITE_FILES", "check_replaceable", "remove_own",
           "write_atomic", "write_json"]

#: The manifest that marks a survey folder as lidmelt's own.
MANIFEST = "survey.json"
#: Files and folders a survey writes at the top of its folder.
OWN_FILES = (MANIFEST, "sites_summary.csv", "area.csv", "profile.png", "report.md", "sites")
#: Files a survey writes in each site's folder.
SITE_FILES = ("site.json", "summary.csv", "likelihood.json", "tp_likelihood.csv",
              "chain.h5", "grid.npz")
_TEMP = ".lidmelt-tmp-"


def write_atomic(path: Path, data: bytes | str) -> None:
    """Write `data` to `path` through a temporary file and a rename."""
    path = Path(path)
    payload = data.encode("utf-8") if isinstance(data, str) else data
    fd, tmp = tempfile.mkstemp(prefix=f"{_TEMP}{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_json(path: Path, data: dict) -> None:
    """`write_atomic` of a JSON document (floats round-trip exactly)."""
    write_atomic(path, json.dumps(data, indent=1) + "\n")


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _is_own(path: Path, names: Iterable[str]) -> bool:
    return path.name in names or path.name.startswith(_TEMP)


def check_replaceable(folder: Path, protected: Iterable[Path]) -> None:
    """Raise `InputError` unless ``--force`` may replace `folder` (module docstring)."""
    folder = Path(folder).resolve()
    for other in [Path.cwd(), *protected]:
        other = Path(other).resolve()
        if folder == other or folder in other.parents:
            raise InputError("--force will not replace this folder: it is the working "
                             "folder or holds an input file; choose another --out",
                             file=folder)
    if not (folder / MANIFEST).is_file():
        raise InputError("--force replaces only a folder written by 'lidmelt survey' (it "
                         f"has no {MANIFEST}); choose another --out", file=folder)
    foreign = [p for p in folder.iterdir() if not _is_own(p, OWN_FILES)]
    sites = folder / "sites"
    if sites.is_dir():
        for site in sites.iterdir():
            if not site.is_dir():
                foreign.append(site)
                continue
            foreign += [p for p in site.iterdir() if not _is_own(p, SITE_FILES)]
    if foreign:
        raise InputError(f"--force will not replace this folder: it holds files lidmelt "
                         f"did not write, e.g. '{foreign[0].relative_to(folder)}'; move "
                         "them or choose another --out", file=folder)


def remove_own(folder: Path) -> None:
    """Delete the survey files of a folder checked by `check_replaceable`."""
    for path in Path(folder).iterdir():
        if path.is_dir():
            shutil.rmtree(path)
        else:
            path.unlink()


def remove_temporaries(folder: Path) -> None:
    """Delete temporary files left by an interrupted write (they are never results)."""
    for path in Path(folder).rglob(f"{_TEMP}*"):
        path.unlink(missing_ok=True)
