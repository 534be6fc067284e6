"""The sampling machinery alone: known posteriors, autocorrelation, seeding, resume."""

from __future__ import annotations

import signal
import subprocess
import sys
import warnings
from pathlib import Path

import emcee
import h5py
import numpy as np
import pytest
from helpers import own_signal_handlers
from scipy import stats

from lidmelt.inversion import InputError, NotConvergedWarning
from lidmelt.inversion.fitting.checkpoint import (
    RECORDS,
    CheckpointBackend,
    ResumeWarning,
    stored_steps,
)
from lidmelt.inversion.fitting.convergence import converged_rhat, split_rhat
from lidmelt.inversion.fitting.sampler import assess_chain, read_chain, run_chain, write_chain


@pytest.fixture(autouse=True)
def python_signal_handlers():
    with own_signal_handlers():  # whatever the test process inherited (nohup, xdist)
        yield


class LinearGaussian:
    """y = X beta + noise, noise ~ N(0, sigma^2 I), prior beta ~ N(0, tau^2 I).

    The posterior is Gaussian with covariance S = (X^T X / sigma^2 + I / tau^2)^-1 and
    mean m = S X^T y / sigma^2 (conjugate Bayesian linear regression; Bishop 2006,
    Pattern Recognition and Machine Learning, eqs. 3.53-3.54).
    """

    def __init__(self, seed: int = 0, *, ndata: int = 12, sigma: float = 0.5,
                 tau: float = 3.0):
        rng = np.random.default_rng(seed)
        x = np.linspace(-1.0, 1.0, ndata)
        self.design = np.column_stack([np.ones(ndata), x, x**2])
        self.y = self.design @ np.array([1.0, -2.0, 0.5]) + rng.normal(0.0, sigma, ndata)
        self.sigma, self.tau = sigma, tau
        precision = self.design.T @ self.design / sigma**2 + np.eye(3) / tau**2
        self.cov = np.linalg.inv(precision)
        self.mean = self.cov @ self.design.T @ self.y / sigma**2
        self.calls = 0

    def __call__(self, theta: np.ndarray) -> np.ndarray:
        self.calls += 1
        resid = self.y[None, :] - theta @ self.design.T
        log_like = -0.5 * np.sum(resid**2, axis=1) / self.sigma**2
        log_prior = -0.5 * np.sum(theta**2, axis=1) / self.tau**2
        total = log_like + log_prior
        # Two blobs (a derived quantity and a constant) to exercise blob storage.
        return np.column_stack([total, theta.sum(axis=1), np.full(len(theta), 7.0)])

    def start(self, nwalkers: int, seed: int = 1) -> np.ndarray:
        return np.random.default_rng(seed).normal(0.0, 1.0, (nwalkers, 3))


class Interrupting(LinearGaussian):
    """The same model, but at call `stop_at` the process gets SIGINT, as from Ctrl-C
    (or, with ``raising=True``, the likelihood itself raises KeyboardInterrupt)."""

    def __init__(self, stop_at: int, *, raising: bool = False, **kwargs):
        super().__init__(**kwargs)
        self.stop_at, self.raising = stop_at, raising

    def __call__(self, theta):
        if self.calls == self.stop_at:
            if self.raising:
                raise KeyboardInterrupt
            signal.raise_signal(signal.SIGINT)
        return super().__call__(theta)


def _run(model, *, seed=5, path=None, resume=False, **kwargs):
    options = dict(seed=seed, ess_target=1500, tau_multiple=50,
                   max_steps=5000, check_interval=100, quiet=True)
    options.update(kwargs)
    if path is not None and not resume:
        path.mkdir()
    return run_chain(model, model.start(32), checkpoint=path, resume=resume, **options)


