"""What lidmelt may replace, and who may write a result folder: one rule for every command.

lidmelt never deletes or overwrites a file it did not write. Every folder it writes (a
result folder, a checkpoint) carries a manifest, `MANIFEST`, naming the files it wrote
there (and, for a checkpoint, the name patterns of its records). Replacing such a folder
removes those files only.

`check_output_folder` is what a command checks before any work; `check_replaceable` is
the rule for replacing (``force``). It refuses, whatever ``force`` says:

- a path that is a file or a symbolic link, not a folder;
- the current folder or any folder that contains it;
- a folder that holds (at any depth) one of the run's input files (study file, tables);
- a folder without a lidmelt manifest;
- a folder holding anything its manifest does not list.

`output_lock` keeps a second run off a folder that a live run is writing: a lock file
``.<name>.lock`` beside it holds the writer's process id and host. A lock whose process
has ended (a killed run) is taken over.

`publish_folder` moves a completed staging folder into place, replacing an old result only
under the rule; `remove_stale_temporaries` tidies what killed runs left beside a folder.
"""

from __future__ import annotations

import contextlib
import fnmatch
import json
import os
import socket
import time
from collections.abc import Iterable, Iterator, Sequence
from os import PathLike
from pathlib import Path

from ..._atomic import temporary_target, write_text
from ..errors import InputError, OutputConflict

__all__ = [
    "MANIFEST",
    "check_not_protected",
    "check_output_folder",
    "check_replaceable",
    "output_lock",
    "publish_folder",
    "remove_listed",
    "remove_stale_temporaries",
    "write_manifest",
]

#: Name of the manifest file lidmelt writes into every folder it creates.
MANIFEST = "lidmelt-files.json"

_HELD: dict[Path, int] = {}  # lock files this process holds -> nesting depth


def write_manifest(folder: str | PathLike[str], files: Iterable[str], *, kind: str,
                   patterns: Sequence[str] = ()) -> None:
    """Mark `folder` as lidmelt's: list the files (and name patterns) written into it.

    Write it before the files themselves, so that a folder left by a killed run is
    already marked. The content has no time or version in it, so two runs that write the
    same files write the same manifest.

    Parameters
    ----------
    folder : str or path-like
    files : iterable of str
        File names (no folders) lidmelt writes there.
    kind : str
        What the folder is, e.g. ``"fit result"`` or ``"checkpoint"``.
    patterns : sequence of str
        `fnmatch` patterns of further files (e.g. checkpoint records).
    """
    record = {"written_by": "lidmelt", "kind": kind, "files": sorted(set(files)),
              "patterns": list(patterns)}
    write_text(Path(folder) / MANIFEST, json.dumps(record, indent=2) + "\n")


def _read_manifest(folder: Path) -> dict | None:
    try:
        record = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or record.get("written_by") != "lidmelt":
        return None
    files, patterns = record.get("files"), record.get("patterns", [])
    if not (isinstance(files, list) and isinstance(patterns, list)
            and all(isinstance(x, str) for x in files + patterns)):
        return None
    return record


def _listed(name: str, record: dict) -> bool:
    if name == MANIFEST or name in record["files"]:
        return True
    return any(fnmatch.fnmatchcase(name, p) for p in record["patterns"])


def _own(name: str, record: dict) -> bool:
    """A listed file, or a temporary file lidmelt was writing for one."""
    target = temporary_target(name)
    return _listed(name, record) or (target is not None and _listed(target, record))


