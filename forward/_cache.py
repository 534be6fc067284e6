"""The folder where tabulated melting paths are kept between runs, and its upkeep.

The folder is the platform's user cache folder for lidmelt (``platformdirs``), or the
value of ``LIDMELT_CACHE`` if that is set; an empty value switches the disk cache off.
Its size is capped at ``LIDMELT_CACHE_MAX_MB`` megabytes (default 500): after a new table
is written, the least recently used tables are deleted until the rest fit (the new one is
always kept). Loading a table marks it used by touching its modification time, which is
portable where access times are not.

Only files lidmelt writes are ever deleted: regular files named like its tables
(``paths-<label>-<16 hex digits>.npz``), and, once an hour old, the temporary file of an
interrupted write of one (``.paths-...npz.<random>.tmp.npz``, see ``lidmelt._atomic``) or
the lock file of a killed build (``.paths-...npz.lock``). Anything else in the folder is
left alone. This module uses the standard library only, so
``lidmelt cache`` is quick.
"""

from __future__ import annotations

import contextlib
import math
import os
import re
import time
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

from .._atomic import temporary_target

__all__ = [
    "CACHE_ENV",
    "DEFAULT_LIMIT_MB",
    "LIMIT_ENV",
    "CacheEntry",
    "CacheListing",
    "building",
    "cache_folder",
    "cache_limit",
    "clear",
    "list_folder",
    "mark_used",
    "prune",
    "table_name",
]

CACHE_ENV = "LIDMELT_CACHE"
LIMIT_ENV = "LIDMELT_CACHE_MAX_MB"
DEFAULT_LIMIT_MB = 500.0
_BYTES_PER_MB = 1_000_000

_LABEL_CHARS = re.compile(r"[^A-Za-z0-9_.-]")
_TABLE_NAME = re.compile(r"paths-[A-Za-z0-9_.-]+-[0-9a-f]{16}\.npz")
_LOCK_NAME = re.compile(r"\.(paths-[A-Za-z0-9_.-]+-[0-9a-f]{16}\.npz)\.lock")
_STALE_PART_SECONDS = 3600.0  # a write in progress never takes this long
_POLL_SECONDS = 0.25  # while another process builds: short against a build of seconds


def cache_folder() -> Path | None:
    """The table cache folder, or None when ``LIDMELT_CACHE`` is set to ``""``."""
    root = os.environ.get(CACHE_ENV)
    if root is None:
        import platformdirs  # only needed where no folder is given

        return Path(platformdirs.user_cache_dir("lidmelt"))
    return Path(root).expanduser() if root else None


def cache_limit() -> int:
    """The cap on the folder's tables in bytes, from ``LIDMELT_CACHE_MAX_MB`` (MB = 10^6 B).

    A value that is not a number of megabytes >= 0 gives a warning naming it, and the
    default applies: a cache setting must never stop a model run.
    """
    text = os.environ.get(LIMIT_ENV, "").strip()
    if not text:
        return int(DEFAULT_LIMIT_MB * _BYTES_PER_MB)
    try:
        megabytes = float(text)
    except ValueError:
        megabytes = math.nan
    if not (math.isfinite(megabytes) and megabytes >= 0.0):
        warnings.warn(f"{LIMIT_ENV} = {text!r} is not a size in megabytes >= 0; using the "
                      f"default, {DEFAULT_LIMIT_MB:g}", UserWarning, stacklevel=2)
        megabytes = DEFAULT_LIMIT_MB
    return int(megabytes * _BYTES_PER_MB)


def table_name(label: str, digest: str) -> str:
    """File name of a table: ``paths-<label>-<first 16 hex digits of digest>.npz``."""
    return f"paths-{_LABEL_CHARS.sub('_', label)}-{digest[:16]}.npz"


@dataclass(frozen=True)
class CacheEntry:
    """One of lidmelt's files in the cache folder."""

    path: Path
    size: int  # bytes
    last_used: float  # seconds since the epoch (modification time)


@dataclass(frozen=True)
class CacheListing:
    """What a cache folder holds: lidmelt's tables (least recently used first), the
    leftovers of interrupted writes and builds, and the names of everything else."""

    tables: tuple[CacheEntry, ...]
    partial: tuple[CacheEntry, ...]
    others: tuple[str, ...]

    @property
    def size(self) -> int:
        """Bytes taken by lidmelt's files (tables and leftovers)."""
        return sum(entry.size for entry in self.tables + self.partial)