def test_linear_gaussian_posterior_mean_and_covariance():
    model = LinearGaussian()
    result = _run(model)
    assessment = result.assessment
    assert assessment["converged"]
    kept = result.chain[assessment["discard"]:].reshape(-1, 3)
    ess = assessment["ess"]
    sd = np.sqrt(np.diag(model.cov))
    # Monte Carlo standard error of a mean is sd / sqrt(ESS); 4 of them is a 1-in-15000 miss.
    np.testing.assert_array_less(np.abs(kept.mean(axis=0) - model.mean), 4 * sd / np.sqrt(ess))
    # Relative standard error of a sample sd is about 1 / sqrt(2 ESS) (Gaussian case).
    np.testing.assert_array_less(np.abs(kept.std(axis=0) / sd - 1), 4 / np.sqrt(2 * ess))
    corr = np.corrcoef(kept.T)
    true_corr = model.cov / np.outer(sd, sd)
    # Correlations: standard error (1 - rho^2) / sqrt(ESS), loosened to 0.05 absolute
    # because ESS differs between the parameter pairs.
    np.testing.assert_allclose(corr, true_corr, atol=0.05)
    # Quantiles against scipy.stats.norm quantiles of the exact marginals, within 4 Monte
    # Carlo standard errors of a sample p-quantile, sqrt(p (1 - p) / ESS) / density there
    # (asymptotic normality of sample quantiles; e.g. van der Vaart 1998, Cor. 21.5).
    p = np.array([0.025, 0.16, 0.84, 0.975])[:, None]
    exact = stats.norm.ppf(p, loc=model.mean, scale=sd)
    density = stats.norm.pdf(exact, loc=model.mean, scale=sd)
    se = np.sqrt(p * (1 - p) / ess) / density
    np.testing.assert_array_less(np.abs(np.quantile(kept, p[:, 0], axis=0) - exact), 4 * se)


def test_blobs_are_stored_and_match_positions():
    model = LinearGaussian()
    result = _run(model, ess_target=200, tau_multiple=5, max_steps=400)
    assert result.blobs.shape == result.chain.shape[:2] + (2,)
    np.testing.assert_allclose(result.blobs[..., 0], result.chain.sum(axis=2), rtol=1e-12)
    assert np.all(result.blobs[..., 1] == 7.0)
    assert 0.1 < result.acceptance.mean() < 0.9  # sensible moves on a Gaussian


def test_autocorrelation_time_of_ar1_process():
    # AR(1) x_t = rho x_{t-1} + e_t has tau = (1 + rho) / (1 - rho) (Sokal 1997).
    rho, nsteps, nwalkers = 0.8, 20000, 8
    rng = np.random.default_rng(3)
    x = np.zeros((nsteps, nwalkers, 1))
    noise = rng.normal(size=(nsteps, nwalkers, 1))
    for t in range(1, nsteps):
        x[t] = rho * x[t - 1] + noise[t]
    assessment = assess_chain(x, tau_multiple=50, ess_target=100)
    # 10 %: the windowed estimator is biased low by a few % and has ~3 % scatter here.
    np.testing.assert_allclose(assessment["tau"][0], (1 + rho) / (1 - rho), rtol=0.1)
    # ESS against the process's true autocorrelation time (not the estimate the code
    # used): kept draws / tau_true, within the same 10 %.
    kept = nsteps - assessment["discard"]
    np.testing.assert_allclose(assessment["ess"], kept * nwalkers * (1 - rho) / (1 + rho),
                               rtol=0.1)
    assert assessment["converged"]


def test_same_seed_same_chain_and_different_seed_different_chain():
    first = _run(LinearGaussian(), seed=11, ess_target=300, max_steps=600)
    second = _run(LinearGaussian(), seed=11, ess_target=300, max_steps=600)
    other = _run(LinearGaussian(), seed=12, ess_target=300, max_steps=600)
    np.testing.assert_array_equal(first.chain, second.chain)
    np.testing.assert_array_equal(first.log_prob, second.log_prob)
    np.testing.assert_array_equal(first.blobs, second.blobs)
    assert not np.array_equal(first.chain, other.chain)


@pytest.mark.parametrize("raising", [False, True])
def test_resume_after_interruption_equals_uninterrupted_run(tmp_path, raising):
    reference = _run(LinearGaussian(), path=tmp_path / "whole")
    # Each step makes two calls (one per half-ensemble); stop in the middle of chunk 4.
    broken = Interrupting(stop_at=2 * 350 + 7, raising=raising)
    path = tmp_path / "broken"
    with pytest.raises(KeyboardInterrupt):
        _run(broken, path=path)
    # Ctrl-C: the step in progress finishes and is stored; an exception inside the
    # likelihood loses that step but keeps the three finished chunks. Nothing half-written.
    kept = stored_steps(path)
    assert kept == (300 if raising else 354)
    resumed = _run(LinearGaussian(), path=path, resume=True)
    assert resumed.resumed_from == kept
    np.testing.assert_array_equal(resumed.chain, reference.chain)
    np.testing.assert_array_equal(resumed.log_prob, reference.log_prob)
    np.testing.assert_array_equal(resumed.blobs, reference.blobs)
    np.testing.assert_array_equal(resumed.accepted, reference.accepted)
    assert resumed.assessment["converged"] == reference.assessment["converged"]


