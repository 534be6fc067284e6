"""Write every output of a fit into a folder, atomically.

The files are built in memory and written into a staging folder beside the target,
which is renamed into place only when all of them are complete; an error on the way (a
full disk included) removes the staging folder, so a crash never leaves half a result.
The manifest (`inversion.outputs.folder.MANIFEST`) is written first, so even a staging folder
left by a killed run is marked as lidmelt's and is tidied by the next run.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path

from ..._atomic import staged_folder
from ...forward.figure_output import DEFAULT_FIGURE_FORMAT, figure_name
from ..outputs.identity import lidmelt_version, run_record, study_inputs
from ..outputs.folder import (
    MANIFEST,
    check_output_folder,
    output_lock,
    output_path,
    publish_folder,
    remove_stale_temporaries,
    write_staged,
    written,
)
from ..errors import InterruptedWhenComplete
from ..fitting.interrupts import signals_held
from ..fitting.log_posterior import DERIVED
from ..fitting.sampler import chain_file_bytes

__all__ = ["FIGURES", "KIND", "OUTPUT_FILES", "output_files", "save_posterior"]

#: The manifest kind of a fit's result folder.
KIND = "fit result"

#: The figures of a result folder (file name stems; the suffix is the figure format).
FIGURES = ("corner", "fit", "pt")


def output_files(figure_format: str = DEFAULT_FIGURE_FORMAT) -> tuple[str, ...]:
    """Every file a saved result folder contains, its figures in `figure_format`.

    Examples
    --------
    >>> output_files("pdf")[6:9]
    ('posterior.nc', 'corner.pdf', 'fit.pdf')
    """
    return ("summary.csv", "derived.csv", "samples.csv", "chain.h5", "diagnostics.json",
            "run.json", "posterior.nc", *(figure_name(f, figure_format) for f in FIGURES),
            "report.md", MANIFEST)


#: Every file a saved result folder contains (figures as PNG, the default).
OUTPUT_FILES = output_files()

_CSV = {"index": False, "float_format": "%.6g", "lineterminator": "\n"}


def save_posterior(posterior, directory: Path, *, force: bool = False,
                   figure_format: str = DEFAULT_FIGURE_FORMAT,
                   after_publish: Callable[[], None] | None = None) -> Path:
    """Write all of `output_files` for `posterior` to `directory` (see Posterior.save).

    Ctrl-C and SIGTERM are held (`fitting.interrupts.signals_held`) from the moment the
    staging folder is complete until it is in place and `after_publish` has run; one
    caught there is delivered as `InterruptedWhenComplete`. Before that moment a signal
    stops the writing and the staging folder is removed.
    """
    directory = output_path(directory)
    inputs = study_inputs(posterior.study)
    with output_lock(directory):
        check_output_folder(directory, force=force, inputs=inputs, kind=KIND)
        remove_stale_temporaries(directory)
        # built before the staging folder exists
        files = _files(posterior, figure_format=figure_format)
        with staged_folder(directory) as staged:
            write_staged(staged, files, kind=KIND, shown=directory)
            _publish(staged, directory, inputs=inputs, force=force,
                     after_publish=after_publish)
    return directory


def _publish(staged: Path, directory: Path, *, inputs, force: bool,
             after_publish: Callable[[], None] | None) -> None:
    """Move `staged` into place and run `after_publish`, one step for Ctrl-C and SIGTERM
    (so a fit's complete folder never stands beside its checkpoint)."""
    try:
        with signals_held():
            written(directory, publish_folder, staged, directory, inputs=inputs,
                    replace=force, kind=KIND)
            if after_publish is not None:
                after_publish()
    except KeyboardInterrupt as stop:  # only the held signal, delivered on leaving
        raise InterruptedWhenComplete(directory) from stop


def _files(posterior, *, figure_format: str = DEFAULT_FIGURE_FORMAT) -> dict[str, bytes]:
    """Name -> bytes of every output file but the manifest, in writing order."""
    from . import figures
    from . import report
    from .netcdf import NETCDF_FILE, inference_data_bytes

    return {
        "summary.csv": _csv(posterior.summary()),
        "derived.csv": _csv(posterior.derived_summary()),
        "samples.csv": _csv(posterior.samples),
        "chain.h5": chain_file_bytes(posterior.result, meta=_chain_meta(posterior)),
        "diagnostics.json": _json(posterior.diagnostics),
        "run.json": _json(run_record(posterior)),
        NETCDF_FILE: inference_data_bytes(posterior, version=lidmelt_version()),
        **figures.figure_files(posterior, figure_format=figure_format),
        "report.md": report.render(posterior, figure_format=figure_format).encode("utf-8"),
    }


def _csv(frame) -> bytes:
    return frame.to_csv(**_CSV).encode("utf-8")


def _json(data: dict) -> bytes:
    return (json.dumps(data, indent=2, sort_keys=False, allow_nan=False) + "\n").encode()


def _chain_meta(posterior) -> dict:
    return {
        "study_sha256": str(posterior.study.file_hash or ""),
        "seed": posterior.seed,
        "parameters": tuple(posterior.names),
        "derived": tuple(DERIVED),
        "burn_in_steps": posterior.discard,
    }
