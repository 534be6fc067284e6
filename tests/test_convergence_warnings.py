"""A bad chain is never called converged, and what needs care is said, one line each."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
from helpers import small_study
from lidmelt import forward, inversion
from lidmelt.inversion.results import report
from lidmelt.inversion.fitting.convergence import converged_rhat, rhat_too_high, split_rhat
from lidmelt.inversion.fitting.progress import SamplingProgress
from lidmelt.inversion.fitting.log_posterior import DERIVED
from lidmelt.inversion.fitting.sampler import ChainResult, _Rule, assess_chain, still

CAPPED = "walkers = 16\nseed = 4\nstart = \"map\"\ness_target = 300\ntau_multiple = 25\n" \
         "check_interval = 50\nmax_steps = 150\n"
LID = 'lithosphere_thickness = { prior = "uniform", min = 10.0, max = 110.0 }'
WATER = "water = { value = 150.0 }"


def _ar1(nsteps: int, nwalkers: int, rho: float, seed: int) -> np.ndarray:
    """Independent AR(1) walkers, unit variance, tau = (1 + rho) / (1 - rho) (Sokal 1997)."""
    rng = np.random.default_rng(seed)
    x = np.zeros((nsteps, nwalkers, 1))
    x[0] = rng.normal(size=(nwalkers, 1))
    noise = rng.normal(size=x.shape) * math.sqrt(1 - rho**2)
    for t in range(1, nsteps):
        x[t] = rho * x[t - 1] + noise[t]
    return x


def _strict_json(path) -> dict:
    def refuse(token):
        raise AssertionError(f"{token} in {path}: not valid JSON")
    return json.loads(path.read_text(), parse_constant=refuse)


# ---- the stopping rule -----------------------------------------------------------------

def test_walkers_stuck_apart_are_not_converged_although_tau_and_ess_look_fine():
    chain = _ar1(2000, 16, 0.5, seed=1)
    accepted = np.full(16, 600.0)
    fine = assess_chain(chain, tau_multiple=50, ess_target=1000, accepted=accepted)
    assert fine["converged"], fine["shortfalls"]  # the control: a mixed ensemble passes
    # Each walker explores its own region: emcee's tau subtracts each walker's mean, so
    # tau and ESS do not change, but the walkers disagree (Gelman et al. 2013, 11.4).
    apart = chain + np.linspace(-1.5, 1.5, 16)[None, :, None]
    bad = assess_chain(apart, tau_multiple=50, ess_target=1000, accepted=accepted,
                       names=["potential_temperature"])
    np.testing.assert_allclose(bad["ess"], fine["ess"])
    assert not bad["converged"]
    assert any("split R-hat of potential_temperature" in s for s in bad["shortfalls"])


def test_low_acceptance_is_not_converged():
    chain = _ar1(2000, 16, 0.5, seed=2)
    low = assess_chain(chain, tau_multiple=50, ess_target=1000, accepted=np.full(16, 20.0))
    assert not low["converged"]
    assert low["shortfalls"] == ["the mean acceptance fraction is 0.010, below 0.1: the "
                                 "walkers rarely move"]


def test_rhat_limit_is_not_reached_by_converged_ensembles_of_many_seeds():
    # 40 converged ensembles like a quick fit's (16 walkers, tau 9, 300 kept steps).
    flagged = 0
    for seed in range(40):
        x = _ar1(300, 16, 0.8, seed=100 + seed)
        tau = np.array([9.0])
        flagged += int(rhat_too_high(split_rhat(x), converged_rhat(150, tau))[0])
    assert flagged == 0


def test_nan_tau_of_a_chain_that_never_moves_is_handled():
    chain = np.ones((200, 8, 2))
    chain[:, :, 1] = np.random.default_rng(0).normal(size=(200, 8))
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no RuntimeWarning from numpy or emcee either
        result = assess_chain(chain, tau_multiple=5, ess_target=10, names=["tp", "lid"])
    assert np.isnan(result["tau"][0]) and np.isnan(result["ess"][0])
    assert not result["converged"]
    assert result["shortfalls"][0] == ("the autocorrelation time of tp cannot be estimated: "
                                       "its chain does not vary (every value is 1)")


def test_a_chain_spanning_degrees_is_never_said_not_to_vary():
    # One walker that never moves makes emcee's tau NaN (its autocorrelation is 0/0),
    # while the chain as a whole spans about +-7 degC: the words must say which it is.
    rng = np.random.default_rng(3)
    chain = 1400.0 + 7.0 * rng.standard_normal((400, 8, 1)) / 2.5
    chain[:, 3, 0] = 1401.0
    result = assess_chain(chain, tau_multiple=5, ess_target=10, names=["tp"])
    assert np.isnan(result["tau"][0])
    words = result["shortfalls"][0]
    assert "does not vary" not in words
    assert "1 of 8 walkers never move" in words and "its chain spans" in words


def test_not_varying_is_judged_on_the_scale_of_the_values():
    # Spread at float64 rounding level around 1400 (2.2e-16 relative; numpy's eps, a
    # fact of the trade): not varying, even though emcee would estimate a tau from it.
    rng = np.random.default_rng(4)
    noise = rng.standard_normal((300, 8, 1))
    rounding = 1400.0 + 1400.0 * 1e-14 * noise
    result = assess_chain(rounding, tau_multiple=5, ess_target=10, names=["tp"])
    assert np.isnan(result["tau"][0])
    assert "its chain does not vary" in result["shortfalls"][0]
    # A chain of +-7 degC, or of +-1e-6 around zero, varies.
    assert not still(1400.0 + 7.0 * noise, axis=(0, 1))[0]
    assert not still(1e-6 * noise, axis=(0, 1))[0]
    assert still(np.zeros((5, 2, 1)), axis=(0, 1))[0]


def test_progress_never_goes_back_and_shows_what_it_waits_for(capsys):
    rule = _Rule(ess_target=2000, tau_multiple=50, max_steps=20000, check_interval=100)
    progress = SamplingProgress(rule, nwalkers=32, start=0, quiet=False)
    seen = []
    for done, tau in ((100, 2.0), (200, 12.0), (300, 11.0), (400, 30.0)):
        for step in range(done - 99, done + 1):
            progress.step(step)
            seen.append(progress.percent)
        kept = done - 2 * tau
        progress.checked({"tau": np.array([tau]), "discard": int(2 * tau),
                          "ess": np.array([kept * 32 / tau]),
                          "tau_multiple_reached": kept / tau}, done)
        seen.append(progress.percent)
    text = progress.bar.desc
    progress.close()
    assert all(b >= a for a, b in zip(seen, seen[1:], strict=False))  # never backwards
    assert max(seen) < 100
    # At step 400 with tau 30: ESS 340 * 32 / 30 = 363 of 2000; 11.3 of 50 tau.
    assert text.startswith("step 400, ESS 363/2000, chain 11.3/50 tau, ~")
    assert text.endswith(" left")


# ---- what a finished fit says ----------------------------------------------------------

def test_a_stuck_chain_is_written_and_flagged_not_converged(tmp_path):
    crust = "site,thickness_km,thickness_sigma_km\nAlpha line,6.5,0.001\nBeta line,5.8,0.001\n"
    path = small_study(tmp_path / "study", sampler=CAPPED, crust=crust)
    path.write_text(path.read_text().replace("model_error = 0.3", "model_error = 0.0"))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        posterior = inversion.fit(inversion.Study.from_file(path), out=tmp_path / "out",
                                  quiet=True)
    assert not [w for w in caught if issubclass(w.category, RuntimeWarning)]
    diagnostics = _strict_json(tmp_path / "out" / "diagnostics.json")
    assert diagnostics["converged"] is False and not posterior.converged
    assert diagnostics["warnings"] == posterior.warnings and diagnostics["warnings"]
    assert all(line.startswith("NOT converged within the step cap (150 steps): ")
               for line in diagnostics["warnings"])
    assert "nan" not in (tmp_path / "out" / "report.md").read_text().lower()
    summary = pd.read_csv(tmp_path / "out" / "summary.csv")
    assert len(summary) == 3


def test_a_posterior_piled_against_a_prior_bound_is_named(tmp_path):
    tp = 'potential_temperature = { prior = "uniform", min = 1000.0, max = 1150.0 }'
    path = small_study(tmp_path / "study", sampler=CAPPED, parameters="\n".join(
        [tp, LID, WATER, 'solidus_offset = { prior = "normal", mean = 0.0, sd = 20.0 }']))
    with pytest.warns(inversion.PosteriorWarning, match="potential_temperature piles"):
        posterior = inversion.fit(inversion.Study.from_file(path), quiet=True)
    line = next(w for w in posterior.warnings if "potential_temperature piles" in w)
    assert "against the upper bound of its prior, 1150 °C" in line
    text = report.render(posterior)
    assert "## Warnings" in text and line in text


def test_no_melt_anywhere_in_the_prior_is_said(tmp_path):
    path = small_study(tmp_path / "study", sampler=CAPPED, parameters="\n".join([
        'potential_temperature = { prior = "uniform", min = 1000.0, max = 1100.0 }',
        'lithosphere_thickness = { prior = "uniform", min = 100.0, max = 150.0 }', WATER]))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        posterior = inversion.fit(inversion.Study.from_file(path), quiet=True)
    assert not [w for w in caught if issubclass(w.category, RuntimeWarning)]
    assert any(w.startswith("no melt anywhere in the prior: none of 2000 prior draws")
               for w in posterior.warnings)


def test_samples_at_the_model_base_are_named(reference):
    study = inversion.Study.from_file(reference[0])
    base = forward.MAX_PRESSURE * float(forward.depth_per_pressure(3300.0))  # 308.9 km
    chain = _ar1(200, 16, 0.5, seed=3).repeat(3, axis=2) * [30, 10, 10] + [1500, 50, 0]
    blobs = np.full(chain.shape[:2] + (len(DERIVED),), 7.0)
    blobs[..., DERIVED.index("onset_depth")] = 200.0
    assessment = assess_chain(chain, tau_multiple=5, ess_target=10)

    def warnings_with(onset_share: float) -> list[str]:
        blobs[:, : int(16 * onset_share), DERIVED.index("onset_depth")] = base
        result = ChainResult(chain, np.zeros(chain.shape[:2]), blobs.copy(),
                             np.full(16, 60.0), assessment=assessment)
        return inversion.Posterior(study, result, seed=1).posterior_warnings

    assert warnings_with(0.0) == []
    lines = warnings_with(0.25)
    assert lines == ["25 % of the posterior samples start melting at the model's base "
                     "(10 GPa, 309 km): the mantle would cross its solidus deeper than the "
                     "model reaches, so those columns are extrapolated beyond the "
                     "parameterization's calibration"]


def test_a_good_fit_has_no_warnings(reference):
    diagnostics = _strict_json(reference[1] / "diagnostics.json")
    assert diagnostics["converged"] is True and diagnostics["warnings"] == []
    assert "## Warnings" not in (reference[1] / "report.md").read_text()


# ---- burn-in: walkers out of the bulk (stragglers) ---------------------------------------

def _with_stragglers(ndim: int, seed: int, *, strays=(3, 11), until: int = 68):
    """AR(1) walkers of a standard normal posterior in `ndim` dimensions (tau about 12),
    with walkers `strays` far from the mode until step `until`: their log-posterior falls
    from 40 to 15 below the maximum over steps 0-68, as in a MAP-started run whose ball
    straddled a ridge. Returns (chain, log_prob); log p = -|x|^2 / 2."""
    chain = np.concatenate([_ar1(240, 32, 0.85, seed + j) for j in range(ndim)], axis=2)
    deficit = np.linspace(40.0, 15.0, until + 1)  # nats below the maximum, steps 0..until
    for w in strays:
        # put the excess along the first axis: x0 = sqrt(2 * deficit) (with its noise)
        chain[: until + 1, w, 0] = np.sqrt(2.0 * deficit) + 0.3 * chain[: until + 1, w, 0]
    return chain, -0.5 * np.sum(chain**2, axis=2)


@pytest.mark.parametrize("ndim", [1, 3])
def test_burn_in_drops_walkers_out_of_the_bulk(ndim):
    chain, log_prob = _with_stragglers(ndim, seed=10)
    old = assess_chain(chain)  # the 2 tau rule alone (the rule before) keeps the strays
    assert old["discard"] < 68
    new = assess_chain(chain, log_prob=log_prob)
    assert new["discard"] >= 69  # every step with a walker far out is dropped
    kept = log_prob[new["discard"]:]
    # chi^2_d / 2 below the maximum for a Gaussian: nothing kept beyond X of the median
    assert np.median(log_prob[120:]) - kept.min() < new["straggler_threshold"]
    assert new["stranded_walkers"] == []


@pytest.mark.parametrize("seed", range(6))
def test_the_straggler_rule_leaves_converged_chains_alone(seed):
    chain = _ar1(400, 32, 0.85, seed=100 + seed)
    chain = np.concatenate([chain, _ar1(400, 32, 0.85, seed=200 + seed)], axis=2)
    log_prob = -0.5 * np.sum(chain**2, axis=2)
    with_rule = assess_chain(chain, log_prob=log_prob)
    assert with_rule["discard"] == assess_chain(chain)["discard"]  # no false alarm


def test_a_walker_stranded_in_a_minor_mode_is_never_converged():
    chain = _ar1(2000, 16, 0.5, seed=3)
    chain[:, 5, 0] = 6.0 + 0.1 * chain[:, 5, 0]  # a minor mode 18 nats down, all along
    log_prob = -0.5 * chain[..., 0] ** 2
    a = assess_chain(chain, tau_multiple=50, ess_target=1000, log_prob=log_prob,
                     accepted=np.full(16, 600.0))
    assert not a["converged"]
    assert a["stranded_walkers"] == [5]
    assert any("out of the bulk" in s for s in a["shortfalls"])


def test_loo_after_the_burn_in_rule_has_no_straggler_artefact():
    # The straggler draws wreck the importance weights of PSIS-LOO (Vehtari et al. 2017:
    # k > 0.7 unreliable); after the rule every row is reliable again.
    from types import SimpleNamespace

    from lidmelt.inversion.comparison.loo import loo_from_draws, posterior_draws
    from lidmelt.inversion.study.priors import Uniform
    from toys import GaussianToy

    y = np.array([0.8, 1.4, 0.3, 1.1, 0.9, 1.6, -0.2])
    toy = GaussianToy(y, 0.5, Uniform(-10.0, 10.0))
    sd = 0.5 / math.sqrt(y.size)  # posterior of mu under a flat prior
    unit, log_prob = _with_stragglers(1, seed=10)
    chain = y.mean() + sd * unit

    def k_max(discard, tau):
        draws = posterior_draws(SimpleNamespace(chain=chain, discard=discard, tau=tau))
        return loo_from_draws(toy, draws).pareto_k_max

    old, new = assess_chain(chain), assess_chain(chain, log_prob=log_prob)
    assert k_max(old["discard"], old["tau"]) > 0.7
    assert k_max(new["discard"], new["tau"]) < 0.5


def test_a_model_or_physical_limit_is_told_apart_from_a_prior_bound_the_user_can_widen():
    from lidmelt.inversion.fitting.convergence import _bound_warnings
    from lidmelt.inversion.study.priors import Normal, Uniform

    rng = np.random.default_rng(2)
    piled = np.abs(rng.normal(0.0, 1.0, 4000))  # a half-normal: cut off at its mode
    offset = _bound_warnings("solidus_offset", -100.0 + 8.0 * piled, Normal(0.0, 20.0),
                             forward.PARAMETER_DOMAIN["solidus_offset"], "°C")
    upwelling = _bound_warnings("active_upwelling", 1.0 + 0.3 * piled, Uniform(1.0, 5.0),
                                forward.PARAMETER_DOMAIN["active_upwelling"], "")
    tp = _bound_warnings("potential_temperature", 1150.0 - 10.0 * piled,
                         Uniform(1000.0, 1150.0),
                         forward.PARAMETER_DOMAIN["potential_temperature"], "°C")
    assert len(offset) == len(upwelling) == len(tp) == 1
    # the solidus offset's -100 degC is where the model ends (forward/_validation.py)
    assert "a limit of the model" in offset[0] and "-100 °C" in offset[0]
    assert "widening the prior cannot move it" in offset[0]
    assert "a physical limit (active upwelling 1 is passive flow)" in upwelling[0]
    assert "widening the prior cannot move it" in upwelling[0]
    assert "the upper bound of its prior" in tp[0] and "widen the prior if" in tp[0]
    assert "cannot move it" not in tp[0]


def test_the_advice_names_what_helps():
    from lidmelt.inversion.fitting.convergence import not_converged_advice

    chain, log_prob = _with_stragglers(3, seed=10)
    stranded = assess_chain(chain[:100], log_prob=log_prob[:100])  # strays in the 2nd half
    assert stranded["stranded_walkers"]
    assert 'start = "map"' in not_converged_advice(stranded, "prior")
    assert "more than one mode" in not_converged_advice(stranded, "map")
    short = assess_chain(_ar1(300, 16, 0.9, seed=2), tau_multiple=50, ess_target=4000)
    assert not short["converged"] and not short["stranded_walkers"]
    advice = not_converged_advice(short, "map")
    assert "raise `max_steps`" in advice and "start" not in advice
    assert not_converged_advice({"converged": True}, "prior") == ""


def test_the_share_of_melt_made_deeper_than_5_gpa():
    from lidmelt import demo_data
    from lidmelt.inversion.fitting.convergence import DEEP_PRESSURE, deep_melt_share

    logpost = inversion.LogPosterior(inversion.Study.from_file(demo_data.study_path()))
    assert logpost.names[:2] == ("potential_temperature", "lithosphere_thickness")
    draws = np.zeros((3, logpost.ndim))
    draws[:, 0], draws[:, 1] = [1400.0, 1600.0, 1650.0], 10.0
    share = deep_melt_share(logpost, draws)
    # The same share summed on a 30 times finer pressure grid of the column's F profile:
    # checks the weights and the 5 GPa cut (not the melting law, tested elsewhere).
    column = logpost.column(draws)
    top, onset = column.top_pressure[:, None], column.onset_pressure[:, None]
    edges = top + (onset - top) * np.linspace(0.0, 1.0, 3841)
    _, frac = column.profile(edges)
    frac[:, -1] = 0.0
    made = np.maximum(frac[:, :-1] - frac[:, 1:], 0.0)
    mids = 0.5 * (edges[:, 1:] + edges[:, :-1])
    deep = np.sum(np.where(mids > DEEP_PRESSURE, made, 0.0), axis=1) / made.sum(axis=1)
    np.testing.assert_allclose(share, deep, atol=0.01)  # 128 intervals vs 3840
    assert share[0] == 0.0 and share[1] > 0.15 and share[2] > share[1]