def test_many_interrupts_give_one_keyboard_interrupt_and_a_whole_checkpoint(tmp_path):
    class Hammering(LinearGaussian):
        def __call__(self, theta):
            if 100 <= self.calls < 110:  # ten Ctrl-Cs in a row
                signal.raise_signal(signal.SIGINT)
            return super().__call__(theta)

    with pytest.raises(KeyboardInterrupt):
        _run(Hammering(), path=tmp_path / "ck")
    assert stored_steps(tmp_path / "ck") == 50  # the step in progress at call 100
    again = CheckpointBackend.open(tmp_path / "ck", meta={"fingerprint": {}}, shape=(32, 3))
    assert again.iteration == 50 and again.accepted.max() <= 50


def test_resuming_a_finished_chain_does_not_extend_it(tmp_path):
    path = tmp_path / "ck"
    finished = _run(LinearGaussian(), path=path, ess_target=300, max_steps=1000)
    again = _run(LinearGaussian(), path=path, resume=True, ess_target=300, max_steps=1000)
    assert again.nsteps == finished.nsteps == again.resumed_from
    np.testing.assert_array_equal(again.chain, finished.chain)


def test_chain_file_is_readable_by_emcee(tmp_path):
    path = tmp_path / "chain.h5"
    result = _run(LinearGaussian(), ess_target=200, tau_multiple=5, max_steps=300)
    write_chain(path, result, meta={"seed": 5, "parameters": ("a", "b", "c")})
    backend = emcee.backends.HDFBackend(str(path), read_only=True)
    np.testing.assert_array_equal(backend.get_chain(), result.chain)
    np.testing.assert_array_equal(backend.get_log_prob(), result.log_prob)
    np.testing.assert_array_equal(backend.get_blobs(), result.blobs)
    np.testing.assert_array_equal(backend.accepted, result.accepted)
    # The stored generator state is the one after the last step.
    assert backend.get_last_sample().random_state[0] == "MT19937"
    stored, meta = read_chain(path)
    np.testing.assert_array_equal(stored.chain, result.chain)
    assert meta == {"seed": 5, "parameters": ("a", "b", "c")}
    with h5py.File(path) as f:
        np.testing.assert_array_equal(f["mcmc/chain"][...], result.chain)


def test_acceptance_comes_from_emcee_itself():
    # emcee's own count: a walker is accepted when its proposal was taken (emcee docs).
    model = LinearGaussian()
    result = _run(model, ess_target=200, tau_multiple=5, max_steps=300)
    moved = np.any(np.diff(result.chain, axis=0) != 0, axis=2).sum(axis=0)
    # The first step's acceptance is not visible in differences of stored positions.
    assert np.all(result.accepted - moved >= 0) and np.all(result.accepted - moved <= 1)


def test_step_cap_warns_and_flags_not_converged():
    with pytest.warns(NotConvergedWarning, match="NOT converged after 200 steps") as record:
        result = _run(LinearGaussian(), ess_target=10**6, max_steps=200)
    assert not result.assessment["converged"]
    assert result.nsteps == 200
    assert record[0].message.steps == 200
    assert record[0].message.tau is not None
    assert "smallest effective sample size" in str(record[0].message)


def test_resume_refuses_missing_or_foreign_chain(tmp_path):
    with pytest.raises(InputError, match="no interrupted run to resume"):
        _run(LinearGaussian(), path=tmp_path / "none", resume=True)
    path = tmp_path / "ck"
    _run(LinearGaussian(), path=path, meta={"fingerprint": {"the seed": "1"}},
         ess_target=100, tau_multiple=5, max_steps=100)
    with pytest.raises(InputError, match="cannot resume: the seed changed"):
        _run(LinearGaussian(), path=path, resume=True,
             meta={"fingerprint": {"the seed": "2"}})


