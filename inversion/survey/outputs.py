"""The survey folder: manifest, per-site results as they complete, and the tables.

Layout::

    DIR/survey.json         manifest: what was run (hashes of the inputs, settings)
    DIR/sites/0001-<name>/  one folder per site, in site order
        site.json           the site's result (written last: its presence = finished)
        summary.csv         the site's rows of sites_summary.csv
        likelihood.json     joint mode: the site's Tp likelihood (machine form)
        tp_likelihood.csv   joint mode: the same as a table
        draws.npz           the site's posterior draws kept for survey.nc
        chain.h5 / grid.npz with --keep-chains: the emcee chain or the posterior grid
    DIR/sites_summary.csv   one row per site and parameter
    DIR/area.csv            joint mode: the area-wide posterior
    DIR/survey.nc           every site's posterior draws (and the area grid), NetCDF-4
    DIR/profile.png, DIR/report.md   (profile.pdf/.svg with figure_format)

Each folder carries lidmelt's manifest (`inversion.outputs.folder.MANIFEST`): the top one
lists the files above and ``sites/``, whose manifest lists every site folder of the sites
table, whose own manifest lists `SITE_FILES`. So ``--force`` replaces a survey folder by
the one rule of `inversion.outputs.folder`, and never a file lidmelt did not write.

A resumed survey re-reads finished sites from their JSON files (floats round-trip
exactly), so it gives the numbers of an uninterrupted one. `identity` is its resume
fingerprint (`inversion.outputs.identity`).
"""

from __future__ import annotations

import contextlib
import io
import json
import re
from pathlib import Path

import numpy as np
import pandas as pd

from ..._atomic import staged_folder, write_bytes
from ..errors import InputError, OutputConflict
from ..outputs.folder import (
    MANIFEST,
    check_not_protected,
    check_output_folder,
    check_replaceable,
    publish_folder,
    read_manifest,
    remove_listed,
    remove_own_temporaries,
    remove_stale_temporaries,
    write_manifest,
)
from ..outputs.identity import check_same_run, digest, with_version

__all__ = ["AREA_COLUMNS", "KIND", "RECORD", "SITE_FILES", "SUMMARY_COLUMNS", "SurveyFolder",
           "csv_text", "identity"]

#: Columns of sites_summary.csv, in order.
SUMMARY_COLUMNS = ("site", "position_km", "parameter", "unit", "median", "q2.5", "q16",
                   "q84", "q97.5", "method", "converged", "status")
#: Columns of area.csv, in order.
AREA_COLUMNS = ("parameter", "unit", "meaning", "median", "mean", "q2.5", "q16", "q84",
                "q97.5", "sites", "method")
#: The manifest kind of a survey folder.
KIND = "survey"
#: What was run: the inputs' hashes, the settings and the resume fingerprint.
RECORD = "survey.json"
#: Files a survey writes at the top of its folder (the profile in one figure format).
TOP_FILES = (RECORD, "sites_summary.csv", "area.csv", "survey.nc", "profile.png",
             "profile.pdf", "profile.svg", "report.md")
#: Files a survey writes in each site's folder.
SITE_FILES = ("site.json", "summary.csv", "likelihood.json", "tp_likelihood.csv",
              "draws.npz", "chain.h5", "grid.npz")
_TOOL = "lidmelt survey"
_WHAT = "survey folder"
_RECORD_FILES = {"likelihood": "likelihood.json", "final": "site.json"}


def csv_text(frame: pd.DataFrame) -> str:
    """A table as CSV text with 6 significant digits (the form of every survey table)."""
    return frame.to_csv(index=False, float_format="%.6g", lineterminator="\n")


def identity(study_sha256: str, sites_sha256: str, settings: dict) -> dict:
    """What makes two survey runs the same run (the content of survey.json)."""
    text = json.dumps(settings, sort_keys=True)
    fingerprint = with_version({"the study file": str(study_sha256),
                                "the sites file": str(sites_sha256),
                                "the settings (mode, seed, options)": digest(text)})
    return {"tool": _TOOL, "lidmelt": fingerprint["the lidmelt version"],
            "study_sha256": study_sha256, "sites_sha256": sites_sha256,
            "settings": settings, "settings_sha256": digest(text),
            "fingerprint": fingerprint}


def _write(path: Path, data: bytes | str) -> None:
    write_bytes(path, data.encode("utf-8") if isinstance(data, str) else data)


def _write_json(path: Path, data: dict) -> None:
    _write(path, json.dumps(data, indent=1) + "\n")  # floats round-trip exactly


