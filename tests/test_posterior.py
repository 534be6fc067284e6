"""The log-posterior, the Posterior object, its atomic save and the report."""

from __future__ import annotations

import json
import math
import statistics

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.stats.mstats import mquantiles

from lidmelt import demo_data
from lidmelt import forward
from lidmelt import inversion
from lidmelt.inversion.results import figures
from lidmelt.inversion.fitting.log_posterior import DERIVED, LogPosterior
from lidmelt.inversion.observations import CrustalThickness, MeltingPressure
from lidmelt.inversion.study.priors import LogUniform, Uniform


@pytest.fixture(scope="module")
def study():
    return inversion.Study.from_file(demo_data.study_path())


@pytest.fixture(scope="module")
def quick(study):
    # A short run (ESS 300) is enough to test the bookkeeping, not the statistics.
    return inversion.fit(study.with_sampler(walkers=16, ess_target=300, tau_multiple=20,
                                            check_interval=50), quiet=True)


def test_log_posterior_is_prior_plus_likelihoods_from_forward_model(study):
    logpost = LogPosterior(study)
    theta = np.array([[1400.0, 46.0, 0.0], [1350.0, 30.0, 12.0], [1500.0, 80.0, -20.0]])
    out = logpost(theta)
    assert out.shape == (3, 1 + len(DERIVED))
    column = forward.melt_column(theta[:, 0], theta[:, 1], water=150.0,
                                 solidus_offset=theta[:, 2], active_upwelling=1.0,
                                 parameterization="katz2003")
    values = {"potential_temperature": theta[:, 0], "lithosphere_thickness": theta[:, 1],
              "water": np.full(3, 150.0), "active_upwelling": np.ones(3),
              "solidus_offset": theta[:, 2]}
    # Priors of the demo study file by scipy.stats; each block's likelihood is checked
    # against scipy in test_observations, so here they are only summed.
    expected = (stats.uniform.logpdf(theta[:, 0], 1250.0, 350.0)
                + stats.uniform.logpdf(theta[:, 1], 10.0, 100.0)
                + stats.truncnorm.logpdf(theta[:, 2], -5.0, 5.0, loc=0.0, scale=20.0))
    expected = expected + sum(b.log_likelihood(column, parameters=values)
                              for b in study.observations)
    np.testing.assert_allclose(out[:, 0], expected, rtol=1e-12)
    for k, name in enumerate(DERIVED):
        np.testing.assert_allclose(out[:, 1 + k], getattr(column, name), rtol=1e-12)


def test_crust_only_log_posterior_against_scipy_stats(study):
    crust = next(b for b in study.observations if b.kind == "crustal_thickness")
    only = study.with_observations([crust])
    logpost = LogPosterior(only)
    theta = np.array([[1420.0, 40.0, 5.0]])
    column = forward.melt_column(1420.0, 40.0, water=150.0, solidus_offset=5.0)
    data = crust.data
    sd = np.hypot(data["thickness_sigma_km"], crust.model_error)
    like = stats.norm.logpdf(data["thickness_km"], float(column.crustal_thickness), sd).sum()
    prior = (stats.uniform.logpdf(1420.0, 1250.0, 350.0)
             + stats.uniform.logpdf(40.0, 10.0, 100.0)
             + stats.truncnorm.logpdf(5.0, -5.0, 5.0, loc=0.0, scale=20.0))
    np.testing.assert_allclose(logpost(theta)[0, 0], like + prior, rtol=1e-10)


def test_outside_prior_or_domain_is_minus_infinity_with_nan_blobs(study):
    logpost = LogPosterior(study)
    theta = np.array([[1200.0, 46.0, 0.0],      # below the Tp prior
                      [1400.0, 200.0, 0.0],     # lid above its prior
                      [1400.0, 46.0, 150.0],    # shift outside the forward domain
                      [1400.0, 46.0, 0.0]])
    out = logpost(theta)
    assert np.all(np.isneginf(out[:3, 0])) and np.isfinite(out[3, 0])
    assert np.all(np.isnan(out[:3, 1:])) and np.all(np.isfinite(out[3, 1:]))
    assert not np.any(np.isnan(out[:, 0]))


def test_fixed_parameters_are_filled_in(study):
    values = LogPosterior(study).parameters(np.array([[1400.0, 46.0, 3.0]]))
    assert values["water"][0] == 150.0 and values["active_upwelling"][0] == 1.0
    assert values["solidus_offset"][0] == 3.0


def test_summary_matches_independent_quantiles_of_kept_chain(quick):
    summary = quick.summary()
    kept = quick.chain[quick.discard:].reshape(-1, len(quick.names))
    for j, name in enumerate(quick.names):
        row = summary.set_index("parameter").loc[name]
        # Independent routes: scipy.stats.mstats.mquantiles with alphap = betap = 1 (the
        # linear-interpolation definition, Hyndman & Fan 1996 type 7) and the standard
        # library's statistics.stdev.
        expected = mquantiles(kept[:, j], [0.025, 0.16, 0.5, 0.84, 0.975], alphap=1,
                              betap=1)
        np.testing.assert_allclose([row["q2.5"], row["q16"], row["median"], row["q84"],
                                    row["q97.5"]], expected, rtol=1e-12)
        np.testing.assert_allclose(row["sd"], statistics.stdev(kept[:, j]), rtol=1e-9)
        assert row["mean"] == pytest.approx(math.fsum(kept[:, j]) / kept.shape[0],
                                            rel=1e-12)
    # The MAP is at least as probable as every sample.
    assert quick.map["log_posterior"] >= quick.log_prob.max() - 1e-9
    derived = quick.derived_summary()
    assert derived["parameter"].tolist() == list(DERIVED)
    assert derived.set_index("parameter").loc["crustal_thickness", "unit"] == "km"