def test_split_rhat_near_one_for_mixed_and_large_for_stuck_chains():
    rng = np.random.default_rng(0)
    mixed = rng.normal(size=(2000, 16, 2))
    # iid chains: R-hat - 1 is of order 1 / (number of draws); 0.01 is common practice.
    np.testing.assert_allclose(split_rhat(mixed), 1.0, atol=0.01)
    stuck = mixed + np.linspace(-2, 2, 16)[None, :, None]  # walkers at different means
    assert np.all(split_rhat(stuck) > 1.5)


def test_converged_rhat_baseline_matches_iid_chains_of_that_length():
    # Independent AR(1) walkers (tau = (1 + rho) / (1 - rho) = 9, Sokal 1997) of 600 steps:
    # the R-hat of a converged ensemble is close to sqrt(1 - 1/n + tau/n), n = 300.
    rho, tau = 0.8, 9.0
    rng = np.random.default_rng(7)
    x = np.zeros((600, 400, 1))
    noise = rng.normal(size=x.shape) * np.sqrt(1 - rho**2)
    for t in range(1, 600):
        x[t] = rho * x[t - 1] + noise[t]
    # 0.005: the R-hat of 800 half-chains scatters by about 0.002 around its expectation.
    np.testing.assert_allclose(split_rhat(x), converged_rhat(300, np.array([tau])), atol=0.005)


class MinorMode:
    """A 4-parameter posterior with a minor mode: a narrow main mode at 0 and, 20 nats
    lower, a second one at 0.6 on every axis, under uniform priors on [-1, 1]^4. Walkers
    drawn from the prior fall into both basins; the ensemble moves (difference and
    stretch) cannot carry one across, as in the stranded 4-parameter study."""

    def __init__(self):
        from lidmelt.inversion.study.priors import Uniform

        self.priors = [Uniform(-1.0, 1.0) for _ in range(4)]
        self.names = ("a", "b", "c", "d")

    def __call__(self, theta):
        theta = np.atleast_2d(theta)
        main = -0.5 * np.sum((theta / 0.05) ** 2, axis=1)
        minor = -20.0 - 0.5 * np.sum(((theta - 0.6) / 0.05) ** 2, axis=1)
        inside = np.all(np.abs(theta) <= 1.0, axis=1)
        return np.where(inside, np.logaddexp(main, minor), -np.inf)


def test_prior_start_strands_walkers_in_a_minor_mode_and_the_map_start_does_not():
    from lidmelt.inversion.fitting import start as _start

    model = MinorMode()
    options = dict(seed=3, ess_target=800, tau_multiple=30, max_steps=1500,
                   check_interval=250, quiet=True)
    rng = np.random.default_rng(11)
    initial = _start.prior_start(model, 32, rng)
    minor = np.sum((initial - 0.6) ** 2, axis=1) < np.sum(initial**2, axis=1)
    assert minor.sum() >= 3  # guards the test: several walkers start in the minor basin
    with pytest.warns(NotConvergedWarning):
        stranded = run_chain(model, initial, **options)
    a = stranded.assessment
    assert not a["converged"] and len(a["stranded_walkers"]) >= 1
    assert any("out of the bulk" in s for s in a["shortfalls"])
    initial, best = _start.map_start(model, 32, np.random.default_rng(11))
    np.testing.assert_allclose(best, 0.0, atol=1e-3)  # the main mode, not the minor one
    with warnings.catch_warnings():
        warnings.simplefilter("error", NotConvergedWarning)
        fine = run_chain(model, initial, **options)
    assert fine.assessment["converged"]
    kept = fine.chain[fine.assessment["discard"]:].reshape(-1, 4)
    np.testing.assert_allclose(kept.std(axis=0), 0.05, rtol=0.15)  # the main mode's sd


def test_map_search_starts_from_separate_basins():
    from lidmelt.inversion.fitting.start import starting_draws

    candidates = np.array([[0.0, 0.0], [0.1, 0.0], [2.0, 0.0], [0.0, 0.2], [3.5, 1.0]])
    values = np.array([5.0, 4.0, 3.0, 2.0, 1.0])
    chosen = starting_draws(candidates, values, np.array([1.0, 1.0]), 3)
    np.testing.assert_array_equal(chosen, candidates[[0, 2, 4]])
