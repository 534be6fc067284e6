"""The checkpoint of a running fit: emcee's own backend, written out in complete records.

`CheckpointBackend` is emcee's in-memory `emcee.backends.Backend` (so emcee itself keeps
the chain, the log-probabilities, the blobs, the acceptance counts and the generator
state, and supplies ``get_chain``, ``get_last_sample`` and the rest), with one addition:
`CheckpointBackend.write_record` appends the steps taken since the last record to one
append-only file, ``steps.ckpt``, as one record, and flushes it to the disk.

A record is a frame of 60 bytes followed by its payload (integers little-endian)::

    offset  size  field
         0     4  magic b"LMst"
         4     8  start: steps stored before this record (uint64)
        12     8  stop: steps stored after it (uint64)
        20     8  length of the payload in bytes (uint64)
        28    32  SHA-256 of bytes 0-27 and of the payload
        60     -  payload: an uncompressed numpy ``.npz`` archive with the rows
                  ``start:stop`` of the chain, log-probabilities and blobs, and the
                  acceptance counts and generator state after step `stop`

Records follow each other with no gap, the first starting at step 0. A record is there
whole or not at all: a reader (`_read_frames`) stops at the first frame that is short, has
the wrong magic, does not continue the previous one or fails its checksum, and keeps
everything before it. The next record is written at the end of the last complete one
(`lidmelt._atomic.append_bytes` cuts a torn tail off first), and a write that fails (a
full disk) cuts the file back, so the checkpoint up to the last complete record is kept.

The folder also holds ``checkpoint.json`` (shape and the run's fingerprint, written once)
and the manifest of `inversion.outputs.folder`. `CheckpointBackend.open` reads the records back
in order for a resume, after checking that the run is the same (`fingerprint`).
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import struct
import warnings
import zipfile
from os import PathLike
from pathlib import Path

import emcee
import numpy as np

from ..._atomic import append_bytes, temporary_target, write_text
from ..errors import OutputConflict, WriteError
from ..outputs.folder import MANIFEST, check_replaceable, remove_listed, write_manifest

__all__ = ["HEADER", "RECORDS", "CheckpointBackend", "ResumeWarning", "stored_steps"]

#: The file of a checkpoint folder that describes the run (written once, at the start).
HEADER = "checkpoint.json"
#: The append-only file of a checkpoint folder holding every record.
RECORDS = "steps.ckpt"
_MAGIC = b"LMst"
_FRAME = struct.Struct("<4sQQQ")  # magic, start, stop, payload length; then the digest
_DIGEST = 32
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
        self._end = 0  # byte offset of the end of the last complete record

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
            write_manifest(self.folder, [HEADER, RECORDS], kind="checkpoint")
            write_text(self.folder / HEADER, json.dumps(header, indent=2) + "\n")
        except OSError as err:
            raise WriteError(self.folder, err) from err

    def write_record(self) -> None:
        """Append the steps taken since the last record as one complete record."""
        if self.folder is None or self.iteration == self.stored:
            return
        path = self.folder / RECORDS
        try:
            self._end = append_bytes(path, _frame(self.stored, self.iteration,
                                                  self._record_bytes()), at=self._end)
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
        _remove_temporaries(folder)
        records, end, damage = _read_records(folder / RECORDS, tuple(shape))
        if not records:
            raise OutputConflict("the stored checkpoint holds no complete step yet (the run "
                                 "stopped before its first check)", reason="changed",
                                 file=folder)
        if damage:
            warnings.warn(ResumeWarning(
                f"checkpoint file {RECORDS} ends in {damage}; it is discarded (continuing "
                f"from step {int(records[-1]['stop'])})"), stacklevel=3)
        backend._load(records)
        backend._end = end  # the next record cuts the damaged tail off
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


def _frame(start: int, stop: int, payload: bytes) -> bytes:
    """One record: its frame (see the module docstring) followed by `payload`."""
    head = _FRAME.pack(_MAGIC, start, stop, len(payload))
    return head + hashlib.sha256(head + payload).digest() + payload


def _read_frames(path: Path) -> tuple[list[tuple[int, int, bytes]], int, int]:
    """The complete records of `path` as (start, stop, payload), in order.

    Returns
    -------
    frames : list of tuple
    end : int
        Byte offset where the complete records end.
    left : int
        Bytes after `end` that do not form a complete record (0 for an intact file).
    """
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return [], 0, 0
    frames, end, expected = [], 0, 0
    size = _FRAME.size + _DIGEST
    while len(data) - end >= size:
        magic, start, stop, length = _FRAME.unpack_from(data, end)
        body = end + size
        if (magic != _MAGIC or start != expected or stop <= start
                or length > len(data) - body):
            break
        payload = data[body:body + length]
        digest = hashlib.sha256(data[end:end + _FRAME.size] + payload).digest()
        if digest != data[end + _FRAME.size:body]:
            break
        frames.append((start, stop, payload))
        end, expected = body + length, stop
    return frames, end, len(data) - end


def _read_records(path: Path, shape: tuple) -> tuple[list[dict], int, str]:
    """Complete records in step order, where they end, and what follows them in words.

    A damaged or torn record and everything after it are left out (and described in the
    third value, empty when the file is intact).
    """
    frames, end, left = _read_frames(path)
    records = []
    for index, (start, stop, payload) in enumerate(frames):
        record = _read_record(payload, start, stop, shape)
        if record is None:  # passed its checksum but does not fit this run
            left += sum(len(p) + _FRAME.size + _DIGEST for *_, p in frames[index:])
            end -= sum(len(p) + _FRAME.size + _DIGEST for *_, p in frames[index:])
            break
        records.append(record)
    damage = f"a damaged or incomplete record ({left} bytes)" if left else ""
    return records, end, damage


def _read_record(payload: bytes, start: int, stop: int, shape: tuple) -> dict | None:
    """The arrays of one record, or None if they do not continue at step `start`."""
    try:
        with np.load(io.BytesIO(payload), allow_pickle=False) as data:
            record = {name: data[name] for name in data.files}
        rows = stop - start
        ok = (int(record["start"]) == start and int(record["stop"]) == stop
              and record["chain"].shape == (rows, *shape)
              and record["log_prob"].shape == (rows, shape[0])
              and record["accepted"].shape == (shape[0],))
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile):
        return None
    return record if ok else None


def _remove_temporaries(folder: Path) -> None:
    """Remove half-written header or manifest files of a killed run."""
    for path in folder.iterdir():
        if temporary_target(path.name) in (HEADER, MANIFEST):
            with contextlib.suppress(OSError):
                path.unlink()


def stored_steps(folder: str | PathLike[str]) -> int:
    """Steps stored in the checkpoint `folder`: the end of its last complete record."""
    frames, _, _ = _read_frames(Path(folder) / RECORDS)
    return frames[-1][1] if frames else 0
