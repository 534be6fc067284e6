"""Ctrl-C and SIGTERM held back while a sampler runs, and delivered at a point of our own.

A signal that arrives inside a library call becomes an exception wherever Python happens
to be: inside emcee's likelihood call (emcee reports it and re-raises), or inside a
network training step of the nested sampler, where scikit-learn catches
KeyboardInterrupt, warns, and carries on with a half-trained network. The run would then
finish with numbers that differ from an uninterrupted run. `signals_held` records the
signal instead; the sampler loop (or the likelihood, through `Held.stop_if_caught`) stops
at a step boundary it owns, and the signal is delivered when the block ends.
"""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Iterator

__all__ = ["Held", "signals_held"]

_HELD = (signal.SIGINT, signal.SIGTERM)


class Held(list):
    """The signals caught during a `signals_held` block (a list of signal numbers)."""

    def stop_if_caught(self) -> None:
        """Raise `_Stop` once a signal arrived (call it where stopping is safe)."""
        if self:
            raise _Stop


class _Stop(Exception):
    """Raised by `Held.stop_if_caught`; `signals_held` turns it into the held signal."""


@contextlib.contextmanager
def signals_held() -> Iterator[Held]:
    """Record SIGINT and SIGTERM during the block; deliver the first one when it ends.

    Yields
    ------
    Held
        Empty until a signal arrives. The block checks it (or calls
        `Held.stop_if_caught`, whose exception this block absorbs) and stops at a point
        where its state is whole.

    Notes
    -----
    On leaving, the previous handlers are restored and the first signal caught is raised
    again, so it has its usual effect (KeyboardInterrupt, or the command line's
    handler). If that handler returns without raising, KeyboardInterrupt is raised all
    the same: the block stopped early and its result is incomplete, so it must never be
    returned as if finished. A signal whose inherited handler is SIG_IGN (a background
    job of a script, ``nohup``) or is not a Python handler is left as it is. Signals can
    only be caught in the main thread; elsewhere the block runs unguarded.
    """
    caught = Held()
    if threading.current_thread() is not threading.main_thread():
        yield caught
        return
    previous = {}
    for number in _HELD:
        handler = signal.getsignal(number)
        if handler is None or handler == signal.SIG_IGN:
            continue
        previous[number] = handler
        signal.signal(number, lambda signum, frame: caught.append(signum))
    try:
        yield caught
    except _Stop:
        if not caught:  # only `stop_if_caught` raises it, after a signal
            raise
    finally:
        for number, handler in previous.items():
            signal.signal(number, handler)
    if caught:
        signal.raise_signal(caught[0])
        raise KeyboardInterrupt
