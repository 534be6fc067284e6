"""Result folders: one rule for every command that writes files (fit, compare, survey,
column's figure).

lidmelt never deletes or overwrites a file it did not write. Every folder it writes carries
a manifest, `MANIFEST`, naming the files it wrote there (and name patterns, for a
checkpoint's records) and the subfolders that carry manifests of their own (a comparison's
scenario folders, a survey's ``sites/`` and each ``sites/<site>/``). Replacing a folder
removes what the manifests list, and nothing else.

The recipe of a command (see the contributor guide, "Output folders"):

1. ``target = output_path(out)``; hold ``output_lock(target)`` for the whole run;
2. ``check_output_folder(target, force=..., inputs=..., kind=...)`` before any work, then
   ``remove_stale_temporaries(target)``;
3. build the files in memory; inside ``_atomic.staged_folder(target)`` call
   ``write_staged`` (the manifest first, then the files), then ``publish_folder``.

A command that writes its folder in place as it goes (a survey, which resumes from it)
creates it the same way and replaces an old one by the same rule.

`check_replaceable` is the one replace rule (``force``). It refuses, whatever ``force``
says:

- a path that is a symbolic link or a file, not a folder;
- the current folder or any folder that contains it;
- a folder that holds (at any depth) one of the run's input files (study file, tables);
- a non-empty folder without a lidmelt manifest, or with one of another kind of result;
- a folder holding anything its manifest does not list, at any depth: a subfolder is
  lidmelt's only if its parent's manifest lists it and it carries its own manifest
  (or is empty).

`output_lock` keeps a second run off a folder that a live run is writing: a lock file
``.<name>.lock`` beside it holds the writer's process id and host. A lock whose process
has ended (a killed run) is taken over.
"""

from __future__ import annotations

import contextlib
import fnmatch
import json
import os
import secrets
import socket
import time
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from os import PathLike
from pathlib import Path

from ..._atomic import PNG_MARK, temporary_target, write_bytes, write_text
from ..errors import InputError, OutputConflict, WriteError

__all__ = [
    "MANIFEST",
    "check_not_protected",
    "check_output_file",
    "check_output_folder",
    "check_replaceable",
    "discard_checkpoint",
    "output_lock",
    "output_path",
    "publish_folder",
    "read_manifest",
    "remove_listed",
    "remove_own_temporaries",
    "remove_stale_temporaries",
    "write_manifest",
    "write_staged",
    "written",
]

#: Name of the manifest file lidmelt writes into every folder it creates.
MANIFEST = "lidmelt-files.json"

# The command that writes each kind of top-level folder (for messages).
_WRITER = {"fit result": "lidmelt fit", "checkpoint": "lidmelt fit",
           "comparison": "lidmelt compare", "survey": "lidmelt survey"}
# Staging and set-aside names of a folder `x` inside its parent: `.x.writing-*`, `.x.old-*`.
_SIDE = ("writing", "old")

_HELD: dict[Path, int] = {}  # lock files this process holds -> nesting depth


def output_path(out: str | PathLike[str], *, what: str = "result folder") -> Path:
    """The absolute, normalised path of an output `out` (``..`` folded, no trailing ``/``).

    Raises
    ------
    InputError
        `out` is the root folder (it has no name, so nothing can be staged beside it).
    """
    path = Path(os.path.abspath(os.fspath(out)))
    if not path.name:
        raise InputError(f"the {what} cannot be the root folder {path}; give a new folder "
                         "inside another one", file=path)
    return path


