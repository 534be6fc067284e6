"""Ensemble MCMC with autocorrelation-based stopping, chunked HDF5 storage and resume.

The sampler is emcee's affine-invariant ensemble (Goodman & Weare 2010; Foreman-Mackey
et al. 2013) with ``vectorize=True``: the log-probability receives all proposed walkers of
a half-ensemble at once as an array of shape ``(n, ndim)`` and returns ``(n,)`` or, with
``k`` derived quantities ("blobs"), ``(n, 1 + k)``.

Run length is set by the integrated autocorrelation time tau (Sokal 1997; emcee's
estimator with automatic windowing, c = 5). Every ``check_interval`` steps the chain is
assessed: the first ``2 * max(tau)`` steps are discarded as burn-in (common practice,
emcee documentation), tau is re-estimated on the rest, and the run stops when the kept
chain is at least ``tau_multiple * max(tau)`` steps long and the effective sample size
``kept_steps * nwalkers / tau`` reaches ``ess_target`` for every parameter. Otherwise it
stops at ``max_steps`` with a `NotConvergedWarning` and ``converged = False``.

Storage uses emcee's HDF5 backend layout (group ``"mcmc"``: datasets ``chain``,
``log_prob``, ``blobs``, ``accepted``; attributes ``iteration`` and
``random_state_0..4``), so ``emcee.backends.HDFBackend(path, read_only=True)`` reads the
file. Rows are appended once per check interval instead of once per step (emcee's own
backend opens the file every step, about 4 ms a step here). ``iteration`` is updated
last, so an interrupted write never exposes half-written rows. A resumed run restarts
from the last stored state and generator state, and so continues exactly as the
uninterrupted run would have.
"""

from __future__ import annotations

import contextlib
import math
import signal
import threading
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from os import PathLike
from pathlib import Path

import emcee
import h5py
import numpy as np
from tqdm.auto import tqdm

from ._errors import InputError, NotConvergedWarning

__all__ = [
    "ChainResult", "assess_chain", "default_moves", "read_chain", "run_chain", "write_chain",
]

_GROUP = "mcmc"


@dataclass(frozen=True)
class ChainResult:
    """The stored chain of one sampler run and its convergence assessment.

    Attributes
    ----------
    chain : ndarray, shape (nsteps, nwalkers, ndim)
        Walker positions at every step (emcee's axis order).
    log_prob : ndarray, shape (nsteps, nwalkers)
        Log-posterior at those positions.
    blobs : ndarray, shape (nsteps, nwalkers, k) or None
        Derived quantities returned by the log-probability (NaN where rejected).
    accepted : ndarray, shape (nwalkers,)
        Number of accepted proposals per walker.
    assessment : dict
        Output of `assess_chain` for the whole chain.
    resumed_from : int
        Number of steps read back from the file when resuming (0 for a fresh run).
    random_state : tuple or None
        emcee generator state after the last step (lets `write_chain` files be resumed).
    """

    chain: np.ndarray
    log_prob: np.ndarray
    blobs: np.ndarray | None
    accepted: np.ndarray
    assessment: dict = field(default_factory=dict)
    resumed_from: int = 0
    random_state: tuple | None = None

    @property
    def nsteps(self) -> int:
        """Number of steps in the chain."""
        return int(self.chain.shape[0])

    @property
    def acceptance(self) -> np.ndarray:
        """Acceptance fraction per walker, shape (nwalkers,)."""
        return self.accepted / max(self.nsteps, 1)


def default_moves() -> list:
    """Proposal mixture: 90 % differential evolution, 10 % stretch.

    Differential-evolution moves (ter Braak 2006; Nelson et al. 2014) propose along the
    difference of two other walkers and so follow the correlated, slightly curved
    posteriors of Tp, lid and solidus offset. On the demo study they gave an integrated
    autocorrelation time of about 9 steps against about 33 for the stretch move alone
    and 11-13 with a snooker share (measured with 32 and 48 walkers; see
    benchmarks/inversion_speed.py). The small stretch share lets the ensemble change its
    scale, which differences of walkers alone cannot do quickly after a MAP start.
    """
    return [(emcee.moves.DEMove(), 0.9), (emcee.moves.StretchMove(), 0.1)]


