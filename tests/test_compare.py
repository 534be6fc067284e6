"""`compare` and ``lidmelt compare`` end to end: ranking, outputs, resume and --force."""

from __future__ import annotations

import json
import shutil
import warnings
from pathlib import Path

import lidmelt
import numpy as np
import pandas as pd
import pytest
from lidmelt.inversion import OUTPUT_FILES, read_scenarios
from lidmelt.cli import main
from lidmelt.inversion.comparison import EVIDENCE_COLUMNS, ComparisonWarning
from lidmelt.inversion.comparison.outputs import COMPARISON_FILES, SCENARIO_FILE

DATA = Path(__file__).parent / "data"
TRUTH = {"potential_temperature": 1380.0, "lithosphere_thickness": 45.0}


def _simulated_scenarios():
    """The test scenarios on data simulated at Tp 1380 degC, lid 45 km (inside 'thinned')."""
    path = DATA / "scenarios.toml"
    found = read_scenarios(path)
    logpost = lidmelt.inversion.LogPosterior(found.base)
    column = logpost.column(np.array([[TRUTH["potential_temperature"],
                                       TRUTH["lithosphere_thickness"]]]))
    rng = np.random.default_rng(20)
    simulated = [block.simulate(column, rng) for block in found.base.observations]
    return read_scenarios(path, base=found.base.with_observations(simulated))


@pytest.fixture(scope="module")
def simulated():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ComparisonWarning)
        result = lidmelt.compare(_simulated_scenarios(), seed=3)
    return result, [str(w.message) for w in caught if w.category is ComparisonWarning]


def test_the_simulating_scenario_wins(simulated):
    result, _ = simulated
    table = result.table().set_index("scenario")
    # data simulated inside 'thinned'; 'unthinned' (lid 100 km) cannot make basalts that
    # leave the melting column at 1.4 GPa, whatever its prior odds of 2
    assert table.loc["thinned", "probability"] > 0.9
    assert table.loc["unthinned", "probability"] < 0.01
    assert result.ranking() == ["thinned", "unthinned"]
    assert table.loc["thinned", "log_bayes_factor"] == 0.0
    assert table.loc["unthinned", "log_bayes_factor"] < -10
    # LOO reads the same way, beyond twice the standard error of the difference
    loo = result.loo_table()
    assert loo.index[0] == "thinned"
    assert loo.loc["unthinned", "elpd_diff"] > 2 * loo.loc["unthinned", "dse"]


def test_the_scenario_that_cannot_fit_is_flagged(simulated):
    result, messages = simulated
    thinned, unthinned = result.results
    assert thinned.fit.fits and not unthinned.fit.fits
    assert any("'unthinned' does not fit the data" in m for m in messages)
    assert not any("'thinned' does not fit" in m for m in messages)


def test_posteriors_cover_the_truth(simulated):
    result, _ = simulated
    summary = result.results[0].posterior.summary().set_index("parameter")
    for name, value in TRUTH.items():
        assert summary.loc[name, "q2.5"] < value < summary.loc[name, "q97.5"]


def test_table_columns_and_values(simulated):
    result, _ = simulated
    table = result.table()
    assert tuple(table.columns) == EVIDENCE_COLUMNS
    row = table.set_index("scenario").loc["unthinned"]
    assert row["n_free"] == 1 and row["prior_odds"] == 2.0
    assert table["probability"].sum() == pytest.approx(1.0)
    thinned = result.results[0].evidence
    assert table.loc[0, "log_evidence_quadrature"] == thinned.quadrature
    # probability = odds * Z / sum (Kass & Raftery 1995, eq. 1-2), recomputed by hand
    z = np.exp(table["log_evidence"] - table["log_evidence"].max()) * table["prior_odds"]
    np.testing.assert_allclose(table["probability"], z / z.sum(), rtol=1e-9)


def test_save_writes_every_file(simulated, tmp_path):
    result, _ = simulated
    out = result.save(tmp_path / "comparison")
    assert sorted(p.name for p in out.iterdir()) == sorted(
        [*COMPARISON_FILES, "thinned", "unthinned"])
    assert "lidmelt-files.json" in COMPARISON_FILES  # the folder is marked as lidmelt's
    for name in ("thinned", "unthinned"):
        assert sorted(p.name for p in (out / name).iterdir()) == sorted(
            [*OUTPUT_FILES, SCENARIO_FILE])
    csv = pd.read_csv(out / "evidence.csv")
    assert tuple(csv.columns) == EVIDENCE_COLUMNS
    np.testing.assert_allclose(csv["log_evidence"], result.table()["log_evidence"],
                               rtol=1e-5)
    report = (out / "report.md").read_text()
    assert "Most probable scenario: **thinned**" in report
    assert "very strong evidence for thinned" in report  # Kass & Raftery (1995) scale
    assert "'unthinned' does not fit the data" in report
    assert "no basis on their own for hazard or resource decisions" in report
    assert not list(tmp_path.glob(".*"))  # no temporary folder left


