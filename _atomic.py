"""Atomic writes: a reader sees a file's old content or its new content, never half.

Every writer of the package goes through this module. Bytes go to a temporary name beside
the target (same folder, so the final `os.replace` stays on one file system, where it is
atomic) and are renamed into place only when complete; any error, a full disk included,
removes the temporary file and leaves the target as it was.

Temporary names are ``.<target name>.<random>.tmp<suffix>``; `temporary_target` recognises
them, so a tidy-up can tell a lidmelt leftover from a user's file.

`append_bytes` is the one other way bytes reach a file: it adds a block to the end of an
append-only file (a checkpoint's records), cutting the file back to where the block
began if the write fails. Readers of such a file must recognise a torn last block (a
kill can still leave one) by its own length and checksum.
"""

from __future__ import annotations

import contextlib
import os
import re
import shutil
import tempfile
from collections.abc import Iterator
from os import PathLike
from pathlib import Path

__all__ = ["PNG_MARK", "append_bytes", "replacing", "staged_folder", "temporary_target",
           "write_bytes", "write_text"]

#: The PNG ``Software`` text entry of a figure lidmelt writes as a file of its own (the
#: column command's ``--plot``); `inversion.outputs.folder.check_output_file` replaces a
#: file only with this mark.
PNG_MARK = "lidmelt"

_TEMPORARY = re.compile(r"^\.(?P<target>.+)\.[A-Za-z0-9_]{6,}\.tmp[^/]*$")


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def replacing(path: str | PathLike[str], *, sync: bool = False) -> Iterator[Path]:
    """Yield a temporary path beside `path`; rename it to `path` when the block succeeds.

    Parameters
    ----------
    path : str or path-like
        The file to (re)place. Its folder must exist.
    sync : bool
        Flush the file to the disk (fsync) before the rename, so the new content
        survives a power cut (used for checkpoints).

    Yields
    ------
    pathlib.Path
        Where to write; it keeps the target's suffix (``.png``, ``.npz``) so writers that
        choose a format by suffix behave as for the target.
    """
    target = Path(path)
    fd, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=f".tmp{target.suffix}",
                                dir=target.parent)
    os.close(fd)
    tmp = Path(name)
    try:
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes it private; outputs are shared
        yield tmp
        if sync:
            _fsync(tmp)
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise


def write_bytes(path: str | PathLike[str], data: bytes, *, sync: bool = False) -> None:
    """Write `data` to `path` atomically (see `replacing`)."""
    with replacing(path, sync=sync) as tmp, open(tmp, "wb") as handle:
        _write_all(handle, data)


def write_text(path: str | PathLike[str], text: str) -> None:
    """Write UTF-8 `text` to `path` atomically."""
    write_bytes(path, text.encode("utf-8"))


def append_bytes(path: str | PathLike[str], data: bytes, *, at: int) -> int:
    """Append `data` to `path` at byte offset `at` and flush it to the disk (fsync).

    Parameters
    ----------
    path : str or path-like
        The append-only file; created if missing (its folder must exist).
    data : bytes
        One whole block (a record with its length and checksum).
    at : int
        Where the block goes: the end of the last complete block. Anything beyond it (a
        torn block left by a killed run) is cut off first.

    Returns
    -------
    int
        The new end of the file, ``at + len(data)``.

    Notes
    -----
    Any error, a full disk included, cuts the file back to `at`, so it again ends with a
    complete block; the exception is re-raised.
    """
    target = Path(path)
    created = not target.exists()
    with open(target, "ab") as handle:
        try:
            if handle.tell() != at:  # opened in append mode: at the current end
                handle.truncate(at)
            _write_all(handle, data)
            handle.flush()
            os.fsync(handle.fileno())
        except BaseException:
            with contextlib.suppress(OSError):
                handle.truncate(at)
            raise
    if created:
        _fsync_folder(target.parent)  # the new name itself survives a power cut
    return at + len(data)


def _fsync_folder(folder: Path) -> None:
    with contextlib.suppress(OSError):  # not every file system lets a folder be synced
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _write_all(handle, data: bytes) -> None:
    # The one place bytes reach the disk: the fault-injection tests patch it.
    handle.write(data)


def _fsync(path: Path) -> None:
    with open(path, "rb+") as handle:
        os.fsync(handle.fileno())


@contextlib.contextmanager
def staged_folder(target: str | PathLike[str]) -> Iterator[Path]:
    """Yield a new empty folder ``.<name>.writing-<random>`` beside `target`.

    The caller fills it and moves it into place inside the block; if the block fails,
    the folder and what was written into it are removed.
    """
    target = Path(target)
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.writing-", dir=target.parent))
    try:
        os.chmod(tmp, 0o777 & ~_umask())
        yield tmp
    except BaseException:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)  # made by this call, holds only its files
        raise


def temporary_target(name: str) -> str | None:
    """The target name of a temporary file made by `replacing`, or None.

    Examples
    --------
    >>> temporary_target(".summary.csv.k2j4x9ab.tmp.csv")
    'summary.csv'
    >>> temporary_target("notes.txt") is None
    True
    """
    match = _TEMPORARY.match(name)
    return None if match is None else match.group("target")
