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

import math
import time

import numpy as np
from tqdm.auto import tqdm

__all__ = ["SamplingProgress", "expected_steps", "format_duration"]


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
        self.bar = tqdm(total=100, disable=quiet, leave=False,
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
