"""Ensemble MCMC with autocorrelation-based stopping, a whole-record checkpoint and resume.

The sampler is emcee's affine-invariant ensemble (Goodman & Weare 2010; Foreman-Mackey
et al. 2013) with ``vectorize=True``: the log-probability receives all proposed walkers of
a half-ensemble at once as an array of shape ``(n, ndim)`` and returns ``(n,)`` or, with
``k`` derived quantities ("blobs"), ``(n, 1 + k)``.

Run length is set by the integrated autocorrelation time tau (Sokal 1997; emcee's
estimator with automatic windowing, c = 5). Every ``check_interval`` steps (counted from
the start of the chain) the chain is assessed (`assess_chain`). Burn-in is the longer of
``2 * max(tau)`` steps (common practice, emcee documentation) and the end of the last
block in which a walker is out of the bulk (`stragglers`), at most half the chain; tau
is re-estimated on the rest, and the run stops when

- no walker is out of the bulk in the kept chain,
- the kept chain is at least ``tau_multiple * max(tau)`` steps long,
- the effective sample size ``kept_steps * nwalkers / tau`` reaches ``ess_target`` for
  every parameter,
- every split R-hat is close to what a converged ensemble of that length gives, and
- the mean acceptance fraction is at least `MIN_ACCEPTANCE`.

Otherwise it stops at ``max_steps`` with a `NotConvergedWarning` and ``converged = False``.

The chain is kept by emcee itself, in `inversion.fitting.checkpoint.CheckpointBackend` (passed
as ``backend=``), which writes a complete record to the checkpoint folder at every check.
Ctrl-C and SIGTERM are held back while the sampler runs: the step in progress finishes,
the steps since the last record are written, and the signal is then delivered, so emcee
never sees an exception in the likelihood and a resumed run continues exactly as the
uninterrupted run would have.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from os import PathLike

import emcee
import h5py
import numpy as np

from ..._atomic import write_bytes
from .checkpoint import CheckpointBackend
from .interrupts import signals_held
from .convergence import MIN_ACCEPTANCE, converged_rhat, rhat_too_high, split_rhat
from ..errors import NotConvergedWarning
from .progress import SamplingProgress

__all__ = [
    "STILL_SPREAD", "STRAGGLER_FALSE_ALARM", "ChainResult", "assess_chain",
    "autocorrelation_time", "chain_file_bytes", "default_moves", "read_chain", "run_chain",
    "still", "stragglers", "write_chain",
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
        Number of steps read back from the checkpoint when resuming (0 for a fresh run).
    random_state : tuple or None
        emcee generator state after the last step.
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
    chain: np.ndarray, *, tau_multiple: float = 50.0, ess_target: float = 2000.0,
    accepted: np.ndarray | None = None, names: Sequence[str] | None = None,
    log_prob: np.ndarray | None = None,
) -> dict:
    """Estimate autocorrelation times, burn-in, effective sample size and R-hat of a chain.

    Parameters
    ----------
    chain : ndarray, shape (nsteps, nwalkers, ndim)
        Walker positions.
    tau_multiple : float
        Required kept-chain length in units of the largest autocorrelation time.
    ess_target : float
        Required effective sample size for every parameter.
    accepted : ndarray, shape (nwalkers,), optional
        Accepted proposals per walker; without it acceptance is not checked.
    names : sequence of str, optional
        Parameter names used in `shortfalls`.
    log_prob : ndarray, shape (nsteps, nwalkers), optional
        Log-posterior of every position; it sets the burn-in by `stragglers`. Every
        caller in lidmelt passes it; without it only the 2 tau rule applies.

    Returns
    -------
    dict
        ``tau`` (ndim,) in steps (NaN where it cannot be estimated), ``discard``
        (burn-in steps), ``ess`` (ndim,), ``kept_steps``, ``tau_multiple_reached`` (kept
        steps / max tau), ``split_rhat`` and ``rhat_if_converged`` (ndim,),
        ``acceptance`` (mean fraction or NaN), ``stranded_walkers`` (walkers still out
        of the bulk after the burn-in), ``straggler_threshold`` (nats, `stragglers`),
        ``shortfalls`` (one line per unmet part of the stopping rule) and ``converged``
        (no shortfall).

    Notes
    -----
    Burn-in = max(ceil(2 max tau), end of the last block with a walker out of the bulk),
    capped at half the chain (a walker still out of the bulk after that is a shortfall,
    so a chain with stragglers is never called converged). Summaries, figures and
    PSIS-LOO all use the steps after this one burn-in (`Posterior.discard`).
    ESS = kept_steps * nwalkers / tau (Sokal 1997; emcee documentation). Walkers of an
    ensemble are not independent chains, so this is the standard emcee estimate, not an
    exact count. A parameter whose chain does not vary (`still`: on the scale of its
    values) has no tau (NaN) and no ESS; so has one with a walker that never moves.
    """
    nsteps, nwalkers, ndim = chain.shape
    names = list(names) if names is not None else [f"parameter {j}" for j in range(ndim)]
    tau_all = autocorrelation_time(chain)
    finite = np.isfinite(tau_all)
    longest = math.ceil(2.0 * np.max(tau_all[finite])) if finite.any() else nsteps
    block = math.ceil(np.max(tau_all[finite])) if finite.any() else 1
    strays = (stragglers(log_prob, block=block, ndim=ndim) if log_prob is not None
              else {"last_step": -1, "walkers": [], "threshold": np.nan})
    discard = int(min(max(longest, strays["last_step"] + 1), nsteps // 2))
    stranded = [w for w, last in strays["walkers"] if last >= discard]
    kept = chain[discard:]
    tau = np.maximum(autocorrelation_time(kept), 1.0)  # tau < 1 would overstate the ESS
    # Values that differ only by rounding have no autocorrelation time (emcee would
    # estimate one from the rounding noise).
    tau = np.where(still(kept, axis=(0, 1)), np.nan, tau)
    kept_steps = nsteps - discard
    ess = kept_steps * nwalkers / tau
    reached = kept_steps / float(np.max(tau)) if np.all(np.isfinite(tau)) else np.nan
    rhat = split_rhat(kept)
    expected = converged_rhat(kept_steps // 2, tau)
    acceptance = float(np.mean(accepted) / max(nsteps, 1)) if accepted is not None else np.nan
    assessment = {
        "tau": tau, "discard": discard, "ess": ess, "kept_steps": kept_steps,
        "tau_multiple_reached": reached, "split_rhat": rhat, "rhat_if_converged": expected,
        "acceptance": acceptance, "stranded_walkers": stranded,
        "straggler_threshold": strays["threshold"],
    }
    assessment["shortfalls"] = _shortfalls(assessment, names, nsteps, tau_multiple,
                                           ess_target, kept)
    assessment["converged"] = not assessment["shortfalls"]
    return assessment


#: Chance that `stragglers` flags any block of a chain that has converged to a posterior
#: of Gaussian shape (a bound through Markov's inequality, see `stragglers`).
STRAGGLER_FALSE_ALARM = 0.01


def stragglers(log_prob: np.ndarray, *, block: int, ndim: int) -> dict:
    """Walkers whose log-posterior is out of the bulk of the ensemble, and until when.

    Each walker's chain is cut into consecutive blocks of `block` steps (the longest
    autocorrelation time, so a block holds about one independent draw). A draw lies
    *out of the bulk* when its log-posterior is more than ``X`` below the median
    log-posterior of all walkers over the second half of the chain; a block is out of
    the bulk when at least half its draws are (its median is). A walker's straggling
    ends one block after its last such block: its last straggling draws can share a
    block with draws back in the bulk.

    ``X`` follows from the shape of a converged posterior: near a Gaussian mode in d
    dimensions, log p_max - log p(theta) of a draw is chi^2_d / 2 (e.g. Gelman et al.
    2013, BDA3 sec. 4.1), so the ensemble median lies chi^2_d(0.5) / 2 below the
    maximum, and

        X = [F^-1_chi2_d(1 - p) - F^-1_chi2_d(0.5)] / 2,
        p = STRAGGLER_FALSE_ALARM / (2 * blocks of all walkers).

    Half a block beyond a level has at most twice the single-draw chance p (Markov's
    inequality), so over all blocks the rule fires on a converged chain with chance
    below STRAGGLER_FALSE_ALARM. Examples: X = 11.8 nats for d = 3 and 512 blocks (32
    walkers x 16), 14.0 for d = 4 and 2000 blocks. A walker tens of nats down (far from
    the mode, or stranded in a minor mode) is flagged; a walker in a minor mode within X
    of the bulk is left to split R-hat.

    Parameters
    ----------
    log_prob : ndarray, shape (nsteps, nwalkers)
        Log-posterior of every position.
    block : int
        Block length in steps (>= 1).
    ndim : int
        Number of free parameters (d).

    Returns
    -------
    dict
        ``last_step``: the last step of the straggling of any walker (-1: none);
        ``walkers``: (walker, last step) of each walker that straggles;
        ``threshold``: X in nats.
    """
    from scipy import stats

    log_prob = np.asarray(log_prob, float)
    nsteps, nwalkers = log_prob.shape
    block = max(int(block), 1)
    nblocks = -(-nsteps // block)
    chi2 = stats.chi2(max(int(ndim), 1))
    p = STRAGGLER_FALSE_ALARM / (2.0 * nblocks * nwalkers)
    threshold = 0.5 * float(chi2.isf(p) - chi2.median())
    none = {"last_step": -1, "walkers": [], "threshold": threshold}
    if nsteps < 4:
        return none
    finite = np.where(np.isfinite(log_prob), log_prob, -np.inf)
    low = finite < float(np.median(finite[nsteps // 2:])) - threshold
    padded = np.zeros((nblocks * block, nwalkers), bool)
    padded[:nsteps] = low
    size = np.full(nblocks, block)
    size[-1] = nsteps - (nblocks - 1) * block  # the last block may be short
    out = 2 * padded.reshape(nblocks, block, nwalkers).sum(axis=1) >= size[:, None]
    if not out.any():
        return none
    walkers = [(int(w), int(min((np.flatnonzero(out[:, w])[-1] + 2) * block, nsteps) - 1))
               for w in np.flatnonzero(out.any(axis=0))]
    return {"last_step": max(last for _, last in walkers), "walkers": walkers,
            "threshold": threshold}


def autocorrelation_time(chain: np.ndarray) -> np.ndarray:
    """emcee's integrated autocorrelation time per column of `chain` (steps, walkers, k).

    NaN where it cannot be estimated: fewer than 4 steps, or a quantity that never
    changes (or is NaN, as a derived quantity where no melt forms).
    """
    if chain.shape[0] < 4:
        return np.full(chain.shape[2], np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):  # a chain that never moves
        tau = emcee.autocorr.integrated_time(chain, tol=0, quiet=True)
    return np.where(np.isfinite(tau) & (tau > 0), tau, np.nan)


#: Relative spread at or below which values count as not varying: far above float64
#: rounding (2e-16), far below any spread a sampled parameter has (common practice).
STILL_SPREAD = 1e-10


def still(values: np.ndarray, axis) -> np.ndarray:
    """Whether `values` do not vary along `axis`, on the scale of the values themselves:
    max - min <= `STILL_SPREAD` x max |value| (so 1400 +- 1e-12 does not vary, while a
    chain spanning +-7 degC, or +-1e-6 around 0, does)."""
    values = np.asarray(values, float)
    spread = np.ptp(values, axis=axis)
    return spread <= STILL_SPREAD * np.max(np.abs(values), axis=axis)


def _untimed(name: str, column: np.ndarray) -> str:
    """Why the autocorrelation time of one parameter (kept chain (steps, walkers)) is
    missing, in words: it does not vary, some walkers never move, or too little chain."""
    low, high = np.min(column), np.max(column)
    if still(column, axis=(0, 1)):
        return (f"the autocorrelation time of {name} cannot be estimated: its chain does "
                f"not vary (every value is {low:.6g})")
    stuck = int(np.sum(still(column, axis=0)))
    span = f"its chain spans {low:.4g} to {high:.4g}"
    if stuck:
        return (f"the autocorrelation time of {name} cannot be estimated: {stuck} of "
                f"{column.shape[1]} walkers never move ({span}); a stuck walker usually "
                "sits where the posterior drops to nothing around it")
    return (f"the autocorrelation time of {name} cannot be estimated from "
            f"{column.shape[0]} kept steps ({span})")


def _shortfalls(a: dict, names, nsteps, tau_multiple, ess_target, kept) -> list[str]:
    """Each unmet part of the stopping rule, in words (`kept`: the chain after burn-in)."""
    if nsteps < 4:
        return [f"the chain is too short to assess ({nsteps} steps)"]
    out = [_untimed(names[j], kept[:, :, j]) for j in np.flatnonzero(~np.isfinite(a["tau"]))]
    if a["tau_multiple_reached"] < tau_multiple and not out:
        out.append(f"the kept chain is {a['tau_multiple_reached']:.1f} autocorrelation "
                   f"times long (the rule needs {tau_multiple:g})")
    ess = np.where(np.isfinite(a["ess"]), a["ess"], 0.0)
    if np.min(ess) < ess_target and np.all(np.isfinite(a["tau"])):
        j = int(np.argmin(ess))
        out.append(f"the smallest effective sample size is {ess[j]:.0f} ({names[j]}; the "
                   f"rule needs {ess_target:g})")
    for j in np.flatnonzero(rhat_too_high(a["split_rhat"], a["rhat_if_converged"])):
        out.append(f"split R-hat of {names[j]} is {a['split_rhat'][j]:.3f}, well above the "
                   f"{a['rhat_if_converged'][j]:.3f} a converged ensemble of this length "
                   "gives: the walkers disagree")
    if a["stranded_walkers"]:
        out.append(f"{len(a['stranded_walkers'])} of the walkers are still out of the bulk "
                   "after half the chain (log-posterior more than "
                   f"{a['straggler_threshold']:.1f} below the ensemble's median): they are "
                   "stranded away from the main mode")
    if a["acceptance"] < MIN_ACCEPTANCE:
        out.append(f"the mean acceptance fraction is {a['acceptance']:.3f}, below "
                   f"{MIN_ACCEPTANCE:g}: the walkers rarely move")
    return out


def run_chain(
    log_prob: Callable[[np.ndarray], np.ndarray],
    initial: np.ndarray,
    *,
    seed: int,
    ess_target: float = 2000.0,
    tau_multiple: float = 50.0,
    max_steps: int = 20000,
    check_interval: int = 250,
    checkpoint: str | PathLike[str] | None = None,
    resume: bool = False,
    meta: dict | None = None,
    moves: Sequence | None = None,
    quiet: bool = False,
    names: Sequence[str] | None = None,
) -> ChainResult:
    """Run the ensemble sampler until converged or `max_steps`, checkpointing the chain.

    Parameters
    ----------
    log_prob : callable
        Vectorised log-posterior: ``(n, ndim)`` array -> ``(n,)`` or ``(n, 1 + k)`` with
        ``k`` derived quantities. Must return ``-inf`` (never NaN) outside the support.
    initial : ndarray, shape (nwalkers, ndim)
        Starting positions (only the shape is used when resuming).
    seed : int
        Seed of emcee's generator for a fresh run.
    ess_target, tau_multiple : float
        Stopping rule, see `assess_chain`.
    max_steps : int
        Step cap; reaching it without convergence emits `NotConvergedWarning`.
    check_interval : int
        Steps between convergence checks and checkpoint records.
    checkpoint : str or path-like, optional
        Existing empty folder for the checkpoint (or, with `resume`, the stored one).
        None keeps the chain in memory only.
    resume : bool
        Continue the chain stored in `checkpoint`.
    meta : dict, optional
        Run description stored in the checkpoint; its ``fingerprint`` mapping must match
        the stored one on resume.
    moves : sequence, optional
        emcee moves; default `default_moves`.
    quiet : bool
        Hide the progress bar.
    names : sequence of str, optional
        Parameter names, used in messages.

    Returns
    -------
    ChainResult

    Raises
    ------
    OutputConflict
        When resuming: nothing stored, another run's checkpoint, or no readable record.
    WriteError
        A checkpoint record could not be written; the earlier records are kept.
    KeyboardInterrupt
        After Ctrl-C or SIGTERM, once the steps so far are in the checkpoint.
    """
    meta = {"fingerprint": {}, **(meta or {})}
    initial = np.asarray(initial, dtype=float)
    if resume:
        backend = CheckpointBackend.open(checkpoint, meta=meta, shape=initial.shape)
    else:
        backend = CheckpointBackend(checkpoint)
        backend.reset(*initial.shape)
        backend.create(meta)
    sampler = emcee.EnsembleSampler(
        *initial.shape, log_prob, vectorize=True, backend=backend,
        moves=list(moves) if moves is not None else default_moves(),
    )
    resumed_from = backend.iteration
    if resumed_from:
        start = backend.get_last_sample()
    else:
        sampler.random_state = np.random.RandomState(seed).get_state()
        start = emcee.State(initial.copy())
    rule = _Rule(ess_target, tau_multiple, max_steps, check_interval, names)
    assessment = _sample(sampler, start, rule, quiet=quiet)
    result = ChainResult(
        chain=backend.get_chain().copy(), log_prob=backend.get_log_prob().copy(),
        blobs=None if backend.blobs is None else backend.get_blobs().copy(),
        accepted=backend.accepted.copy(), assessment=assessment,
        resumed_from=resumed_from, random_state=tuple(backend.random_state),
    )
    if not assessment["converged"]:
        warnings.warn(NotConvergedWarning(_not_converged_message(assessment, result.nsteps),
                                          tau=assessment["tau"], steps=result.nsteps),
                      stacklevel=2)
    return result


@dataclass(frozen=True)
class _Rule:
    """The stopping rule and check cadence of a run."""

    ess_target: float
    tau_multiple: float
    max_steps: int
    check_interval: int
    names: Sequence[str] | None = None

    def assess(self, backend) -> dict:
        return assess_chain(backend.get_chain(), tau_multiple=self.tau_multiple,
                            ess_target=self.ess_target, accepted=backend.accepted,
                            names=self.names, log_prob=backend.get_log_prob())

    def done(self, assessment, steps: int) -> bool:
        return assessment is not None and (assessment["converged"] or steps >= self.max_steps)

    def is_check(self, steps: int) -> bool:
        return steps % self.check_interval == 0 or steps >= self.max_steps


def _sample(sampler, start, rule: _Rule, *, quiet: bool) -> dict:
    """Step, record and assess until the rule says stop (or a signal arrives).

    A resumed chain that already satisfies the rule is not extended, so resuming after
    an interruption between the last record and the end of the run changes nothing.
    """
    backend = sampler.backend
    done = backend.iteration
    assessment = rule.assess(backend) if done else None
    if rule.done(assessment, done):
        return assessment
    progress = SamplingProgress(rule, sampler.nwalkers, done, quiet=quiet)
    try:
        with signals_held() as caught:
            steps = sampler.sample(start, iterations=rule.max_steps - done,
                                   skip_initial_state_check=done > 0)
            for _ in steps:
                done = backend.iteration
                progress.step(done)
                if caught:
                    break
                if rule.is_check(done):
                    backend.write_record()
                    assessment = rule.assess(backend)
                    progress.checked(assessment, done)
                    if rule.done(assessment, done):
                        break
            steps.close()
            backend.write_record()  # after a signal, the steps since the last check
    finally:
        progress.close()
    return assessment


def _not_converged_message(assessment, steps) -> str:
    return (f"sampler NOT converged after {steps} steps (the step cap): "
            + "; ".join(assessment["shortfalls"]))


def read_chain(path: str | PathLike[str]) -> tuple[ChainResult, dict]:
    """Read a chain file written by `write_chain` (emcee's HDF5 layout).

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


def write_chain(path: str | PathLike[str], result: ChainResult, *, meta: dict | None = None,
                ) -> None:
    """Write a whole chain to `path` (atomically) in emcee's HDF5 backend layout.

    ``emcee.backends.HDFBackend(path, read_only=True)`` reads the file.

    Parameters
    ----------
    path : str or path-like
        Output HDF5 file (replaced).
    result : ChainResult
        The chain; its `random_state` is stored with it.
    meta : dict, optional
        Run attributes stored as ``meta_*`` attributes.
    """
    write_bytes(path, chain_file_bytes(result, meta=meta))


def chain_file_bytes(result: ChainResult, *, meta: dict | None = None) -> bytes:
    """The bytes of the `write_chain` file, built in memory (no partial file on disk)."""
    nsteps, nwalkers, ndim = result.chain.shape
    # A core-driver file without backing store lives in memory only; its name is a label.
    with h5py.File(f"chain-{id(result)}.h5", "w", driver="core", backing_store=False) as f:
        g = f.create_group(_GROUP)
        g.attrs["version"] = emcee.__version__
        g.attrs["nwalkers"] = nwalkers
        g.attrs["ndim"] = ndim
        g.attrs["has_blobs"] = result.blobs is not None
        g.attrs["iteration"] = nsteps
        for key, value in (meta or {}).items():
            g.attrs[f"meta_{key}"] = _to_attr(value)
        for i, value in enumerate(result.random_state or ()):
            g.attrs[f"random_state_{i}"] = value
        g.create_dataset("accepted", data=np.asarray(result.accepted, float))
        g.create_dataset("chain", data=result.chain, maxshape=(None, nwalkers, ndim))
        g.create_dataset("log_prob", data=result.log_prob, maxshape=(None, nwalkers))
        if result.blobs is not None:
            blobs = np.asarray(result.blobs, float).reshape(nsteps, nwalkers, -1)
            g.create_dataset("blobs", (nsteps, nwalkers), maxshape=(None, nwalkers),
                             dtype=np.dtype(("f8", (blobs.shape[2],))))[...] = blobs
        f.flush()
        return f.id.get_file_image()


def _to_attr(value):
    if isinstance(value, (list, tuple)):
        return np.array([str(v) for v in value], dtype=h5py.string_dtype())
    return value


def _from_attr(value):
    if isinstance(value, np.ndarray):  # h5py gives text arrays back as str objects
        return tuple(str(v) for v in value)
    if isinstance(value, np.generic):
        return value.item()
    return value