def check_replaceable(path: str | PathLike[str], *, inputs: Iterable[str | PathLike[str]] = (),
                      what: str = "output folder") -> list[Path]:
    """Check that `path` may be replaced; return the files to remove.

    This is the one rule behind every "replace the old output" choice (``force``).

    Parameters
    ----------
    path : str or path-like
        The output folder to replace.
    inputs : iterable of path-like
        The run's input files (study file, observation tables); a folder holding any of
        them is never replaced.
    what : str
        How messages name `path`.

    Returns
    -------
    list of pathlib.Path
        The files of `path` that lidmelt wrote (empty when `path` does not exist).

    Raises
    ------
    InputError
        `path` is a file, a link, the current folder or a parent of it, a folder with an
        input file inside, a folder lidmelt did not write, or one holding other files.
    """
    path = Path(path).absolute()
    if not path.exists() and not path.is_symlink():
        return []
    check_not_protected(path, inputs=inputs, what=what)
    refuse = _refusal(path, what)
    record = _read_manifest(path)
    if record is None:
        raise refuse(f"was not written by lidmelt (it has no {MANIFEST}); lidmelt replaces "
                     "only folders it wrote itself")
    entries = sorted(path.iterdir())
    foreign = [p.name for p in entries if p.is_dir() or not _own(p.name, record)]
    if foreign:
        raise refuse(f"holds '{foreign[0]}', which lidmelt did not write there; move it "
                     "away or choose another folder")
    return entries


def check_not_protected(path: str | PathLike[str], *,
                        inputs: Iterable[str | PathLike[str]] = (),
                        what: str = "output folder") -> None:
    """The part of the rule that no manifest can lift, for an existing `path`.

    A folder kind with its own record of what it wrote (a survey's) calls this and then
    checks its own files; everything else uses `check_replaceable`.

    Raises
    ------
    InputError
        `path` is a file or a link, the current folder or a parent of it, or a folder
        holding one of `inputs`.
    """
    path = Path(path).absolute()
    refuse = _refusal(path, what)
    if path.is_symlink() or not path.is_dir():
        raise refuse("is a file, not a folder lidmelt wrote; lidmelt replaces only "
                     "folders it wrote itself")
    real = path.resolve()
    if _contains(real, Path.cwd().resolve()):
        raise refuse("is the current folder or contains it; lidmelt never replaces it")
    for name in inputs:
        if _contains(real, Path(name).resolve()):
            raise refuse(f"holds the input file {Path(name).name}; lidmelt never replaces "
                         "a folder with the run's inputs in it")


def check_output_folder(target: str | PathLike[str], *, force: bool,
                        inputs: Iterable[str | PathLike[str]] = (),
                        what: str = "result folder") -> None:
    """The checks every command makes on its output folder before any work.

    Parameters
    ----------
    target : str or path-like
        The folder the command will write.
    force : bool
        Whether an existing `target` may be replaced (then `check_replaceable` decides).
    inputs : iterable of path-like
        The run's input files.
    what : str
        How messages name `target`.

    Raises
    ------
    InputError
        The folder to hold `target` does not exist, or `target` may not be replaced.
    OutputConflict
        `target` exists and `force` is false.
    """
    target = Path(target).absolute()
    if not target.parent.is_dir():
        raise InputError(f"the folder to hold the {what} does not exist; create it first",
                         file=target.parent)
    if target.exists() or target.is_symlink():
        if not force:
            raise OutputConflict(f"the {what} already exists", reason="exists", file=target)
        check_replaceable(target, inputs=inputs, what=what)


def _refusal(path: Path, what: str):
    def refuse(message: str) -> InputError:
        return InputError(f"the {what} {message}", file=path)
    return refuse


def _contains(folder: Path, other: Path) -> bool:
    return other == folder or folder in other.parents


def remove_listed(folder: Path, files: Iterable[Path]) -> None:
    """Remove `files` (from `check_replaceable`), then the folder if it is then empty."""
    for file in files:
        with contextlib.suppress(FileNotFoundError):
            file.unlink()
    with contextlib.suppress(OSError):  # something new appeared in it: leave the folder
        folder.rmdir()