# ---- the command ---------------------------------------------------------------------------


@pytest.fixture
def study_copy(tmp_path):
    for name in ("scenarios.toml", "crust.csv", "basalts.csv"):
        shutil.copy(DATA / name, tmp_path / name)
    return tmp_path / "scenarios.toml"


class _StopAt:
    """A progress callback that interrupts the run when a scenario's work begins."""

    def __init__(self, name: str) -> None:
        self.name, self.seen = name, []

    def __call__(self, message: str) -> None:
        self.seen.append(message)
        if message.startswith(f"{self.name}:"):
            raise KeyboardInterrupt


def test_interrupted_comparison_resumes_and_refuses_changed_inputs(study_copy, capsys):
    out = study_copy.parent / "cmp"
    with pytest.raises(KeyboardInterrupt):
        lidmelt.compare(study_copy, out=out, progress=_StopAt("unthinned"))
    partial = out.with_name("cmp.partial")
    stored = partial / "thinned" / SCENARIO_FILE
    assert stored.is_file() and not out.exists()
    before = stored.read_text()
    other = study_copy.parent / "cmp2"  # a second interrupted run, for the end of the test
    shutil.copytree(partial, other.with_name("cmp2.partial"))
    # a second run without --resume or --force is refused: the checkpoint is kept
    assert main(["compare", str(study_copy), "--out", str(out), "--quiet"]) == 2
    assert "--resume" in capsys.readouterr().err
    # --resume computes only the unfinished scenario
    assert main(["compare", str(study_copy), "--out", str(out), "--quiet", "--resume"]) == 0
    printed = capsys.readouterr().out
    assert "Most probable: thinned" in printed
    assert (out / "thinned" / SCENARIO_FILE).read_text() == before
    assert not partial.exists() and (out / "unthinned" / "chain.h5").is_file()
    manifest = json.loads((out / "comparison.json").read_text())
    assert manifest["ranking"][0] == "thinned" and manifest["written_by"] == "lidmelt compare"
    # the finished folder is not replaced without --force
    assert main(["compare", str(study_copy), "--out", str(out), "--quiet"]) == 2
    assert "already exists" in capsys.readouterr().err

    # an interrupted run whose table then changes cannot be resumed
    with open(study_copy.parent / "crust.csv", "a") as table:
        table.write("MS-05,7.2,0.9,south line\n")
    assert main(["compare", str(study_copy), "--out", str(other), "--resume"]) == 2
    err = capsys.readouterr().err
    assert "crust.csv changed since the interrupted comparison" in err
    assert len(err.strip().splitlines()) == 1


def test_force_replaces_only_what_lidmelt_compare_wrote(simulated, study_copy, capsys,
                                                       monkeypatch):
    foreign = study_copy.parent / "mine"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("keep me")
    code = main(["compare", str(study_copy), "--out", str(foreign), "--force", "--quiet"])
    assert code == 2
    assert "was not written by lidmelt compare" in capsys.readouterr().err
    assert (foreign / "notes.txt").read_text() == "keep me"
    # a comparison folder lidmelt wrote is replaced, and nothing is left beside it
    result, _ = simulated
    done = result.save(study_copy.parent / "done")
    (done / "thinned" / "summary.csv").write_text("stale")
    result.save(done, force=True)
    assert (done / "thinned" / "summary.csv").read_text().startswith("parameter,")
    assert not list(study_copy.parent.glob(".done*"))
    # ... but not once a user's file is inside it
    (done / "thinned" / "notes.txt").write_text("mine")
    assert main(["compare", str(study_copy), "--out", str(done), "--force", "--quiet"]) == 2
    assert "holds 'thinned/notes.txt'" in capsys.readouterr().err
    assert (done / "thinned" / "notes.txt").is_file() and (done / "evidence.csv").is_file()
    # never the working folder or the study's own folder, even with a manifest there
    shutil.copy(done / "lidmelt-files.json", study_copy.parent / "lidmelt-files.json")
    monkeypatch.chdir(study_copy.parent)
    assert main(["compare", str(study_copy), "--out", ".", "--force", "--quiet"]) == 2
    assert "the current folder" in capsys.readouterr().err
    assert (study_copy.parent / "crust.csv").is_file()