def list_folder(folder: Path) -> CacheListing:
    """Sort the entries of ``folder`` into lidmelt's own files and the rest."""
    tables, partial, others = [], [], []
    try:
        entries = list(os.scandir(folder))
    except FileNotFoundError:
        entries = []
    for entry in entries:
        own = entry.is_file(follow_symlinks=False)
        if own and _TABLE_NAME.fullmatch(entry.name):
            tables.append(_entry(entry))
        elif own and _TABLE_NAME.fullmatch(temporary_target(entry.name) or ""):
            partial.append(_entry(entry))
        elif own and _LOCK_NAME.fullmatch(entry.name):
            partial.append(_entry(entry))  # left by a build that was killed
        else:
            others.append(entry.name)
    tables.sort(key=lambda e: (e.last_used, e.path.name))
    return CacheListing(tuple(tables), tuple(partial), tuple(sorted(others)))


def _entry(entry: os.DirEntry) -> CacheEntry:
    info = entry.stat(follow_symlinks=False)
    return CacheEntry(Path(entry.path), info.st_size, info.st_mtime)


@contextlib.contextmanager
def building(path: Path, *, waiting: Callable[[str], None] | None = None) -> Iterator[None]:
    """Hold an exclusive lock for building the table at ``path`` (one builder at a time).

    The lock is an advisory ``flock`` on ``.<name>.lock`` beside the table, released by
    the system if the process dies. The lock file is removed by its holder when done;
    where locking is unavailable (no ``fcntl``, a folder that cannot be written) the
    block simply runs, and at worst two processes build the same table. While another
    process holds the lock, ``waiting("waiting")`` is called about every
    `_POLL_SECONDS` (``progress.BuildClock`` throttles what it passes on), so a wait is
    never silent.
    """
    lock = path.with_name(f".{path.name}.lock")
    try:
        import fcntl

        path.parent.mkdir(parents=True, exist_ok=True)
        handle = open(lock, "a+b")
    except (ImportError, OSError):
        yield
        return
    try:
        with contextlib.suppress(OSError):
            _acquire(handle, fcntl, waiting)
        yield
    finally:
        with contextlib.suppress(OSError):
            lock.unlink()  # while held: a waiter then finds the finished table
        handle.close()


def _acquire(handle, fcntl, waiting) -> None:
    """Take the lock, polling (and saying so) while another process holds it."""
    while True:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
            return
        except BlockingIOError:
            if waiting is None:
                fcntl.flock(handle, fcntl.LOCK_EX)
                return
            waiting("waiting")
            time.sleep(_POLL_SECONDS)


def mark_used(path: Path) -> None:
    """Record that a table was just used (its modification time); a read-only cache is fine."""
    try:
        os.utime(path)
    except OSError:
        pass


def prune(folder: Path, keep: Path, limit: int | None = None) -> list[Path]:
    """Delete least recently used tables until the folder's tables fit in ``limit`` bytes.

    ``keep`` (the table just written) is never deleted, nor is any file that is not
    lidmelt's; temporary files of writes interrupted over an hour ago go too.
    Returns the deleted paths.
    """
    limit = cache_limit() if limit is None else limit
    listing = list_folder(folder)
    stale_before = time.time() - _STALE_PART_SECONDS
    doomed = [e for e in listing.partial if e.last_used < stale_before]
    total = sum(e.size for e in listing.tables)
    for entry in listing.tables:  # least recently used first
        if total <= limit:
            break
        if entry.path.name != keep.name:
            doomed.append(entry)
            total -= entry.size
    return [entry.path for entry in doomed if _remove(entry.path)]


def clear(folder: Path) -> list[CacheEntry]:
    """Delete every lidmelt table and leftover in ``folder``; returns what went."""
    listing = list_folder(folder)
    return [entry for entry in listing.tables + listing.partial if _remove(entry.path)]


def _remove(path: Path) -> bool:
    try:
        path.unlink()
    except FileNotFoundError:  # another process pruned it first
        return False
    except OSError:  # e.g. open elsewhere on Windows, or a read-only folder
        return False
    return True
