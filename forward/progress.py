"""How the forward model reports its long waits, without printing anything itself.

Building a melting table takes from a second (dry) to minutes (across water) the first
time a lidmelt version runs, and a process may also wait while another one builds the same
table (see ``_cache.building``). The forward package does no I/O besides its table cache,
so it does not print: it sends `TableProgress` events to whoever listens, through this
module-level hook. Callers that talk to people (the command line, and the library's
``fit``, ``compare`` and ``survey`` unless ``quiet``) listen with `listening`:

>>> from lidmelt.forward import progress
>>> seen = []
>>> with progress.listening(seen.append):
...     progress.report(progress.TableProgress("katz2003-wet", "building", 0.5, 10.0))
>>> seen[0].remaining
10.0

Only the innermost listener hears an event, so a library call nested in a command (a
scenario's ``fit`` inside ``compare``) does not print twice. Without a listener an event
costs one list lookup. The hook is per process: a survey's worker processes do not report
(the survey builds its table in the main process first).
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

__all__ = ["STAGES", "BuildClock", "TableProgress", "has_listener", "listening", "report"]

#: ``waiting``: another process is building the table (``done`` is 0); ``building``: the
#: paths are being integrated; ``saving``: the path facts are computed and the table is
#: written to the cache; ``done``: the table is ready.
STAGES = ("waiting", "building", "saving", "done")


@dataclass(frozen=True)
class TableProgress:
    """One report on a table being built, or waited for.

    Attributes
    ----------
    table : str
        Which table, ``"<parameterization>-<dry|wet>"`` (``wet``: the one across water).
    stage : str
        One of `STAGES`.
    done : float
        Fraction of the integration work done, 0-1 (weighted by paths x pressure steps).
    elapsed : float
        Seconds since the build (or the wait) began.
    path : pathlib.Path or None
        The cache file the table goes to, or None when the disk cache is off.
    """

    table: str
    stage: str
    done: float
    elapsed: float
    path: Path | None = None

    @property
    def remaining(self) -> float | None:
        """Estimated seconds left of the integration, from the pace so far (s); None
        until some work is done and while waiting for another process."""
        if self.stage != "building" or not 0.0 < self.done:
            return None
        return self.elapsed * (1.0 - self.done) / self.done


_listeners: list[Callable[[TableProgress], None]] = []


@contextlib.contextmanager
def listening(callback: Callable[[TableProgress], None]) -> Iterator[None]:
    """Send the table events of this block to ``callback`` (and not to outer listeners)."""
    _listeners.append(callback)
    try:
        yield
    finally:
        _listeners.remove(callback)


def has_listener() -> bool:
    """Whether anyone listens now (a caller may then leave its own printer out)."""
    return bool(_listeners)


def report(event: TableProgress) -> None:
    """Hand ``event`` to the innermost listener, if any."""
    if _listeners:
        _listeners[-1](event)


class BuildClock:
    """Reports a build's progress at most every ``interval`` seconds (and its ends).

    Parameters
    ----------
    table : str
        Name for `TableProgress.table`.
    path : pathlib.Path or None
        Cache file of the table.
    interval : float
        Least time between two ``building`` reports (s).
    """

    def __init__(self, table: str, path: Path | None, *, interval: float = 0.5) -> None:
        self.table, self.path, self.interval = table, path, interval
        self.started = time.monotonic()
        self.last = -float("inf")
        self.reported = False  # whether any event went out

    def __call__(self, stage: str, done: float = 0.0) -> None:
        """Report ``stage`` with ``done`` of the work finished (throttled while building)."""
        if not _listeners:
            return
        now = time.monotonic()
        steady = stage == "waiting" or (stage == "building" and 0.0 < done < 1.0)
        if steady and now - self.last < self.interval:
            return
        self.last, self.reported = now, True
        report(TableProgress(self.table, stage, float(done), now - self.started, self.path))