def write_manifest(folder: str | PathLike[str], files: Iterable[str], *, kind: str,
                   patterns: Sequence[str] = (), folders: Iterable[str] = ()) -> None:
    """Mark `folder` as lidmelt's: list the files, name patterns and subfolders in it.

    Write it before the files themselves, so that a folder left by a killed run is
    already marked. The content has no time or version in it, so two runs that write the
    same files write the same manifest.

    Parameters
    ----------
    folder : str or path-like
    files : iterable of str
        File names (no folders) lidmelt writes there (the manifest is always listed).
    kind : str
        What the folder is, e.g. ``"fit result"``, ``"checkpoint"``, ``"survey site"``.
    patterns : sequence of str
        `fnmatch` patterns of further files (e.g. checkpoint records).
    folders : iterable of str
        Subfolders lidmelt writes there, each with a manifest of its own.
    """
    record = {"written_by": "lidmelt", "kind": kind, "files": sorted({*files, MANIFEST}),
              "patterns": list(patterns), "folders": sorted(set(folders))}
    write_text(Path(folder) / MANIFEST, json.dumps(record, indent=2) + "\n")


def read_manifest(folder: str | PathLike[str]) -> dict | None:
    """The manifest of `folder` (keys written_by, kind, files, patterns, folders), or None
    when it has none or one lidmelt did not write."""
    try:
        record = json.loads((Path(folder) / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or record.get("written_by") != "lidmelt":
        return None
    record.setdefault("patterns", [])
    record.setdefault("folders", [])
    lists = (record.get("files"), record["patterns"], record["folders"])
    if not all(isinstance(x, list) and all(isinstance(y, str) for y in x) for x in lists):
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


def _own_folder(name: str, record: dict) -> bool:
    """A listed subfolder, or its staging or set-aside folder (``.<name>.writing-*``)."""
    if name in record["folders"]:
        return True
    return any(name.startswith(f".{sub}.{side}-") for sub in record["folders"]
               for side in _SIDE)


def check_replaceable(path: str | PathLike[str], *, inputs: Iterable[str | PathLike[str]] = (),
                      what: str = "output folder", kind: str | None = None) -> list[Path]:
    """Check that `path` may be replaced; return what to remove.

    This is the one rule behind every "replace the old output" choice (``force``); see
    the module docstring.

    Parameters
    ----------
    path : str or path-like
        The output folder to replace.
    inputs : iterable of path-like
        The run's input files (study file, observation tables); a folder holding any of
        them is never replaced.
    what : str
        How messages name `path`.
    kind : str, optional
        The kind its manifest must name (a fit replaces only a fit result); None: any.

    Returns
    -------
    list of pathlib.Path
        The files lidmelt wrote in `path` and below, each subfolder after its content
        (empty when `path` does not exist). `remove_listed` removes them.

    Raises
    ------
    InputError
        `path` is a link, a file, the current folder or a parent of it, a folder with an
        input file inside, a folder lidmelt did not write, or one holding other files.
    """
    path = Path(path).absolute()
    if not path.exists() and not path.is_symlink():
        return []
    inputs = list(inputs)
    check_not_protected(path, inputs=inputs, what=what)
    refuse = _refusal(path, what)
    record = read_manifest(path)
    if record is None:
        if not any(path.iterdir()):
            return []
        writer = _WRITER.get(kind, "lidmelt")
        of_kind = "" if kind is None else f" of a {kind}"
        raise refuse(f"was not written by {writer} (it has no {MANIFEST}{of_kind}); lidmelt "
                     "replaces only folders it wrote itself")
    if kind is not None and record.get("kind") != kind:
        raise refuse(f"holds a lidmelt {record.get('kind')}, not a {kind}; "
                     f"{_WRITER.get(kind, 'lidmelt')} replaces only a {kind} folder it "
                     "wrote; choose another folder")
    return _own_entries(path, path, record, refuse)


def _own_entries(root: Path, folder: Path, record: dict, refuse) -> list[Path]:
    """The files (and, after their content, subfolders) of `folder` that `record` lists."""
    entries = []
    for entry in sorted(folder.iterdir()):
        shown = entry.relative_to(root).as_posix()
        if entry.is_dir() and not entry.is_symlink():
            sub = read_manifest(entry)
            if not _own_folder(entry.name, record) or (sub is None and any(entry.iterdir())):
                raise refuse(f"holds '{shown}', which lidmelt did not write there; move it "
                             "away or choose another folder")
            entries += [] if sub is None else _own_entries(root, entry, sub, refuse)
        elif not _own(entry.name, record):
            raise refuse(f"holds '{shown}', which lidmelt did not write there; move it "
                         "away or choose another folder")
        entries.append(entry)
    return entries


def check_not_protected(path: str | PathLike[str], *,
                        inputs: Iterable[str | PathLike[str]] = (),
                        what: str = "output folder") -> None:
    """The part of the rule that no manifest can lift, for an existing `path`.

    Raises
    ------
    InputError
        `path` is a link or a file, the current folder or a parent of it, or a folder
        holding one of `inputs`.
    """
    path = Path(path).absolute()
    refuse = _refusal(path, what)
    if path.is_symlink():
        raise refuse(f"is a symbolic link (to {os.readlink(path)}); lidmelt never writes "
                     "through or replaces a link: give the real folder or another one")
    if not path.is_dir():
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
                        what: str = "result folder", kind: str | None = None) -> None:
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
    kind : str, optional
        The kind of folder the command writes (see `check_replaceable`).

    Raises
    ------
    InputError
        The folder to hold `target` does not exist, `target` is a link, or `target` may
        not be replaced.
    OutputConflict
        `target` exists and `force` is false.
    """
    target = output_path(target, what=what)
    if not target.parent.is_dir():
        raise InputError(f"the folder to hold the {what} does not exist; create it first",
                         file=target.parent)
    if target.is_symlink():
        check_not_protected(target, what=what)  # names the link
    if target.exists():
        if not force:
            raise OutputConflict(f"the {what} already exists", reason="exists", file=target)
        check_replaceable(target, inputs=inputs, what=what, kind=kind)


def check_output_file(path: str | PathLike[str], *, force: bool,
                      what: str = "figure") -> Path:
    """The checks before writing the single file `path` (a PNG figure); return it.

    A file is replaced only with `force` and only if lidmelt wrote it (its PNG
    ``Software`` entry is ``_atomic.PNG_MARK``).

    Raises
    ------
    InputError
        The folder for it is missing, or `path` is a link, a folder or a file lidmelt did
        not write.
    OutputConflict
        `path` exists and `force` is false.
    """
    path = output_path(path, what=what)
    refuse = _refusal(path, what)
    if not path.parent.is_dir():
        raise InputError(f"the folder for the {what} does not exist; create it first",
                         file=path.parent)
    if path.is_symlink():
        raise refuse(f"is a symbolic link (to {os.readlink(path)}); lidmelt never writes "
                     "through or replaces a link")
    if path.is_dir():
        raise refuse("is a folder; give a file name")
    if path.exists():
        if not force:
            raise OutputConflict(f"the {what} already exists", reason="exists", file=path)
        if _png_software(path) != PNG_MARK:
            raise refuse("was not written by lidmelt; lidmelt replaces only files it "
                         "wrote itself")
    return path


def _png_software(path: Path) -> str | None:
    """The ``Software`` text entry of a PNG file (before its image data), or None."""
    try:
        with open(path, "rb") as handle:
            if handle.read(8) != b"\x89PNG\r\n\x1a\n":
                return None
            while len(head := handle.read(8)) == 8:
                size, kind = int.from_bytes(head[:4], "big"), head[4:]
                if kind in (b"IDAT", b"IEND") or size > 1 << 20:
                    return None
                data = handle.read(size + 4)[:size]
                key, _, value = data.partition(b"\0")
                if kind == b"tEXt" and key == b"Software":
                    return value.decode("latin-1")
    except OSError:
        return None
    return None


def _refusal(path: Path, what: str):
    def refuse(message: str) -> InputError:
        return InputError(f"the {what} {message}", file=path)
    return refuse


def _contains(folder: Path, other: Path) -> bool:
    return other == folder or folder in other.parents


def remove_listed(folder: Path, files: Iterable[Path]) -> None:
    """Remove `files` (from `check_replaceable`), then the folder if it is then empty.

    A subfolder in the list is removed only once empty; one that holds something new is
    left with it.
    """
    for file in files:
        with contextlib.suppress(FileNotFoundError):
            if file.is_dir() and not file.is_symlink():
                with contextlib.suppress(OSError):  # something new appeared: leave it
                    file.rmdir()
            else:
                file.unlink()
    with contextlib.suppress(OSError):
        Path(folder).rmdir()


def discard_checkpoint(partial: Path, *, force: bool, problem: str, kind: str,
                       inputs: Iterable[str | PathLike[str]] = (),
                       what: str = "checkpoint folder") -> None:
    """Before a fresh run: refuse a stored checkpoint `partial`, or with `force` remove it
    by the rule (`check_replaceable` of `kind`).

    Raises
    ------
    OutputConflict
        `partial` exists and `force` is false (`problem` says what is stored).
    InputError
        `partial` is not lidmelt's to remove.
    """
    if not (partial.exists() or partial.is_symlink()):
        return
    if not force:
        raise OutputConflict(problem, reason="checkpoint", file=partial)
    remove_listed(partial, check_replaceable(partial, inputs=inputs, what=what, kind=kind))


def written(shown: Path, write: Callable, *args, **kwargs):
    """Call `write`; an OSError (a full disk) becomes a `WriteError` naming `shown`."""
    try:
        return write(*args, **kwargs)
    except OSError as err:
        raise WriteError(shown, err) from err


def write_staged(staged: Path, files: Mapping[str, bytes], *, kind: str, shown: Path,
                 listed: Iterable[str] = (), folders: Iterable[str] = ()) -> None:
    """Fill the staging folder `staged` of `shown`: the manifest first, then `files`.

    Parameters
    ----------
    staged : pathlib.Path
        A new empty folder from ``_atomic.staged_folder(shown)``.
    files : mapping of str to bytes
        Name -> content, written in this order.
    kind : str
        The manifest's kind.
    shown : pathlib.Path
        The final folder, named by a `WriteError`.
    listed : iterable of str
        Further file names the manifest lists (files added later, e.g. a summary).
    folders : iterable of str
        Subfolders the manifest lists (each written later with its own manifest).
    """
    written(shown / MANIFEST, write_manifest, staged, [*files, *listed], kind=kind,
            folders=folders)
    for name, data in files.items():
        written(shown / name, write_bytes, staged / name, data)


def publish_folder(staged: Path, target: Path, *, inputs: Iterable[str | PathLike[str]] = (),
                   replace: bool = False, kind: str | None = None,
                   what: str = "result folder") -> None:
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
    kind, what : str
        See `check_replaceable`.
    """
    target = Path(target)
    old = None
    if replace and (target.exists() or target.is_symlink()):
        doomed = check_replaceable(target, inputs=inputs, what=what, kind=kind)
        old = target.with_name(f".{target.name}.old-{secrets.token_hex(4)}")
        os.rename(target, old)
        doomed = [old / p.relative_to(target) for p in doomed]
    os.rename(staged, target)
    if old is not None:
        remove_listed(old, doomed)


def remove_own_temporaries(folder: Path) -> None:
    """Remove the temporary files of unfinished writes in `folder` and the subfolders its
    manifests list (only names lidmelt was writing there: see `_atomic.temporary_target`).
    """
    record = read_manifest(folder)
    if record is None:
        return
    for entry in Path(folder).iterdir():
        if entry.is_dir() and not entry.is_symlink():
            if entry.name in record["folders"]:
                remove_own_temporaries(entry)
            continue
        target = temporary_target(entry.name)
        if target is not None and _listed(target, record) and not entry.is_symlink():
            entry.unlink(missing_ok=True)


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
    lock = _lock_path(output_path(target))
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