def test_compare_is_loaded_lazily():
    import subprocess
    import sys

    code = ("import sys, lidmelt; "
            "heavy = [m for m in ('nautilus', 'arviz', 'sklearn', "
            "'lidmelt.inversion.comparison') if m in sys.modules]; "
            "print(heavy); lidmelt.compare; print('lidmelt.inversion.comparison' in "
            "sys.modules, 'nautilus' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split("\n")
    assert out[0] == "[]"  # import lidmelt loads none of them
    assert out[1] == "True False"  # lidmelt.compare loads the code, not the sampler


def test_scenarios_with_a_free_model_error(tmp_path):
    # A free model error is a sampled parameter of every scenario: it counts in n_free,
    # is summarised under its block's name, and the fit check replicates each draw's data
    # with its own value.
    for name in ("crust.csv", "basalts.csv"):
        shutil.copy(DATA / name, tmp_path / name)
    text = (DATA / "scenarios.toml").read_text()
    assert "model_error = 0.5" in text  # guards the test itself
    text = text.replace("model_error = 0.5",
                        'model_error = { prior = "log-uniform", min = 0.05, max = 3.0 }')
    (tmp_path / "scenarios.toml").write_text(text)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ComparisonWarning)  # 'unthinned' cannot fit
        result = lidmelt.compare(read_scenarios(tmp_path / "scenarios.toml"), seed=3)
    table = result.table().set_index("scenario")
    assert table.loc["unthinned", "n_free"] == 2 and table.loc["thinned", "n_free"] == 3
    summary = result.results[0].posterior.summary().set_index("parameter")
    assert summary.loc["crust.model_error", "unit"] == "km"
    assert 0.05 <= summary.loc["crust.model_error", "q2.5"] < summary.loc[
        "crust.model_error", "q97.5"] <= 3.0
    assert 0.0 <= result.results[0].fit.p_value <= 1.0
    assert table["probability"].sum() == pytest.approx(1.0)


def test_the_headline_carries_an_unreliable_loo_and_a_posterior_not_converged(simulated):
    # PSIS-LOO rows with Pareto k > 0.7 are unreliable (Vehtari et al. 2017), and draws
    # of a chain that did not converge are not the posterior: a ranking resting on them
    # must say so where it is stated, not only under Warnings.
    import copy
    import dataclasses

    from lidmelt.inversion.comparison import Comparison
    from lidmelt.inversion.comparison.report import render

    result, _ = simulated
    thinned, unthinned = result.results
    assert thinned.name == "thinned"
    # 'unthinned' cannot fit the data, and its LOO has rows with k > 0.7 already
    assert unthinned.loo.unreliable_rows.size
    headline = render(result).split("## Scenarios")[0]
    assert "**this LOO reading is not reliable**" in headline
    assert "PSIS-LOO of unthinned is unreliable" in headline
    fine = dataclasses.replace(unthinned, loo=dataclasses.replace(
        unthinned.loo, pareto_k=np.full(unthinned.loo.pareto_k.size, 0.3)))
    thinned = dataclasses.replace(thinned, loo=dataclasses.replace(
        thinned.loo, pareto_k=np.full(thinned.loo.pareto_k.size, 0.3)))
    control = render(Comparison(result.scenarios, [thinned, fine], seed=result.seed))
    assert "the evidence and LOO agree" in control and "not reliable" not in control
    stuck = copy.copy(thinned.posterior)
    stuck.converged = False
    k = np.full(thinned.loo.pareto_k.size, 0.3)
    k[:6] = 1.79
    loo = dataclasses.replace(thinned.loo, pareto_k=k, pareto_k_max=1.79, p_loo=8.2)
    bad = Comparison(result.scenarios, [dataclasses.replace(thinned, posterior=stuck,
                                                            loo=loo), fine],
                     seed=result.seed)
    text = render(bad)
    headline = text.split("## Scenarios")[0]
    assert "the evidence and LOO agree" not in text
    assert "**this LOO reading is not reliable**" in headline
    assert "the posterior of thinned did NOT converge" in headline
    assert f"Pareto k up to 1.79 on 6 of {k.size} rows; p_loo 8.2 for 2 free" in headline
    loo_section = text.split("## Leave-one-out")[1].split("##")[0]
    assert "**This ranking is not reliable**" in loo_section
