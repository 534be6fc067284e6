"""The sampling progress bar: a percentage that never goes back, and what it waits for.

The end of a run is not known in advance: the stopping rule waits until the kept chain is
``tau_multiple`` autocorrelation times long and every effective sample size reaches its
target, and tau is only known from the chain so far. After each convergence check the
expected total length is re-estimated from the current tau (`expected_steps`); between
checks the bar advances step by step toward it. The percentage is the largest of
steps / expected total and steps / step cap seen so far, so it never decreases when the
estimate of tau grows, and stays below 100 % until the run stops.

The bar shows the smallest effective sample size against its target, the kept chain's
length in autocorrelation times against the rule's, and the time left at the current
speed for the current estimate (or until the step cap, whichever is first).
"""

from __future__ import annotations

import contextlib
import math
import sys
import time

import numpy as np

__all__ = ["SamplingProgress", "TablePrinter", "expected_steps", "format_duration",
           "table_progress"]


def _bar(*args, **kwargs):
    """tqdm's bar, imported on first use (``lidmelt column`` starts without it)."""
    from tqdm.auto import tqdm as bar

    return bar(*args, **kwargs)


def _write(line: str) -> None:
    """A whole line on stderr that does not break a bar being drawn."""
    from tqdm.auto import tqdm as bar

    bar.write(line, file=sys.stderr)


def expected_steps(assessment: dict, nwalkers: int, rule) -> int:
    """Chain length the stopping rule will need if tau stays at its current estimate."""
    tau = np.asarray(assessment["tau"], float)
    if not np.any(np.isfinite(tau)):
        return int(rule.max_steps)
    worst = float(np.nanmax(tau))
    kept = max(rule.tau_multiple * worst, rule.ess_target * worst / nwalkers)
    return int(min(rule.max_steps, assessment["discard"] + math.ceil(kept)))


def format_duration(seconds: float) -> str:
    """Rounded duration in words: ``"40 s"``, ``"3 min"``, ``"1 h 20 min"``."""
    seconds = max(0.0, float(seconds))
    if seconds < 90:
        return f"{max(1, round(seconds))} s"
    minutes = round(seconds / 60)
    if minutes < 90:
        return f"{minutes} min"
    return f"{minutes // 60} h {minutes % 60} min"


class SamplingProgress:
    """The tqdm bar of one sampler run (see the module docstring).

    Parameters
    ----------
    rule : sampler._Rule
        Stopping rule (targets, step cap, check interval).
    nwalkers : int
    start : int
        Steps already taken (a resumed run starts there).
    quiet : bool
        Show nothing.
    """

    def __init__(self, rule, nwalkers: int, start: int, *, quiet: bool) -> None:
        self.rule, self.nwalkers = rule, nwalkers
        self.expected = int(rule.max_steps)
        self.percent = 0.0
        self.first, self.started = start, time.monotonic()
        self.status = f"first convergence check at step {self._next_check(start)}"
        self.checks = 0
        self.bar = _bar(total=100, disable=quiet, leave=False,
                        bar_format="sampling {percentage:3.0f}%|{bar:20}| {desc}")
        self.step(start)

    def _next_check(self, done: int) -> int:
        interval = self.rule.check_interval
        return min(self.rule.max_steps, (done // interval + 1) * interval)

    def checked(self, assessment: dict, done: int) -> None:
        """Take in the assessment made at step `done`."""
        self.expected = max(done, expected_steps(assessment, self.nwalkers, self.rule))
        self.checks += 1
        ess = np.asarray(assessment["ess"], float)
        ess_min = f"{np.min(ess):.0f}" if np.all(np.isfinite(ess)) else "?"
        reached = assessment["tau_multiple_reached"]
        reached = f"{reached:.1f}" if np.isfinite(reached) else "?"
        self.status = (f"ESS {ess_min}/{self.rule.ess_target:g}, chain {reached}/"
                       f"{self.rule.tau_multiple:g} tau")
        self.step(done)

    def step(self, done: int) -> None:
        """Advance to `done` steps."""
        if self.bar.disable:
            return
        fraction = max(done / max(self.expected, 1), done / self.rule.max_steps)
        self.percent = max(self.percent, min(99.0, 100.0 * fraction))
        self.bar.n = int(self.percent)
        self.bar.set_description_str(f"step {done}, {self.status}, {self._time_left(done)}",
                                     refresh=False)
        self.bar.update(0)

    def _time_left(self, done: int) -> str:
        taken = done - self.first
        elapsed = time.monotonic() - self.started
        if not self.checks or taken <= 0 or elapsed <= 0:
            return "time left known after that check"
        remaining = max(0, min(self.expected, self.rule.max_steps) - done)
        cap = " (step cap)" if self.expected >= self.rule.max_steps else ""
        return f"~{format_duration(remaining * elapsed / taken)} left{cap}"

    def close(self) -> None:
        self.bar.close()


def _table_words(table: str) -> str:
    """``"katz2003-wet"`` -> ``"katz2003 melting table across water"``."""
    name, _, kind = table.rpartition("-")
    return f"{name} melting table {'across water' if kind == 'wet' else 'for a dry source'}"


class TablePrinter:
    """Shows `forward.progress.TableProgress` events on stderr: a bar with the time left
    while a melting table is built, a line while another process builds it, and one line
    when it is ready (how long it took, where it is kept)."""

    def __init__(self) -> None:
        self.bar = None
        self.waited = None

    def __call__(self, event) -> None:
        if event.stage == "waiting":
            self._waiting(event)
        elif event.stage in ("building", "saving"):
            self._building(event)
        else:
            self._done(event)

    def _waiting(self, event) -> None:
        if self.waited is None:
            self.waited = _bar(total=None, leave=False, bar_format="{desc}")
        self.waited.set_description_str(
            f"lidmelt: waiting for another lidmelt process to build the "
            f"{_table_words(event.table)} ({format_duration(event.elapsed)} so far)")

    def _building(self, event) -> None:
        if self.waited is not None:
            self.waited.close()
            self.waited = None
        if self.bar is None:
            self.bar = _bar(total=100, leave=False, bar_format=(
                f"lidmelt: building the {_table_words(event.table)} (once per "
                "lidmelt version) {percentage:3.0f}%|{bar:20}| {desc}"))
        left = event.remaining
        if event.stage == "saving":
            words = "writing it to the cache"
        elif left is None:
            words = "time left known shortly"
        else:
            words = f"~{format_duration(left)} left"
        self.bar.n = int(100 * event.done)
        self.bar.set_description_str(words)  # refreshes

    def _done(self, event) -> None:
        for bar in (self.bar, self.waited):
            if bar is not None:
                bar.close()
        if self.waited is not None and self.bar is None:
            _write(f"lidmelt: another process built the {_table_words(event.table)}; "
                   f"waited {format_duration(event.elapsed)}")
        if self.bar is not None:
            where = f"; kept in {event.path.parent}" if event.path is not None else ""
            _write(f"lidmelt: built the {_table_words(event.table)} in "
                   f"{format_duration(event.elapsed)}{where}")
        self.bar = self.waited = None


def table_progress(*, quiet: bool):
    """Context manager: print table builds and waits on stderr (`TablePrinter`), unless
    ``quiet`` or someone already listens (`forward.progress.listening`)."""
    from ...forward import progress

    if quiet or progress.has_listener():
        return contextlib.nullcontext()
    return progress.listening(TablePrinter())
