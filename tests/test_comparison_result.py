"""The comparison's table, probabilities, warnings and report from given per-scenario
numbers (no sampling), and a scenario without free parameters end to end."""

from __future__ import annotations

import math
from pathlib import Path

import lidmelt
import numpy as np
import pandas as pd
import pytest
from lidmelt.inversion import LogPosterior, Study
from lidmelt.inversion.comparison import (
    Comparison,
    ComparisonWarning,
    EvidenceEstimate,
    LooEstimate,
)
from lidmelt.inversion.comparison.checks import FitCheck
from lidmelt.inversion.comparison.report import render
from lidmelt.inversion.comparison.result import ScenarioResult
from lidmelt.inversion.study.scenarios import Scenario, ScenarioSet

DATA = Path(__file__).parent / "data"


def _fixed(study, tp, lid):
    """The study with every parameter held (so it needs no posterior)."""
    return study.with_overrides({"potential_temperature": tp, "lithosphere_thickness": lid,
                                 "solidus_offset": 0.0})


@pytest.fixture(scope="module")
def base():
    return Study.from_file(DATA / "study.toml")


def _result(name, study, log_z, sd, *, quadrature=None, k=(0.2, 0.3), fits=True, odds=1.0):
    rows = len(LogPosterior(study).rows)
    pointwise = np.full(rows, log_z / rows)
    k = np.resize(np.asarray(k, float), rows)
    loo = LooEstimate(float(pointwise.sum()), 1.0, 0.0, float(k.max()), pointwise, k, 1)
    evidence = EvidenceEstimate(log_z, sd, "nested sampling", quadrature=quadrature,
                                quadrature_error=None if quadrature is None else 0.001)
    return ScenarioResult(Scenario(name, f"scenario {name}", odds, study), evidence, loo,
                          FitCheck(0.4 if fits else 0.0, 200, "crust.csv"))


def _comparison(base, *results):
    found = ScenarioSet(base, tuple(r.scenario for r in results))
    return Comparison(found, results, seed=1)


def test_probabilities_follow_bayes_rule_over_the_scenarios(base):
    a = _result("a", _fixed(base, 1400.0, 40.0), -10.0, 0.0)
    b = _result("b", _fixed(base, 1350.0, 40.0), -12.0, 0.0, odds=3.0)
    comparison = _comparison(base, a, b)
    table = comparison.table().set_index("scenario")
    # P_k = o_k Z_k / sum_j o_j Z_j (Kass & Raftery 1995, eq. 1-2), by hand
    p_a = 1.0 / (1.0 + 3.0 * math.exp(-2.0))
    assert table.loc["a", "probability"] == pytest.approx(p_a, rel=1e-12)
    assert table.loc["b", "log_bayes_factor"] == pytest.approx(-2.0)
    # no error on ln Z, no spread of the probability
    _, low, high = comparison.probabilities
    np.testing.assert_allclose(low, high)


def test_probability_error_bars_come_from_the_evidence_errors(base):
    a = _result("a", _fixed(base, 1400.0, 40.0), -10.0, 0.5)
    b = _result("b", _fixed(base, 1350.0, 40.0), -10.0, 0.5)
    p, low, high = _comparison(base, a, b).probabilities
    np.testing.assert_allclose(p, [0.5, 0.5])
    # ln(P_a / P_b) ~ N(0, 0.5^2 + 0.5^2): P_a's 84 % quantile is 1 / (1 + exp(-0.707))
    assert high[0] == pytest.approx(1.0 / (1.0 + math.exp(-math.sqrt(0.5))), abs=0.01)
    assert low[0] == pytest.approx(1.0 - high[0], abs=0.01)


def test_every_warning_is_raised(base):
    close = _result("close", _fixed(base, 1400.0, 40.0), -10.0, 0.4)
    near = _result("near", _fixed(base, 1390.0, 40.0), -10.3, 0.4, k=(0.2, 0.95))
    off = _result("off", _fixed(base, 1300.0, 40.0), -30.0, 0.01, quadrature=-29.5,
                  fits=False)
    comparison = _comparison(base, close, near, off)
    found = comparison.warnings()
    text = "\n".join(found)
    assert "cannot rank 'close' above 'near'" in text  # 0.3 +- 0.57 is within 2 errors
    assert "cannot rank 'near' above 'off'" not in text
    assert "'near': PSIS-LOO is unreliable" in text and "up to 0.95" in text
    assert "'off': nested sampling" in text and "disagree" in text
    assert "'off' does not fit the data (crust.csv" in text
    report = render(comparison)
    for message in found:
        assert message in report
    assert "not worth more than a bare mention" in report  # 2 ln B = 0.6


def test_agreement_reading(base):
    # the evidence prefers 'a', LOO prefers 'b' by far more than its error: they disagree
    a = _result("a", _fixed(base, 1400.0, 40.0), -10.0, 0.01)
    b = _result("b", _fixed(base, 1350.0, 40.0), -20.0, 0.01)
    loo_b = LooEstimate(5.0, 1.0, 0.0, 0.1, a.loo.pointwise + 2.0, a.loo.pareto_k, 1)
    b = ScenarioResult(b.scenario, b.evidence, loo_b, b.fit)
    report = render(_comparison(base, a, b))
    assert "**They disagree**" in report and "Occam factor" in report


def test_a_scenario_without_free_parameters_end_to_end(base, tmp_path):
    study = _fixed(base, 1380.0, 45.0)
    found = ScenarioSet(base, (Scenario("fixed", "everything held", 1.0, study),))
    # 1380 degC under a 45 km lid makes a thinner crust than the test data's 7-8 km
    with pytest.warns(ComparisonWarning, match="'fixed' does not fit the data"):
        result = lidmelt.compare(found, seed=2)
    row = result.table().iloc[0]
    expected = float(LogPosterior(study).log_likelihood(np.zeros((1, 0)))[0])
    assert row["n_free"] == 0 and row["probability"] == 1.0
    assert row["log_evidence"] == expected and row["log_evidence_sd"] == 0.0
    assert math.isnan(row["log_evidence_quadrature"]) and math.isnan(row["pareto_k_max"])
    assert row["elpd_loo"] == pytest.approx(expected)  # nothing to leave out of a fit
    out = result.save(tmp_path / "cmp")
    assert sorted(p.name for p in (out / "fixed").iterdir()) == ["lidmelt-files.json",
                                                                 "scenario.json"]
    csv = pd.read_csv(out / "evidence.csv", keep_default_na=False)
    assert csv.loc[0, "log_evidence_quadrature"] == "" and csv.loc[0, "pareto_k_max"] == ""
    assert "fixed at 1380 °C" in (out / "report.md").read_text()