def publish_folder(staged: Path, target: Path, *, inputs: Iterable[str | PathLike[str]] = (),
                   replace: bool = False) -> None:
    """Move the completed folder `staged` to `target`, replacing an old one only by the rule.

    Parameters
    ----------
    staged : pathlib.Path
        A complete folder beside `target` (see ``_atomic.staged_folder``).
    target : pathlib.Path
        Where it goes.
    inputs : iterable of path-like
        Input files of the run (see `check_replaceable`).
    replace : bool
        Replace an existing `target` (checked with `check_replaceable`); without it an
        existing `target` is an error (raised by the caller's earlier checks).
    """
    old = None
    if replace and (target.exists() or target.is_symlink()):
        doomed = check_replaceable(target, inputs=inputs, what="result folder")
        old = target.with_name(f".{target.name}.old-{staged.name.rsplit('-', 1)[-1]}")
        os.rename(target, old)
        doomed = [old / p.name for p in doomed]
    os.rename(staged, target)
    if old is not None:
        remove_listed(old, doomed)


def remove_stale_temporaries(target: Path) -> None:
    """Remove ``.<name>.writing-*`` and ``.<name>.old-*`` folders that killed runs left.

    Call it only while holding `output_lock` for `target`, so no live run owns them. A
    leftover is removed only if it holds nothing but lidmelt's own files (or nothing).
    """
    parent = target.parent
    for prefix in (f".{target.name}.writing-", f".{target.name}.old-"):
        for leftover in parent.glob(f"{_glob_escape(prefix)}*"):
            if leftover.is_symlink() or not leftover.is_dir():
                continue
            if not any(leftover.iterdir()):
                leftover.rmdir()
                continue
            with contextlib.suppress(InputError):
                remove_listed(leftover, check_replaceable(leftover))


def _glob_escape(text: str) -> str:
    return "".join(f"[{c}]" if c in "*?[" else c for c in text)


@contextlib.contextmanager
def output_lock(target: str | PathLike[str]) -> Iterator[Path]:
    """Hold the lock of the output `target` for the block (re-entrant in one process).

    Raises
    ------
    InputError
        Another live process holds the lock.
    """
    lock = _lock_path(Path(target).absolute())
    if lock in _HELD:
        _HELD[lock] += 1
    else:
        _acquire(lock, Path(target))
        _HELD[lock] = 1
    try:
        yield lock
    finally:
        _HELD[lock] -= 1
        if not _HELD[lock]:
            del _HELD[lock]
            with contextlib.suppress(OSError):
                if _holder(lock) == _me():
                    lock.unlink()


def _lock_path(target: Path) -> Path:
    return target.with_name(f".{target.name}.lock")


def _me() -> tuple[int, str]:
    return os.getpid(), socket.gethostname()


def _acquire(lock: Path, target: Path) -> None:
    if not lock.parent.is_dir():
        return  # no folder to write into: the caller's own checks say so
    for _ in range(20):
        if _create(lock):
            return
        holder = _holder(lock)
        if holder is None and _age(lock) < 2.0:  # being created by another run right now
            time.sleep(0.1)
            continue
        if holder is not None and _alive(*holder):
            pid, host = holder
            raise InputError(
                f"another lidmelt run (process {pid} on {host}) is writing this output "
                f"folder; wait for it to end or choose another folder (if that run has "
                f"ended, delete {lock.name})", file=target)
        stale = lock.with_name(f"{lock.name}.stale-{os.getpid()}")
        with contextlib.suppress(FileNotFoundError):  # another run took it over first
            os.rename(lock, stale)
            stale.unlink()
    raise InputError("could not take the lock of this output folder; try again",
                     file=target)


def _create(lock: Path) -> bool:
    """Create `lock` holding our pid and host, atomically; False if it exists."""
    pid, host = _me()
    try:
        fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
    except FileExistsError:
        return False
    with os.fdopen(fd, "w") as handle:
        handle.write(f"{pid} {host}\n")
    return True


def _age(lock: Path) -> float:
    try:
        return time.time() - lock.stat().st_mtime
    except OSError:
        return 0.0


def _holder(lock: Path) -> tuple[int, str] | None:
    try:
        pid, host = lock.read_text(encoding="utf-8").split()
        return int(pid), host
    except (OSError, ValueError):
        return None


def _alive(pid: int, host: str) -> bool:
    if host != socket.gethostname():
        return True  # cannot tell from here: assume the other machine's run is live
    if pid == os.getpid():
        return False  # a lock of ours that no block holds: left by an earlier error
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # exists, owned by someone else
    return True