class SurveyFolder:
    """A survey's result folder (see the module docstring for its layout)."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)

    @classmethod
    def open(cls, path, record: dict, *, resume: bool, force: bool, inputs=(),
             site_names=()) -> SurveyFolder:
        """Create, resume or (with `force`) replace the folder, after checking the rules.

        Call it while holding `output_lock` for `path`. A new folder is staged with its
        manifests and `record` and renamed into place (replacing an old one by the rule).

        Parameters
        ----------
        path : path-like
        record : dict
            The content of survey.json (`identity` plus the files).
        resume, force : bool
        inputs : iterable of path-like
            The study and sites files (a folder holding them is never replaced).
        site_names : sequence of str
            The sites in table order (their folders are listed in ``sites/``'s manifest).

        Raises
        ------
        InputError
            The folder exists without `resume`/`force`; `resume` without a survey there
            or with other inputs or settings; `force` on a folder lidmelt did not write.
        """
        folder = cls(Path(path))
        target = folder.path
        site_folders = [folder.site_dir(k, name).name for k, name in enumerate(site_names)]
        if resume:
            folder._check_resumable(record, inputs)
            remove_own_temporaries(target)
            folder._mark(target, site_folders)
            _write_json(target / RECORD, record)
            return folder
        check_output_folder(target, force=force, inputs=inputs, what=_WHAT, kind=KIND)
        remove_stale_temporaries(target)
        with staged_folder(target) as staged:
            folder._mark(staged, site_folders)
            _write_json(staged / RECORD, record)
            publish_folder(staged, target, inputs=inputs, replace=force, kind=KIND,
                           what=_WHAT)
        return folder

    @staticmethod
    def _mark(top: Path, site_folders) -> None:
        """The manifests of the folder and of ``sites/`` (before anything else is written)."""
        write_manifest(top, TOP_FILES, kind=KIND, folders=["sites"])
        (top / "sites").mkdir(exist_ok=True)
        write_manifest(top / "sites", [], kind="survey sites", folders=site_folders)

    def _check_resumable(self, record: dict, inputs) -> None:
        target = self.path
        if target.exists() or target.is_symlink():
            check_not_protected(target, inputs=inputs, what=_WHAT)
        manifest = read_manifest(target) if target.is_dir() else None
        if manifest is None or manifest.get("kind") != KIND or not (target / RECORD).is_file():
            raise OutputConflict(f"there is no survey to resume here (no {RECORD} of a "
                                 "lidmelt survey)", reason="no-checkpoint", file=target)
        try:
            old = json.loads((target / RECORD).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            old = {}
        check_same_run(old.get("fingerprint"), record["fingerprint"],
                       since="this survey started", file=target)

    def discard(self) -> None:
        """Remove the folder by the rule (a fresh survey that stopped on bad input)."""
        with contextlib.suppress(InputError):  # something foreign appeared: keep it all
            remove_listed(self.path, check_replaceable(self.path, kind=KIND))

    # ---- per site ----------------------------------------------------------------------

    def site_dir(self, index: int, name: str) -> Path:
        slug = re.sub(r"[^A-Za-z0-9._-]+", "-", name).strip("-.")[:60] or "site"
        return self.path / "sites" / f"{index + 1:04d}-{slug}"

    def read_record(self, index: int, name: str, phase: str) -> dict | None:
        """A finished site's record of `phase` ("likelihood" or "final"), or None."""
        path = self.site_dir(index, name) / _RECORD_FILES[phase]
        if not path.is_file():
            return None
        try:
            record = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None  # never finished writing: the site runs again
        return record if record.get("site") == name else None

    def write_record(self, record: dict, phase: str, arrays: dict | None = None) -> dict:
        """Store a site's result (tables first, the JSON record last); return it as read
        back, so fresh and resumed surveys continue from identical numbers."""
        folder = self.site_dir(record["index"], record["site"])
        if not (folder / MANIFEST).is_file():
            folder.mkdir(exist_ok=True)
            write_manifest(folder, SITE_FILES, kind="survey site")
        if phase == "likelihood" and "tp_axis" in record:
            values = record.get("tp_log_likelihood") or [np.nan] * len(record["tp_axis"])
            table = pd.DataFrame({"potential_temperature": record["tp_axis"],
                                  "log_likelihood": values})
            _write(folder / "tp_likelihood.csv", table.to_csv(index=False))
        if phase == "final":
            _write(folder / "summary.csv", csv_text(summary_rows([record])))
        self._write_arrays(folder, arrays or {})
        text = json.dumps(record, indent=1) + "\n"
        _write(folder / _RECORD_FILES[phase], text)
        return json.loads(text)

    def read_draws(self, index: int, name: str) -> dict | None:
        """A finished site's kept posterior draws (parameter -> array), or None."""
        path = self.site_dir(index, name) / "draws.npz"
        if not path.is_file():
            return None
        try:
            with np.load(path) as stored:
                return {key: stored[key] for key in stored.files}
        except (OSError, ValueError):
            return None

    @staticmethod
    def _write_arrays(folder: Path, arrays: dict) -> None:
        if "draws" in arrays:
            buffer = io.BytesIO()
            np.savez(buffer, **arrays["draws"])  # float64: draws round-trip exactly
            _write(folder / "draws.npz", buffer.getvalue())
        if "grid" in arrays:
            buffer = io.BytesIO()
            np.savez_compressed(buffer, **arrays["grid"])
            _write(folder / "grid.npz", buffer.getvalue())
        if "chain" in arrays:
            from ..fitting.sampler import write_chain

            write_chain(folder / "chain.h5", arrays["chain"])  # atomic itself

    # ---- whole survey ------------------------------------------------------------------

    def write_table(self, name: str, frame: pd.DataFrame) -> Path:
        _write(self.path / name, csv_text(frame))
        return self.path / name

    def write_bytes(self, name: str, data: bytes) -> Path:
        _write(self.path / name, data)
        return self.path / name

    def write_text(self, name: str, text: str) -> Path:
        _write(self.path / name, text)
        return self.path / name

    def write_figure(self, name: str, figure, figure_format: str = "png") -> Path:
        from ...forward.figure_output import figure_bytes

        _write(self.path / name, figure_bytes(figure, figure_format, dpi=130))
        return self.path / name


def summary_rows(records: list[dict]) -> pd.DataFrame:
    """sites_summary.csv rows of final site records (NaN numbers for a failed site)."""
    rows = []
    for record in records:
        for row in record.get("rows", []):
            rows.append({"site": record["site"], "position_km": record["position_km"],
                         **row, "method": record["method"],
                         "converged": record["converged"], "status": record["status"]})
    frame = pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))
    frame["position_km"] = frame["position_km"].astype(float)
    return frame
