"""The checkpoint of a running fit: emcee's own backend, written out in complete records.

`CheckpointBackend` is emcee's in-memory `emcee.backends.Backend` (so emcee itself keeps
the chain, the log-probabilities, the blobs, the acceptance counts and the generator
state, and supplies ``get_chain``, ``get_last_sample`` and the rest), with one addition:
`CheckpointBackend.write_record` writes the steps taken since the last record to the
checkpoint folder as one file, ``step-<N>.npz`` (N = steps stored after it). A record
holds its rows, the acceptance counts and the generator state after step N, and is
written under a temporary name and renamed into place (`lidmelt._atomic`): a record is
there whole or not at all. A write that fails (a full disk) leaves every earlier record
as it was, so the checkpoint up to the last complete record is always kept.

The folder also holds ``checkpoint.json`` (shape and the run's fingerprint, written once)
and the manifest of `inversion.outputs.folder`. `CheckpointBackend.open` reads the records back
in order for a resume, after checking that the run is the same (`fingerprint`).
"""

from __future__ import annotations

import contextlib
import io
import json
import re
import warnings
import zipfile
from os import PathLike
from pathlib import Path

import emcee
import numpy as np

from ..._atomic import temporary_target, write_bytes, write_text
from ..errors import OutputConflict, WriteError
from ..outputs.folder import MANIFEST, check_replaceable, remove_listed, write_manifest

__all__ = ["HEADER", "CheckpointBackend", "ResumeWarning", "stored_steps"]

#: The file of a checkpoint folder that describes the run (written once, at the start).
HEADER = "checkpoint.json"
_RECORD = "step-{:09d}.npz"
_RECORD_GLOB = "step-*.npz"
_BLOCK = 256  # storage grows in blocks of this many steps, then by doubling


class ResumeWarning(UserWarning):
    """Part of a stored checkpoint was unusable and is discarded (the message says which)."""


class CheckpointBackend(emcee.backends.Backend):
    """emcee's in-memory backend plus whole-record writes to a checkpoint folder.

    Parameters
    ----------
    folder : str or path-like, optional
        The checkpoint folder; None keeps the chain in memory only.

    Attributes
    ----------
    stored : int
        Steps already written to records.
    """

    def __init__(self, folder: str | PathLike[str] | None = None) -> None:
        super().__init__()
        self.folder = None if folder is None else Path(folder)
        self.stored = 0

    # ---- storage: emcee asks for all of max_steps at once; grow as steps arrive -------

    def grow(self, ngrow, blobs):
        self._check_blobs(blobs)
        self._reserve(self.iteration + min(int(ngrow), _BLOCK), blobs)

    def save_step(self, state, accepted):
        if self.iteration >= len(self.chain):
            self._reserve(max(2 * len(self.chain), _BLOCK), state.blobs)
        super().save_step(state, accepted)

    def _reserve(self, size: int, blobs) -> None:
        extra = size - len(self.chain)
        if extra <= 0:
            return
        self.chain = _extend(self.chain, extra)
        self.log_prob = _extend(self.log_prob, extra)
        if self.blobs is None and blobs is not None:
            blobs = np.asarray(blobs)
            dtype = np.dtype((blobs.dtype, blobs.shape[1:]))
            self.blobs = np.empty((len(self.chain) - extra, self.nwalkers), dtype=dtype)
        if self.blobs is not None:
            self.blobs = _extend(self.blobs, extra)

    # ---- the checkpoint folder --------------------------------------------------------

    def create(self, meta: dict) -> None:
        """Start a new checkpoint in `folder` (which must exist and be empty)."""
        if self.folder is None:
            return
        header = {"nwalkers": self.nwalkers, "ndim": self.ndim, "meta": meta}
        try:
            write_manifest(self.folder, [HEADER], kind="checkpoint", patterns=[_RECORD_GLOB])
            write_text(self.folder / HEADER, json.dumps(header, indent=2) + "\n")
        except OSError as err:
            raise WriteError(self.folder, err) from err

    def write_record(self) -> None:
        """Write the steps taken since the last record as one complete record."""
        if self.folder is None or self.iteration == self.stored:
            return
        path = self.folder / _RECORD.format(self.iteration)
        try:
            write_bytes(path, self._record_bytes(), sync=True)
        except OSError as err:
            raise WriteError(path, err, kept_steps=self.stored,
                             checkpoint=self.folder) from err
        self.stored = self.iteration

    def _record_bytes(self) -> bytes:
        rows = slice(self.stored, self.iteration)
        key, state, pos, has_gauss, cached = self.random_state
        arrays = {
            "start": np.int64(self.stored), "stop": np.int64(self.iteration),
            "chain": self.chain[rows], "log_prob": self.log_prob[rows],
            "accepted": self.accepted, "rng_key": np.str_(key), "rng_state": state,
            "rng_pos": np.int64(pos), "rng_has_gauss": np.int64(has_gauss),
            "rng_cached": np.float64(cached),
        }
        if self.blobs is not None:
            arrays["blobs"] = self.blobs[rows]
        buffer = io.BytesIO()
        np.savez(buffer, **arrays)
        return buffer.getvalue()

    @classmethod
    def open(cls, folder: str | PathLike[str], *, meta: dict, shape) -> CheckpointBackend:
        """Read a checkpoint back for a resume.

        Parameters
        ----------
        folder : str or path-like
            The checkpoint folder.
        meta : dict
            The run's description; its ``fingerprint`` entries must match the stored ones.
        shape : tuple of int
            ``(nwalkers, ndim)`` of this run.

        Raises
        ------
        OutputConflict
            Nothing to resume, another run's checkpoint (naming what differs), or no
            readable record. Unreadable records after good ones are discarded with a
            `ResumeWarning`.
        """
        folder = Path(folder)
        header = _read_header(folder)
        _check_same_run(header, meta, tuple(shape), folder)
        backend = cls(folder)
        backend.reset(*shape)
        records = _read_records(folder, tuple(shape))
        if not records:
            raise OutputConflict("the stored checkpoint holds no complete step yet (the run "
                                 "stopped before its first check)", reason="changed",
                                 file=folder)
        backend._load(records)
        return backend

    def _load(self, records: list[dict]) -> None:
        self.chain = np.concatenate([r["chain"] for r in records])
        self.log_prob = np.concatenate([r["log_prob"] for r in records])
        if "blobs" in records[0]:
            self.blobs = np.concatenate([r["blobs"] for r in records])
        last = records[-1]
        self.accepted = np.array(last["accepted"], dtype=float)
        self.random_state = (str(last["rng_key"]), np.array(last["rng_state"]),
                             int(last["rng_pos"]), int(last["rng_has_gauss"]),
                             float(last["rng_cached"]))
        self.iteration = self.stored = int(last["stop"])

    def remove(self) -> None:
        """Delete the checkpoint folder: the files lidmelt wrote there, nothing else."""
        if not any(self.folder.iterdir()):  # its manifest could not even be written
            self.folder.rmdir()
            return
        remove_listed(self.folder, check_replaceable(self.folder, what="checkpoint"))