def assess_chain(
    chain: np.ndarray, *, tau_multiple: float = 50.0, ess_target: float = 2000.0
) -> dict:
    """Estimate autocorrelation times, burn-in and effective sample size of a chain.

    Parameters
    ----------
    chain : ndarray, shape (nsteps, nwalkers, ndim)
        Walker positions.
    tau_multiple : float
        Required kept-chain length in units of the largest autocorrelation time.
    ess_target : float
        Required effective sample size for every parameter.

    Returns
    -------
    dict
        ``tau`` (ndim,) in steps, ``discard`` (burn-in steps), ``ess`` (ndim,),
        ``kept_steps``, ``tau_multiple_reached`` (kept steps / max tau) and
        ``converged`` (bool).

    Notes
    -----
    ESS = kept_steps * nwalkers / tau (Sokal 1997; emcee documentation). Walkers of an
    ensemble are not independent chains, so this is the standard emcee estimate, not an
    exact count.
    """
    nsteps, nwalkers, _ = chain.shape
    if nsteps < 4:
        ndim = chain.shape[2]
        return {
            "tau": np.full(ndim, np.nan), "discard": 0, "ess": np.zeros(ndim),
            "kept_steps": nsteps, "tau_multiple_reached": 0.0, "converged": False,
        }
    tau_all = emcee.autocorr.integrated_time(chain, tol=0, quiet=True)
    discard = int(min(math.ceil(2.0 * np.max(tau_all)), nsteps // 2))
    kept = chain[discard:]
    tau = emcee.autocorr.integrated_time(kept, tol=0, quiet=True)
    tau = np.maximum(tau, 1.0)  # tau < 1 (anticorrelated moves) would overstate the ESS
    kept_steps = nsteps - discard
    ess = kept_steps * nwalkers / tau
    reached = kept_steps / float(np.max(tau))
    return {
        "tau": tau,
        "discard": discard,
        "ess": ess,
        "kept_steps": kept_steps,
        "tau_multiple_reached": reached,
        "converged": bool(reached >= tau_multiple and np.min(ess) >= ess_target),
    }


def read_chain(path: str | PathLike[str]) -> tuple[ChainResult, dict]:
    """Read a chain file written by `run_chain`.

    Parameters
    ----------
    path : str or path-like
        The ``chain.h5`` file.

    Returns
    -------
    result : ChainResult
        Chain, log-probability, blobs and acceptance counts (no assessment).
    meta : dict
        The run attributes stored with the chain (``meta_*`` attributes).
    """
    with h5py.File(path, "r") as f:
        g = f[_GROUP]
        n = int(g.attrs["iteration"])
        chain = g["chain"][:n]
        log_prob = g["log_prob"][:n]
        blobs = g["blobs"][:n] if "blobs" in g else None
        accepted = g["accepted"][...]
        state = [v for k, v in sorted(g.attrs.items()) if k.startswith("random_state_")]
        meta = {k[5:]: _from_attr(v) for k, v in g.attrs.items() if k.startswith("meta_")}
    random_state = tuple(state) if state else None
    return ChainResult(chain, log_prob, blobs, accepted, random_state=random_state), meta


def run_chain(
    log_prob: Callable[[np.ndarray], np.ndarray],
    initial: np.ndarray,
    *,
    seed: int,
    nblobs: int = 0,
    ess_target: float = 2000.0,
    tau_multiple: float = 50.0,
    max_steps: int = 20000,
    check_interval: int = 250,
    path: str | PathLike[str] | None = None,
    resume: bool = False,
    meta: dict | None = None,
    moves: Sequence | None = None,
    quiet: bool = False,
    names: Sequence[str] | None = None,
) -> ChainResult:
    """Run the ensemble sampler until converged or `max_steps`, storing the chain.

    Parameters
    ----------
    log_prob : callable
        Vectorised log-posterior: ``(n, ndim)`` array -> ``(n,)`` or ``(n, 1 + nblobs)``.
        Must return ``-inf`` (never NaN) outside the support.
    initial : ndarray, shape (nwalkers, ndim)
        Starting positions (ignored when resuming).
    seed : int
        Seed of emcee's generator for a fresh run.
    nblobs : int
        Number of derived quantities returned after the log-probability.
    ess_target, tau_multiple : float
        Stopping rule, see `assess_chain`.
    max_steps : int
        Step cap; reaching it without convergence emits `NotConvergedWarning`.
    check_interval : int
        Steps between convergence checks and between writes to `path`.
    path : str or path-like, optional
        HDF5 file for the chain (emcee backend layout). None keeps it in memory.
    resume : bool
        Continue the chain stored in `path` instead of starting anew.
    meta : dict, optional
        Scalars/strings stored as attributes; on resume they must match the file.
    moves : sequence, optional
        emcee moves; default `default_moves`.
    quiet : bool
        Hide the progress bar.
    names : sequence of str, optional
        Parameter names, shown in the progress bar.

    Returns
    -------
    ChainResult

    Raises
    ------
    InputError
        When resuming from a missing file or one written for a different run.
    """
    meta = dict(meta or {})
    initial = np.asarray(initial, dtype=float)
    if resume:
        previous, state = _load_resume_state(path, meta, initial.shape)
    else:
        previous, state = None, emcee.State(initial.copy())
        if path is not None:
            _create_file(path, initial.shape, nblobs, meta)
    sampler = emcee.EnsembleSampler(
        *initial.shape, log_prob, vectorize=True,
        moves=list(moves) if moves is not None else default_moves(),
    )
    if previous is None:
        sampler.random_state = np.random.RandomState(seed).get_state()
    rule = _Rule(ess_target, tau_multiple, max_steps, check_interval)
    parts = [] if previous is None else [previous]
    state, assessment = _loop(sampler, state, parts, rule, path=path, quiet=quiet,
                              names=names)
    done = sum(p.nsteps for p in parts)
    result = _concatenate(parts, assessment, 0 if previous is None else previous.nsteps,
                          state.random_state)
    if not assessment["converged"]:
        message = _not_converged_message(assessment, done, tau_multiple, ess_target)
        warnings.warn(NotConvergedWarning(message, tau=assessment["tau"], steps=done),
                      stacklevel=2)
    return result


@dataclass(frozen=True)
class _Rule:
    """The stopping rule and check cadence of a run."""

    ess_target: float
    tau_multiple: float
    max_steps: int
    check_interval: int

    def done(self, assessment, steps: int) -> bool:
        return assessment is not None and (assessment["converged"] or steps >= self.max_steps)


def _loop(sampler, state, parts, rule: _Rule, *, path, quiet, names):
    """Advance chunk by chunk (store, assess) until the rule says stop.

    A resumed chain that already satisfies the rule is not extended, so resuming after
    an interruption between the last write and the end of the run changes nothing.
    """
    done = sum(p.nsteps for p in parts)
    assessment = _assess_parts(parts, rule) if parts else None
    bar = tqdm(total=max(done, rule.check_interval), initial=done, disable=quiet,
               desc="sampling", unit="step", leave=False)
    try:
        while not rule.done(assessment, done):
            chunk = min(rule.check_interval - done % rule.check_interval,
                        rule.max_steps - done)
            state, part = _advance(sampler, state, chunk, bar)
            parts.append(part)
            done += chunk
            if path is not None:
                _append(path, part, state.random_state)
            assessment = _assess_parts(parts, rule)
            _show(bar, assessment, names, _expected_steps(assessment, sampler.nwalkers, rule,
                                                          done))
    finally:
        bar.close()
    return state, assessment


def _advance(sampler, state, nsteps: int, bar) -> tuple[emcee.State, ChainResult]:
    """Take `nsteps` steps from `state`; return the final state and the new rows.

    emcee's own storage is off (the rows are kept here); a walker counts as accepted
    when its position changed, which for continuous proposals is exactly acceptance.
    """
    nwalkers, ndim = state.coords.shape
    chain = np.empty((nsteps, nwalkers, ndim))
    log_prob = np.empty((nsteps, nwalkers))
    blobs = None
    accepted = np.zeros(nwalkers)
    before = state.coords.copy()
    for i, state in enumerate(sampler.sample(state, iterations=nsteps, store=False)):
        chain[i] = state.coords
        log_prob[i] = state.log_prob
        accepted += np.any(state.coords != before, axis=1)
        before = state.coords.copy()
        if state.blobs is not None:
            if blobs is None:
                blobs = np.empty((nsteps, nwalkers) + np.shape(state.blobs)[1:])
            blobs[i] = state.blobs
        bar.update(1)
    return state, ChainResult(chain, log_prob, blobs, accepted)


def _assess_parts(parts, rule: _Rule) -> dict:
    chain = np.concatenate([p.chain for p in parts], axis=0)
    return assess_chain(chain, tau_multiple=rule.tau_multiple, ess_target=rule.ess_target)


def _concatenate(parts, assessment, resumed_from, random_state) -> ChainResult:
    blobs = None
    if parts[0].blobs is not None:
        blobs = np.concatenate([p.blobs for p in parts], axis=0)
    return ChainResult(
        chain=np.concatenate([p.chain for p in parts], axis=0),
        log_prob=np.concatenate([p.log_prob for p in parts], axis=0),
        blobs=blobs,
        accepted=np.sum([p.accepted for p in parts], axis=0),
        assessment=assessment,
        resumed_from=resumed_from,
        random_state=tuple(random_state),
    )


def _expected_steps(assessment, nwalkers, rule: _Rule, done) -> int:
    """Chain length the stopping rule will need if tau stays at its current estimate."""
    tau = float(np.nanmax(assessment["tau"])) if np.any(np.isfinite(assessment["tau"])) else 0
    kept = max(rule.tau_multiple * tau, rule.ess_target * tau / nwalkers)
    return int(min(rule.max_steps, max(done, assessment["discard"] + math.ceil(kept))))


def _show(bar, assessment, names, expected: int) -> None:
    if bar.disable:
        return
    bar.total = expected  # the bar's end moves with the autocorrelation estimate
    tau = assessment["tau"]
    worst = "" if names is None or np.all(np.isnan(tau)) else names[int(np.nanargmax(tau))]
    bar.set_postfix_str(
        f"tau_max={np.nanmax(tau):.1f} ({worst}) ESS_min={np.min(assessment['ess']):.0f}",
        refresh=False,
    )


def _not_converged_message(assessment, steps, tau_multiple, ess_target) -> str:
    return (
        f"sampler NOT converged after {steps} steps (the step cap): kept chain is "
        f"{assessment['tau_multiple_reached']:.1f} x tau (need {tau_multiple:g}) and the "
        f"smallest effective sample size is {np.min(assessment['ess']):.0f} (need "
        f"{ess_target:g}); treat the results with caution or raise sampler.max_steps"
    )


def write_chain(path: str | PathLike[str], result: ChainResult, *, meta: dict | None = None,
                ) -> None:
    """Write a whole chain to `path` in the layout `run_chain` uses (and emcee reads).

    Parameters
    ----------
    path : str or path-like
        Output HDF5 file (overwritten).
    result : ChainResult
        The chain; its `random_state` is stored so the file can be resumed.
    meta : dict, optional
        Run attributes stored as ``meta_*`` attributes.
    """
    nblobs = 0 if result.blobs is None else int(np.prod(result.blobs.shape[2:]))
    _create_file(path, result.chain.shape[1:], nblobs, meta or {})
    _append(path, result, result.random_state)


def _create_file(path, shape, nblobs, meta) -> None:
    nwalkers, ndim = shape
    with h5py.File(path, "w") as f:
        g = f.create_group(_GROUP)
        g.attrs["version"] = emcee.__version__
        g.attrs["nwalkers"] = nwalkers
        g.attrs["ndim"] = ndim
        g.attrs["has_blobs"] = nblobs > 0
        g.attrs["iteration"] = 0
        for key, value in meta.items():
            g.attrs[f"meta_{key}"] = _to_attr(value)
        g.create_dataset("accepted", data=np.zeros(nwalkers))
        chunks = (64, nwalkers, ndim)
        g.create_dataset("chain", (0, nwalkers, ndim), maxshape=(None, nwalkers, ndim),
                         dtype="f8", chunks=chunks)
        g.create_dataset("log_prob", (0, nwalkers), maxshape=(None, nwalkers), dtype="f8",
                         chunks=chunks[:2])
        if nblobs:
            g.create_dataset("blobs", (0, nwalkers), maxshape=(None, nwalkers),
                             dtype=np.dtype(("f8", (nblobs,))), chunks=chunks[:2])


@contextlib.contextmanager
def _deferred_interrupt():
    """Hold back Ctrl-C (SIGINT) and SIGTERM until the block is done, then raise
    KeyboardInterrupt.

    Rows, acceptance counts, generator state and ``iteration`` must change together, or
    a resumed chain would pair old positions with a newer generator state.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    held = (signal.SIGINT, signal.SIGTERM)
    previous = {s: signal.signal(s, lambda signum, frame: caught.append(signum)) for s in held}
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)
    if caught:
        raise KeyboardInterrupt


def _open_for_append(path, *, tries: int = 10, wait: float = 0.5) -> h5py.File:
    """Open the chain file, waiting a little if another process holds its HDF5 lock."""
    for _ in range(tries - 1):
        try:
            return h5py.File(path, "a")
        except BlockingIOError:
            time.sleep(wait)
    return h5py.File(path, "a")


def _append(path, part: ChainResult, random_state) -> None:
    """Append rows; `iteration` is written last so a crash never exposes partial rows."""
    with _deferred_interrupt(), _open_for_append(path) as f:
        g = f[_GROUP]
        start = int(g.attrs["iteration"])
        stop = start + part.nsteps
        names = ["chain", "log_prob"] + (["blobs"] if part.blobs is not None else [])
        for name, rows in zip(names, (part.chain, part.log_prob, part.blobs), strict=False):
            g[name].resize(stop, axis=0)
            g[name][start:stop] = rows
        g["accepted"][:] = g["accepted"][...] + part.accepted
        for i, value in enumerate(random_state or ()):
            g.attrs[f"random_state_{i}"] = value
        f.flush()
        g.attrs["iteration"] = stop


def _load_resume_state(path, meta, shape) -> tuple[ChainResult, emcee.State]:
    if path is None or not Path(path).is_file():
        raise InputError(
            "there is no interrupted run to resume here; run again without --resume",
            file=path,
        )
    try:
        previous, stored = read_chain(path)
    except (OSError, KeyError) as err:
        raise InputError(
            f"the stored chain cannot be read ({err}); start again with --force",
            file=path,
        ) from err
    for key, value in meta.items():
        if stored.get(key) != _from_attr(_to_attr(value)):
            raise InputError(
                f"the stored run has {key} = {stored.get(key)!r} but this run has "
                f"{value!r}; resume with the same study and seed, or start again with --force",
                file=path,
            )
    if previous.nsteps == 0 or previous.chain.shape[1:] != tuple(shape):
        raise InputError(
            "the stored chain is empty or has a different number of walkers or "
            "parameters; start again with --force",
            file=path,
        )
    blobs = None if previous.blobs is None else previous.blobs[-1]
    state = emcee.State(previous.chain[-1].copy(), log_prob=previous.log_prob[-1].copy(),
                        blobs=blobs, random_state=previous.random_state)
    return previous, state


def _to_attr(value):
    if isinstance(value, (list, tuple)):
        return np.array([str(v) for v in value], dtype=h5py.string_dtype())
    return value


def _from_attr(value):
    if isinstance(value, np.ndarray) and value.dtype.kind in "OSU":
        return tuple(v.decode() if isinstance(v, bytes) else str(v) for v in value)
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.generic):
        return value.item()
    return value