def test_samples_are_thinned_after_burn_in(quick):
    samples = quick.samples
    assert samples["step"].min() >= quick.discard
    assert np.all(np.diff(np.unique(samples["step"])) == quick.thin)
    assert set(quick.names) | set(DERIVED) <= set(samples.columns)
    row = samples.iloc[5]
    np.testing.assert_array_equal(
        quick.chain[int(row["step"]), int(row["walker"])],
        row[list(quick.names)].to_numpy(float))


def test_failed_save_leaves_nothing_behind(quick, tmp_path, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("disk full while drawing")

    monkeypatch.setattr(figures, "figure_files", broken)
    with pytest.raises(RuntimeError, match="disk full"):
        quick.save(tmp_path / "result")
    assert list(tmp_path.iterdir()) == []


def test_save_refuses_existing_folder_unless_forced(quick, tmp_path):
    target = tmp_path / "result"
    target.mkdir()
    with pytest.raises(inversion.InputError, match="already exists; choose another folder"):
        quick.save(target)
    quick.save(target, force=True)  # an empty folder: replacing it removes nothing of theirs
    (target / "notes.txt").write_text("mine")
    with pytest.raises(inversion.InputError, match="did not write"):
        quick.save(target, force=True)  # a file of the user's: never
    (target / "notes.txt").unlink()
    quick.save(target, force=True)
    quick.save(target, force=True)
    assert pd.read_csv(target / "summary.csv").shape[0] == len(quick.names)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["result"]


def test_step_cap_flags_not_converged_everywhere(study, tmp_path):
    capped = study.with_sampler(walkers=16, ess_target=5000, max_steps=100, check_interval=50)
    with pytest.warns(inversion.NotConvergedWarning, match="NOT converged after 100 steps"):
        posterior = inversion.fit(capped, quiet=True, out=tmp_path / "capped")
    assert not posterior.converged
    diagnostics = json.loads((tmp_path / "capped" / "diagnostics.json").read_text())
    assert diagnostics["converged"] is False and diagnostics["steps"] == 100
    report = (tmp_path / "capped" / "report.md").read_text()
    assert "did NOT converge" in report and "max_steps" in report


def test_report_states_numbers_with_units_and_caution(quick):
    from lidmelt.inversion.results.report import render

    text = render(quick)
    row = quick.summary().set_index("parameter").loc["potential_temperature"]
    assert f"{row['median']:.0f}" in text and "°C" in text and " km" in text
    assert "68 %" in text and "95 %" in text
    assert "no basis on their own for hazard or resource decisions" in text
    assert "katz2003" in text


def test_report_states_every_sampler_setting_used(quick):
    from lidmelt.inversion.results.report import render

    text = render(quick)
    section = text.split("## Sampler settings used")[1].split("##")[0]
    # quick: the demo study file (start "map", seed 1) with four settings replaced; the
    # README's defaults are max_steps 20000 and seed 1.
    for item in ("`walkers` = 16;", "`seed` = 1 (default);", "`ess_target` = 300;",
                 "`tau_multiple` = 20;", "`max_steps` = 20000 (default);",
                 "`check_interval` = 50;", '`start` = "map"'):
        assert item in section, (item, section)


def test_too_few_walkers_are_refused_by_the_study_before_any_fit(study):
    # The one check lives in Study (fit takes a validated study): a study with too few
    # walkers cannot be made, so no fit ever starts with them.
    with pytest.raises(inversion.InputError, match=r"walkers = 4 is too few for 3 free "
                                                   r"parameters.*sampler needs at least 6"):
        study.with_sampler(walkers=4)
    assert study.with_sampler(walkers=6).sampler.walkers == 6  # the bound itself is fine


def test_pointwise_log_likelihood_sums_to_the_total(study):
    # the per-row terms (for leave-one-out comparison) must add up to what the sampler uses
    logpost = LogPosterior(study)
    theta = np.array([[1400.0, 46.0, 0.0], [1350.0, 30.0, 12.0], [1200.0, 120.0, -20.0]])
    rows = logpost.pointwise_log_likelihood(theta)
    assert rows.shape == (3, sum(len(b) for b in study.observations))
    assert logpost.rows[0] == (study.observations[0].name, study.observations[0].ids[0])
    np.testing.assert_allclose(rows.sum(axis=1), logpost.log_likelihood(theta), rtol=1e-12)
    # The third point makes no melt: each crust row is the Gaussian at zero thickness
    # less 1 nat per km that the lid lies below the onset (docs/model.md, no-melt penalty).
    column = logpost.column(theta[2:])
    assert not column.produces_melt[0]
    crust = study.observations[0]
    distance = 120.0 - float(column.onset_depth[0])
    sd = np.hypot(crust.data["thickness_sigma_km"], 0.3)  # model_error = 0.3 km in the study file
    np.testing.assert_allclose(
        rows[2, :len(crust)],
        stats.norm.logpdf(crust.data["thickness_km"], 0.0, sd) - distance, rtol=1e-12)


# ---- free model errors ----------------------------------------------------------------


def _with_free_errors(study):
    """The demo study with the crust model error and basalt temperature error free."""
    crust, basalts = study.observations
    free = [
        CrustalThickness.from_frame(crust.data, file=crust.file,
                                    model_error=LogUniform(0.01, 2.0)),
        MeltingPressure.from_frame(basalts.data, file=basalts.file, equilibration="path",
                                   path_points=32, temperature_model_error=Uniform(0, 80)),
    ]
    return study.with_observations(free)


@pytest.fixture(scope="module")
def quick_errors(study):
    return inversion.fit(_with_free_errors(study).with_sampler(
        walkers=16, ess_target=300, tau_multiple=20, check_interval=50), quiet=True)


def test_log_posterior_with_a_free_model_error_against_scipy(study):
    crust = CrustalThickness.from_frame(study.observations[0].data, file="crust.csv",
                                        model_error=LogUniform(0.01, 2.0))
    logpost = LogPosterior(study.with_observations([crust]))
    assert logpost.names == ("potential_temperature", "lithosphere_thickness",
                             "solidus_offset", "crust.model_error")
    assert logpost.units["crust.model_error"] == "km"
    theta = np.array([[1420.0, 40.0, 5.0, 0.7], [1420.0, 40.0, 5.0, -0.1]])
    column = forward.melt_column(1420.0, 40.0, water=150.0, solidus_offset=5.0)
    data = crust.data
    sd = np.sqrt(data["thickness_sigma_km"] ** 2 + 0.7**2)
    like = stats.norm.logpdf(data["thickness_km"], float(column.crustal_thickness), sd).sum()
    prior = (stats.uniform.logpdf(1420.0, 1250.0, 350.0)
             + stats.uniform.logpdf(40.0, 10.0, 100.0)
             + stats.truncnorm.logpdf(5.0, -5.0, 5.0, loc=0.0, scale=20.0)
             + stats.loguniform.logpdf(0.7, 0.01, 2.0))
    out = logpost(theta)
    np.testing.assert_allclose(out[0, 0], like + prior, rtol=1e-10)
    assert np.isneginf(out[1, 0])  # a negative standard deviation is outside the domain
    np.testing.assert_allclose(logpost.pointwise_log_likelihood(theta[:1]).sum(),
                               like, rtol=1e-10)


def test_free_model_errors_are_summarised_reported_and_drawn(quick_errors):
    names = ("potential_temperature", "lithosphere_thickness", "solidus_offset",
             "crust.model_error", "basalts.temperature_model_error")
    assert quick_errors.names == names
    summary = quick_errors.summary().set_index("parameter")
    assert summary.loc["crust.model_error", "unit"] == "km"
    assert summary.loc["basalts.temperature_model_error", "unit"] == "degC"
    assert 0.01 <= summary.loc["crust.model_error", "q2.5"]
    assert summary.loc["basalts.temperature_model_error", "q97.5"] <= 80.0
    assert set(names) <= set(quick_errors.samples.columns)
    assert 0.01 <= quick_errors.map["crust.model_error"] <= 2.0  # inside its prior

    from lidmelt.inversion.results.report import render

    text = render(quick_errors)
    assert "Model error of crust" in text
    assert "Prior on the temperature model error of basalts: uniform on [0, 80] °C" in text
    fig = figures.corner_figure(quick_errors)
    ndim = len(names)
    bottom = np.array(fig.axes).reshape(ndim, ndim)[-1]
    assert [ax.get_xlabel() for ax in bottom] == [
        "$T_p$ (°C)", "lid (km)", r"$\Delta T_s$ (°C)", r"$\sigma_{model}$, crust (km)",
        r"$\sigma_{model,T}$, basalts (°C)"]
    # The fit figure's error bars add the posterior-median model error to the stated
    # sigma; the crust panel's y label names what the data are compared with.
    from matplotlib.container import ErrorbarContainer

    crust_ax = figures.fit_figure(quick_errors, ndraws=20).axes[0]
    bars = next(c for c in crust_ax.containers if isinstance(c, ErrorbarContainer))
    segments = bars.lines[2][0].get_segments()
    half = np.array([0.5 * (seg[1, 1] - seg[0, 1]) for seg in segments])
    median = quick_errors.samples["crust.model_error"].median()
    sigma = quick_errors.study.observations[0].data["thickness_sigma_km"].to_numpy()
    np.testing.assert_allclose(half, np.hypot(sigma, median), rtol=1e-9)
    assert crust_ax.get_ylabel() == "Igneous crust thickness (km)"
    assert "incl. model error" in bars.get_label() and "posterior median" in bars.get_label()