def _extend(array: np.ndarray, extra: int) -> np.ndarray:
    pad = np.empty((extra,) + array.shape[1:], dtype=array.dtype)
    return np.concatenate([array, pad])


def _read_header(folder: Path) -> dict:
    if not (folder / HEADER).is_file():
        raise OutputConflict("there is no interrupted run to resume for this folder",
                             reason="no-checkpoint", file=folder)
    try:
        header = json.loads((folder / HEADER).read_text(encoding="utf-8"))
        header["meta"]["fingerprint"].items()
    except (OSError, ValueError, KeyError, TypeError, AttributeError) as err:
        raise OutputConflict(f"the stored checkpoint cannot be read ({HEADER}: "
                             f"{type(err).__name__})", reason="changed", file=folder) from None
    return header


def _check_same_run(header: dict, meta: dict, shape: tuple, folder: Path) -> None:
    stored = header["meta"]["fingerprint"]
    changed = [label for label, value in meta["fingerprint"].items()
               if stored.get(label) != value]
    changed += [label for label in stored if label not in meta["fingerprint"]]
    if changed:
        raise OutputConflict(
            f"cannot resume: {_and(changed)} changed since the run was stored, so "
            "resuming would mix two problems", reason="changed", file=folder)
    if (header.get("nwalkers"), header.get("ndim")) != shape:
        raise OutputConflict(
            f"cannot resume: the stored run has {header.get('nwalkers')} walkers and "
            f"{header.get('ndim')} free parameters, this one {shape[0]} and {shape[1]}",
            reason="changed", file=folder)


def _and(items: list[str]) -> str:
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def _read_records(folder: Path, shape: tuple) -> list[dict]:
    """Complete records in step order; a damaged one and all after it are discarded."""
    _remove_temporaries(folder)
    paths = sorted(folder.glob(_RECORD_GLOB))
    records, expected = [], 0
    for index, path in enumerate(paths):
        record = _read_record(path, expected, shape)
        if record is None:
            kept = f"continuing from step {expected}" if expected else "nothing is usable"
            warnings.warn(ResumeWarning(
                f"checkpoint record {path.name} is damaged; it and the "
                f"{len(paths) - index - 1} after it are discarded ({kept})"), stacklevel=4)
            if records:
                for later in paths[index:]:
                    later.unlink()
            break
        records.append(record)
        expected = int(record["stop"])
    return records


def _read_record(path: Path, start: int, shape: tuple) -> dict | None:
    """One record, or None if it is unreadable or does not continue at step `start`."""
    try:
        with np.load(io.BytesIO(path.read_bytes()), allow_pickle=False) as data:
            record = {name: data[name] for name in data.files}
        rows = int(record["stop"]) - int(record["start"])
        ok = (int(record["start"]) == start and rows > 0
              and record["chain"].shape == (rows, *shape)
              and record["log_prob"].shape == (rows, shape[0])
              and record["accepted"].shape == (shape[0],)
              and path.name == _RECORD.format(int(record["stop"])))
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile):
        return None
    return record if ok else None


def _remove_temporaries(folder: Path) -> None:
    """Remove half-written records of a killed run (never renamed into place)."""
    for path in folder.iterdir():
        target = temporary_target(path.name)
        if target is not None and (target.startswith("step-") or target in (HEADER, MANIFEST)):
            with contextlib.suppress(OSError):
                path.unlink()


def stored_steps(folder: str | PathLike[str]) -> int:
    """Steps stored in the checkpoint `folder`, from its record names (0 if none)."""
    folder = Path(folder)
    if not folder.is_dir():
        return 0
    steps = [int(m.group(1)) for p in folder.glob(_RECORD_GLOB)
             if (m := re.fullmatch(r"step-(\d{9})\.npz", p.name))]
    return max(steps, default=0)
