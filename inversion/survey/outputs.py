"""The survey folder: manifest, per-site results as they complete, and the tables.

Layout::

    DIR/survey.json         manifest: what was run (hashes of the inputs, settings)
    DIR/sites/0001-<name>/  one folder per site, in site order
        site.json           the site's result (written last: its presence = finished)
        summary.csv         the site's rows of sites_summary.csv
        likelihood.json     joint mode: the site's Tp likelihood (machine form)
        tp_likelihood.csv   joint mode: the same as a table
        chain.h5 / grid.npz with --keep-chains: the emcee chain or the posterior grid
    DIR/sites_summary.csv   one row per site and parameter
    DIR/area.csv            joint mode: the area-wide posterior
    DIR/profile.png, DIR/report.md   (profile.pdf/.svg with figure_format)

A resumed survey re-reads finished sites from their JSON files (floats round-trip
exactly), so it gives the numbers of an uninterrupted one.
"""

from __future__ import annotations

import hashlib
import io
import json
import re
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError, OutputConflict
from ._files import (
    MANIFEST,
    check_replaceable,
    remove_own,
    remove_temporaries,
    write_atomic,
    write_json,
)

__all__ = ["AREA_COLUMNS", "SUMMARY_COLUMNS", "SurveyFolder", "csv_text"]

#: Columns of sites_summary.csv, in order.
SUMMARY_COLUMNS = ("site", "position_km", "parameter", "unit", "median", "q2.5", "q16",
                   "q84", "q97.5", "method", "converged", "status")
#: Columns of area.csv, in order.
AREA_COLUMNS = ("parameter", "unit", "meaning", "median", "mean", "q2.5", "q16", "q84",
                "q97.5", "sites", "method")
_TOOL = "lidmelt survey"
_RECORD_FILES = {"likelihood": "likelihood.json", "final": "site.json"}


def csv_text(frame: pd.DataFrame) -> str:
    """A table as CSV text with 6 significant digits (the form of every survey table)."""
    return frame.to_csv(index=False, float_format="%.6g", lineterminator="\n")


def identity(study_sha256: str, sites_sha256: str, settings: dict) -> dict:
    """What makes two survey runs the same run (compared by ``--resume``)."""
    text = json.dumps(settings, sort_keys=True)
    return {"tool": _TOOL, "lidmelt": _version(), "study_sha256": study_sha256,
            "sites_sha256": sites_sha256, "settings": settings,
            "settings_sha256": hashlib.sha256(text.encode()).hexdigest()}


def _version() -> str:
    try:
        return metadata.version("lidmelt")
    except metadata.PackageNotFoundError:
        return "0+unknown"


class SurveyFolder:
    """A survey's result folder (see the module docstring for its layout)."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)

    @classmethod
    def open(cls, path, manifest: dict, *, resume: bool, force: bool,
             protected=()) -> SurveyFolder:
        """Create, resume or (with `force`) replace the folder, after checking the rules.

        Raises
        ------
        InputError
            The folder exists without `resume`/`force`; `resume` without a survey there
            or with other inputs or settings; `force` on a folder lidmelt did not write.
        """
        folder = cls(Path(path))
        target = folder.path
        if resume:
            folder._check_resumable(manifest)
            remove_temporaries(target)
        elif target.exists():
            if not force:
                raise OutputConflict("the survey folder already exists", reason="checkpoint",
                                     file=target)
            check_replaceable(target, protected)
            remove_own(target)
        else:
            if not target.absolute().parent.is_dir():
                raise InputError("the folder to hold the survey folder does not exist; "
                                 "create it first", file=target.absolute().parent)
            target.mkdir()
        (target / "sites").mkdir(exist_ok=True)
        write_json(target / MANIFEST, manifest)
        return folder

    def _check_resumable(self, manifest: dict) -> None:
        path = self.path / MANIFEST
        if not path.is_file():
            raise OutputConflict(f"there is no survey to resume here (no {MANIFEST})",
                                 reason="no-checkpoint", file=self.path)
        old = json.loads(path.read_text(encoding="utf-8"))
        for key, what in (("study_sha256", "the study file"),
                          ("sites_sha256", "the sites file"),
                          ("settings_sha256", "the settings (mode, seed, options)"),
                          ("lidmelt", "the lidmelt version")):
            if old.get(key) != manifest.get(key):
                raise OutputConflict(f"cannot resume: {what} changed since this survey "
                                     "started", reason="changed", file=self.path)

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
        folder.mkdir(exist_ok=True)
        if phase == "likelihood" and "tp_axis" in record:
            values = record.get("tp_log_likelihood") or [np.nan] * len(record["tp_axis"])
            table = pd.DataFrame({"potential_temperature": record["tp_axis"],
                                  "log_likelihood": values})
            write_atomic(folder / "tp_likelihood.csv", table.to_csv(index=False))
        if phase == "final":
            write_atomic(folder / "summary.csv", csv_text(summary_rows([record])))
        self._write_arrays(folder, arrays or {})
        text = json.dumps(record, indent=1) + "\n"
        write_atomic(folder / _RECORD_FILES[phase], text)
        return json.loads(text)

    @staticmethod
    def _write_arrays(folder: Path, arrays: dict) -> None:
        if "grid" in arrays:
            buffer = io.BytesIO()
            np.savez_compressed(buffer, **arrays["grid"])
            write_atomic(folder / "grid.npz", buffer.getvalue())
        if "chain" in arrays:
            from ..fitting.sampler import write_chain

            write_chain(folder / "chain.h5", arrays["chain"])  # atomic itself

    # ---- whole survey ------------------------------------------------------------------

    def write_table(self, name: str, frame: pd.DataFrame) -> Path:
        write_atomic(self.path / name, csv_text(frame))
        return self.path / name

    def write_text(self, name: str, text: str) -> Path:
        write_atomic(self.path / name, text)
        return self.path / name

    def write_figure(self, name: str, figure, figure_format: str = "png") -> Path:
        from ...forward.figure_output import figure_bytes

        write_atomic(self.path / name, figure_bytes(figure, figure_format, dpi=130))
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
