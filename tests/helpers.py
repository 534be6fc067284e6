"""Shared test pieces: small studies, a simulated full disk, output comparison."""

from __future__ import annotations

import contextlib
import errno
import os
import shutil
import signal
from pathlib import Path

from lidmelt import _atomic, demo_data
from lidmelt.inversion import OUTPUT_FILES

#: The message of a full disk ("No space left on device").
FULL = os.strerror(errno.ENOSPC)

DEMO = demo_data.study_path().parent

#: A sampler section that converges in a few hundred steps (statistics are not tested).
QUICK = ("walkers = 16\nseed = 4\nstart = \"map\"\ness_target = 300\ntau_multiple = 25\n"
         "check_interval = 50\n")


def small_study(folder: Path, *, sampler: str = "", basalts: str | None = None,
                parameters: str | None = None, extra: str = "", crust: str | None = None,
                replace: tuple[str, str] | None = None) -> Path:
    """A copy of the demo study in `folder` with a cheaper sampler (and optional edits).

    `replace` is an (old, new) text replacement in the study file.
    """
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in (("crust.csv", crust), ("basalts.csv", basalts)):
        if text is None:
            shutil.copy(DEMO / name, folder / name)
        else:
            (folder / name).write_text(text)
    text = (DEMO / "study.toml").read_text()
    if replace is not None:
        assert replace[0] in text, replace[0]  # guards the test itself
        text = text.replace(*replace)
    head, _ = text.split("[sampler]")
    if parameters is not None:
        before, rest = head.split("[parameters]")
        _, after = rest.split("[[observations]]", 1)
        head = f"{before}[parameters]\n{parameters}\n[[observations]]{after}"
    path = folder / "study.toml"
    path.write_text(head + extra + "[sampler]\n" + (sampler or QUICK))
    return path


class DiskFull:
    """Stand-in for lidmelt's one low-level writer (``lidmelt._atomic._write_all``): the
    `nth` write whose target name starts with `prefix` stores half its bytes and then
    fails as a full disk does."""

    def __init__(self, prefix: str, nth: int = 1) -> None:
        self.prefix, self.nth, self.seen = prefix, nth, 0

    def __call__(self, handle, data: bytes) -> None:
        name = Path(handle.name).name  # an append goes to the file itself
        target = _atomic.temporary_target(name) or name
        if target.startswith(self.prefix):
            self.seen += 1
            if self.seen == self.nth:
                handle.write(data[: len(data) // 2])
                raise OSError(errno.ENOSPC, FULL)
        handle.write(data)


def assert_same_outputs(folder: Path, reference: Path) -> None:
    """Every output file byte for byte, except run.json (times, command, resume step)."""
    for name in OUTPUT_FILES:
        if name != "run.json":
            assert (folder / name).read_bytes() == (reference / name).read_bytes(), name


@contextlib.contextmanager
def own_signal_handlers():
    """Python's own Ctrl-C handler for SIGINT and SIGTERM, whatever the test process
    inherited (a background or ``nohup`` pytest ignores SIGINT; an xdist worker may have
    its own); the inherited ones come back afterwards."""
    previous = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM)}
    signal.signal(signal.SIGINT, signal.default_int_handler)
    signal.signal(signal.SIGTERM, signal.default_int_handler)
    try:
        yield
    finally:
        for number, handler in previous.items():
            signal.signal(number, handler)


def cli_refused(capsys, *argv) -> str:
    """Run the command line; assert exit 2 with one stderr line and no traceback."""
    from lidmelt.cli import main

    code = main(list(argv))
    err = capsys.readouterr().err
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err, err
    return err
