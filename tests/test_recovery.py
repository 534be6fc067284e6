"""Statistical validity of the whole inversion on data simulated from the forward model.

(a) Synthetic recovery: known truths lie inside the 95 % posterior intervals about as often
    as they should. (b) A small simulation-based calibration (Talts et al. 2018,
    arXiv:1804.06788): prior draws rank uniformly among posterior draws.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from lidmelt import demo_data
from lidmelt import inversion
from lidmelt.inversion.observations import CrustalThickness, MeltingPressure
from lidmelt.inversion.study.priors import Uniform

# Five truths spread over the demo's prior (Tp degC, lid km, solidus offset degC).
TRUTHS = [
    (1400.0, 46.0, 0.0),
    (1360.0, 35.0, -10.0),
    (1450.0, 60.0, 15.0),
    (1420.0, 25.0, 5.0),
    (1380.0, 55.0, -20.0),
]
NAMES = ("potential_temperature", "lithosphere_thickness", "solidus_offset")


def _simulated(study, truth, rng):
    """The study with its observations replaced by draws from the likelihood at `truth`."""
    column = inversion.LogPosterior(study).column(np.array([truth]))
    return study.with_observations(block.simulate(column, rng) for block in study.observations)


@pytest.fixture(scope="module")
def demo_study():
    study = inversion.Study.from_file(demo_data.study_path())
    # Shorter chains than the default (ESS 600 instead of 2000) keep the test quick; the
    # 95 % quantiles of 600 effective draws are accurate to about +-0.1 sd.
    return study.with_sampler(ess_target=600, tau_multiple=40, walkers=32, check_interval=100)


def test_synthetic_recovery_within_95_percent_for_several_seeds(demo_study):
    misses, far = 0, []
    for seed, truth in enumerate(TRUTHS):
        rng = np.random.default_rng(1000 + seed)
        posterior = inversion.fit(_simulated(demo_study, truth, rng), seed=seed, quiet=True)
        assert posterior.converged
        summary = posterior.summary().set_index("parameter")
        for name, value in zip(NAMES, truth, strict=True):
            row = summary.loc[name]
            misses += not (row["q2.5"] <= value <= row["q97.5"])
            far.append(abs(value - row["median"]) / row["sd"])
    # 15 intervals at 95 %: with calibrated intervals the number of misses is
    # binomial(15, 0.05) (scipy.stats.binom); allow the count that is exceeded with
    # probability below 1 % (3 misses; P(4 or more) = 0.005).
    allowed = int(stats.binom.isf(0.01, 15, 0.05))
    assert misses <= allowed, f"{misses} of 15 truths outside the 95 % interval"
    assert max(far) < 4.0  # no truth 4 posterior sd from the median (p < 1e-4 each)


def _sbc_study(demo_study):
    """A cheap variant for many fits: basalts at the top of melting, priors inside melt."""
    basalts = next(b for b in demo_study.observations if b.kind == "melting_pressure")
    crust = next(b for b in demo_study.observations if b.kind == "crustal_thickness")
    top = MeltingPressure.from_frame(basalts.data.iloc[:5].copy(), equilibration="top")
    study = demo_study.with_observations([crust, top])
    study = study.with_overrides({
        "potential_temperature": {"prior": "uniform", "min": 1350.0, "max": 1480.0},
        "lithosphere_thickness": {"prior": "uniform", "min": 20.0, "max": 70.0},
        "solidus_offset": {"prior": "normal", "mean": 0.0, "sd": 15.0, "min": -45.0,
                          "max": 45.0},
    })
    # About 200 effective draws per fit are plenty to rank among 9 thinned draws.
    return study.with_sampler(ess_target=200, tau_multiple=25, walkers=16, check_interval=50)


@pytest.mark.slow
def test_simulation_based_calibration_ranks_are_uniform(demo_study):
    study = _sbc_study(demo_study)
    logpost = inversion.LogPosterior(study)
    replicas, draws = 40, 9
    rng = np.random.default_rng(2018)
    ranks = np.empty((replicas, len(NAMES)), dtype=int)
    for i in range(replicas):
        truth = np.array([p.sample(rng) for p in logpost.priors], dtype=float)
        posterior = inversion.fit(_simulated(study, truth, rng), seed=i, quiet=True)
        sample = posterior.samples[list(NAMES)].to_numpy()
        pick = sample[rng.choice(len(sample), size=draws, replace=False)]
        ranks[i] = np.sum(pick < truth, axis=0)  # rank in 0..draws
    # Talts et al. (2018): ranks of the prior draw are uniform on {0, ..., L}. Chi-square
    # test on the L + 1 = 10 rank bins (4 expected per bin), per parameter; the threshold
    # is 0.001 so that only a clear miscalibration fails.
    for j, name in enumerate(NAMES):
        counts = np.bincount(ranks[:, j], minlength=draws + 1)
        p_value = stats.chisquare(counts).pvalue
        assert p_value > 1e-3, f"{name}: rank histogram {counts.tolist()} p = {p_value:.2g}"
    # And the ranks' mean (L/2 = 4.5 expected, sd sqrt((L+1)^2-1)/sqrt(12 n) = 0.45) is
    # not shifted by more than 4 sd, which a biased posterior would show.
    np.testing.assert_array_less(np.abs(ranks.mean(axis=0) - draws / 2),
                                 4 * np.sqrt(((draws + 1) ** 2 - 1) / 12 / replicas))


def test_free_model_errors_recover_extra_scatter():
    # Data scattered beyond their stated errors (a basalt suite is never as tidy as its
    # analytical errors): stated 0.3 km and 0.1 GPa, true extra scatter 0.8 km and
    # 0.25 GPa. Fitted with both model errors free, every truth, the two model errors
    # included, lies inside its central 99 % posterior interval.
    truth = {"potential_temperature": 1400.0, "lithosphere_thickness": 40.0,
             "crust.model_error": 0.8, "basalts.model_error": 0.25}
    crust = CrustalThickness.from_frame(
        pd.DataFrame({"site": [f"c{i}" for i in range(30)], "thickness_km": 7.0,
                      "thickness_sigma_km": 0.3}), file="crust.csv",
        model_error={"prior": "log-uniform", "min": 0.01, "max": 5.0})
    basalts = MeltingPressure.from_frame(
        pd.DataFrame({"sample": [f"b{i}" for i in range(20)], "pressure_gpa": 1.5,
                      "pressure_sigma_gpa": 0.1}), file="basalts.csv", equilibration="top",
        model_error={"prior": "log-uniform", "min": 0.01, "max": 2.0})
    study = inversion.Study(
        name="extra scatter", source=None, model=inversion.ModelSettings(),
        priors={"potential_temperature": Uniform(1250.0, 1600.0),
                "lithosphere_thickness": Uniform(10.0, 100.0)},
        fixed={"water": 0.0, "active_upwelling": 1.0, "solidus_offset": 0.0},
        observations=(crust, basalts),
        sampler=inversion.SamplerSettings(walkers=16, ess_target=400, tau_multiple=30,
                                          check_interval=100, start="map"))
    column = inversion.LogPosterior(study).column(np.array([[1400.0, 40.0, 0.8, 0.25]]))
    rng = np.random.default_rng(77)
    simulated = study.with_observations([
        crust.simulate(column, rng, errors={"model_error": 0.8}),
        basalts.simulate(column, rng, errors={"model_error": 0.25})])
    posterior = inversion.fit(simulated, seed=3, quiet=True)
    assert posterior.converged
    assert posterior.names == tuple(truth)
    samples = posterior.samples
    for name, value in truth.items():
        low, high = np.quantile(samples[name], [0.005, 0.995])
        assert low <= value <= high, (name, value, low, high)
    # Fitted with the stated errors alone, the same data claim more than they hold: the
    # Tp interval is much narrower than with the model errors free.
    stated = simulated.with_observations(
        type(block).from_frame(block.data, file=block.file, **options)
        for block, options in zip(simulated.observations,
                                  ({}, {"equilibration": "top"}), strict=True))
    overconfident = inversion.fit(stated, seed=3, quiet=True).samples

    def width(frame):
        return np.diff(np.quantile(frame["potential_temperature"], [0.16, 0.84]))[0]

    # Expected ratio about 0.3 / hypot(0.3, 0.8) = 0.35 (measured 0.37).
    assert width(overconfident) < 0.6 * width(samples)