def test_a_handler_that_does_not_raise_still_stops_the_run_whole(tmp_path):
    # Before: the run returned with no assessment and run_chain failed with a TypeError.
    seen = []
    signal.signal(signal.SIGINT, lambda number, frame: seen.append(number))
    with pytest.raises(KeyboardInterrupt):
        _run(Interrupting(stop_at=2 * 30 + 1), path=tmp_path / "ck")
    assert seen == [signal.SIGINT]  # the previous handler had its say first
    assert stored_steps(tmp_path / "ck") == 31  # the step in progress, stored


def test_an_ignored_sigint_stays_ignored_and_the_chain_is_unchanged():
    reference = _run(LinearGaussian(), ess_target=300, max_steps=600)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # a background job of a script
    result = _run(Interrupting(stop_at=41), ess_target=300, max_steps=600)
    np.testing.assert_array_equal(result.chain, reference.chain)


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signal dispositions")
def test_the_interrupt_tests_pass_with_sigint_ignored_by_the_parent():
    # What ``nohup pytest`` or ``pytest &`` in a script does to the tests below.
    tests = Path(__file__)
    code = ("import signal, subprocess, sys; signal.signal(signal.SIGINT, signal.SIG_IGN); "
            "sys.exit(subprocess.run([sys.executable, '-m', 'pytest', '-q', '-p', "
            "'no:cacheprovider', '-n', '0', sys.argv[1] + '::test_resume_after_interruption"
            "_equals_uninterrupted_run', sys.argv[1] + '::test_many_interrupts_give_one_"
            "keyboard_interrupt_and_a_whole_checkpoint']).returncode)")
    done = subprocess.run([sys.executable, "-c", code, str(tests)], capture_output=True,
                          cwd=tests.parent, timeout=300)
    assert done.returncode == 0, done.stdout.decode()[-2000:]


def test_a_long_run_keeps_one_checkpoint_file(tmp_path):
    path = tmp_path / "ck"
    result = _run(LinearGaussian(), path=path, ess_target=10**6, max_steps=2000,
                  check_interval=20)  # 100 records
    assert result.nsteps == 2000
    assert sorted(p.name for p in path.iterdir()) == sorted(
        [RECORDS, "checkpoint.json", "lidmelt-files.json"])
    again = CheckpointBackend.open(path, meta={"fingerprint": {}}, shape=(32, 3))
    np.testing.assert_array_equal(again.get_chain(), result.chain)
    np.testing.assert_array_equal(again.accepted, result.accepted)


def _records_at(path: Path) -> list[int]:
    """Byte offsets where each record of the checkpoint file begins (from its frames)."""
    data, offsets, at = (path / RECORDS).read_bytes(), [], 0
    while at < len(data):
        offsets.append(at)
        at += 60 + int.from_bytes(data[at + 20:at + 28], "little")
    return offsets


@pytest.mark.parametrize("damage", ["torn", "flipped", "garbage"])
def test_a_damaged_tail_is_ignored_and_the_resume_is_identical(tmp_path, damage):
    reference = _run(LinearGaussian(), path=tmp_path / "whole")
    path = tmp_path / "broken"
    with pytest.raises(KeyboardInterrupt):
        _run(Interrupting(stop_at=2 * 350 + 7), path=path)
    file = path / RECORDS
    data = file.read_bytes()
    last = _records_at(path)[-1]
    if damage == "torn":  # killed in the middle of writing the last record
        file.write_bytes(data[: last + (len(data) - last) // 2])
        left = (len(data) - last) // 2
    elif damage == "flipped":  # one bit of the last record's payload
        middle = (last + len(data)) // 2
        file.write_bytes(data[:middle] + bytes([data[middle] ^ 1]) + data[middle + 1:])
        left = len(data) - last
    else:  # something after the last record that only looks like one
        file.write_bytes(data + b"LMst" + bytes(100))
        left = 104
    kept = 354 if damage == "garbage" else 300
    assert stored_steps(path) == kept
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ResumeWarning)
        resumed = _run(LinearGaussian(), path=path, resume=True)
    assert [str(w.message) for w in caught if w.category is ResumeWarning] == [
        f"checkpoint file {RECORDS} ends in a damaged or incomplete record ({left} bytes); "
        f"it is discarded (continuing from step {kept})"]
    assert resumed.resumed_from == kept
    np.testing.assert_array_equal(resumed.chain, reference.chain)
    np.testing.assert_array_equal(resumed.accepted, reference.accepted)
    # The resumed run appended after the last good record: the file reads back whole.
    assert stored_steps(path) == reference.nsteps
