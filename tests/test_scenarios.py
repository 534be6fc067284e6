"""[[scenarios]] in study files: overrides, defaults, and every bad-input rule (exit 2)."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest
from lidmelt import demo_data
from lidmelt.inversion import ComparisonSettings, InputError, Study, read_scenarios
from lidmelt.cli import main
from lidmelt.inversion.study.priors import Uniform
from lidmelt.inversion.study.scenarios import ScenarioSet

DATA = Path(__file__).parent / "data"
TEXT = (DATA / "scenarios.toml").read_text()


@pytest.fixture
def write(tmp_path):
    """Write a variant of the test scenario study (text replacements) beside its tables."""
    for name in ("crust.csv", "basalts.csv"):
        shutil.copy(DATA / name, tmp_path / name)

    def make(*replacements, append: str = ""):
        text = TEXT
        for old, new in replacements:
            assert old in text, old  # guards the test itself
            text = text.replace(old, new, 1)
        path = tmp_path / "scenarios.toml"
        path.write_text(text + append)
        return path

    return make


def test_scenarios_override_the_base_study():
    found = read_scenarios(DATA / "scenarios.toml")
    assert found.names == ("thinned", "unthinned")
    assert found.base.priors["lithosphere_thickness"] == Uniform(0.0, 150.0)
    thinned, unthinned = found.scenarios
    assert thinned.study.priors["lithosphere_thickness"] == Uniform(30.0, 60.0)
    assert thinned.prior_odds == 1.0 and unthinned.prior_odds == 2.0
    assert unthinned.study.fixed["lithosphere_thickness"] == 100.0
    assert unthinned.study.free_parameters == ("potential_temperature",)
    assert unthinned.n_free == 1 and thinned.n_free == 2
    # everything not overridden is the base study's
    assert unthinned.study.priors["potential_temperature"] == Uniform(1200.0, 1700.0)
    assert unthinned.study.observations == found.base.observations
    assert found.settings == ComparisonSettings(200, 1000, 20000)
    # the study file and both tables are hashed for --resume
    assert sorted(Path(p).name for p in found.input_hashes) == [
        "basalts.csv", "crust.csv", "scenarios.toml"]


def test_demo_scenarios():
    found = read_scenarios(demo_data.scenarios_path())
    assert found.names == ("lid-free", "thinned", "unthinned")
    lid = [s.study.priors.get("lithosphere_thickness") for s in found.scenarios]
    assert lid[0] == Uniform(10.0, 110.0) and lid[1] == Uniform(30.0, 60.0) and lid[2] is None
    # the scenario file's base study is the demo study
    assert found.base.priors == Study.from_file(demo_data.study_path()).priors


def test_a_study_without_scenarios_is_one_scenario():
    found = read_scenarios(DATA / "study.toml")
    assert found.names == ("base",)
    assert found.scenarios[0].study is found.base
    assert found.settings == ComparisonSettings()


def test_fit_reads_a_scenario_file_as_its_base_study():
    study = Study.from_file(DATA / "scenarios.toml")
    assert study.free_parameters == ("potential_temperature", "lithosphere_thickness")


def test_model_overrides_and_a_scenario_without_free_parameters(write):
    path = write(append='''
[[scenarios]]
name = "dry_fixed"
description = "Dry melting, everything fixed"
[scenarios.parameters]
potential_temperature = { value = 1350.0 }
lithosphere_thickness = { value = 40.0 }
[scenarios.model]
parameterization = "mckenzie-bickle1988"
''')
    scenario = read_scenarios(path).scenarios[2]
    assert scenario.n_free == 0
    assert scenario.study.model.parameterization == "mckenzie-bickle1988"
    assert scenario.overrides["model"] == {"parameterization": "mckenzie-bickle1988"}


def test_scenario_names_must_be_unique_in_code():
    study = Study.from_file(DATA / "study.toml")
    base = ScenarioSet.from_study(study).scenarios[0]
    with pytest.raises(InputError, match="used twice"):
        ScenarioSet(study, (base, base))


# ---- bad input: one line naming file, line, key and rule; exit 2; no output folder ------

BAD = {
    "unknown-parameter": (
        [("lithosphere_thickness = { prior = \"uniform\", min = 30.0, max = 60.0 }",
          "lithosphere_thicknes = { prior = \"uniform\", min = 30.0, max = 60.0 }")],
        r"scenarios.toml, line 44, key 'scenarios\[1\]\.parameters\.lithosphere_thicknes': "
        r"unknown parameter 'lithosphere_thicknes'; did you mean 'lithosphere_thickness'\?"),
    "duplicate-name": (
        [('name = "unthinned"', 'name = "Thinned"')],
        r"line 47, key 'scenarios\[2\]\.name': scenario name 'Thinned' is used twice \(also "
        r"by scenarios\[1\], ignoring case\)"),
    "zero-odds": (
        [("prior_odds = 2.0", "prior_odds = 0.0")],
        r"line 49, key 'scenarios\[2\]\.prior_odds': prior odds 0 must be > 0"),
    "negative-odds": (
        [("prior_odds = 2.0", "prior_odds = -1")],
        r"key 'scenarios\[2\]\.prior_odds': prior odds -1 must be > 0"),
    "fixed-value-out-of-domain": (
        [("lithosphere_thickness = { value = 100.0 }",
          "lithosphere_thickness = { value = 500.0 }")],
        r"line 51, key 'scenarios\[2\]\.parameters\.lithosphere_thickness\.value': fixed "
        r"value 500 is outside the physical range \[0, 400\]"),
    "prior-out-of-domain": (
        [("min = 30.0, max = 60.0", "min = 30.0, max = 600.0")],
        r"key 'scenarios\[1\]\.parameters\.lithosphere_thickness\.max': prior max 600 is "
        r"outside the physical range \[0, 400\]"),
    "unsafe-name": (
        [('name = "thinned"', 'name = "../thinned"')],
        r"key 'scenarios\[1\]\.name': scenario name '\.\./thinned' must start with a letter "
        r"or digit"),
    "no-description": (
        [('description = "The lid kept its 100 km"\n', "")],
        r"key 'scenarios\[2\]\.description': scenario 'unthinned' needs a description"),
    "unknown-key": (
        [("prior_odds = 2.0", "prior_oods = 2.0")],
        r"key 'scenarios\[2\]\.prior_oods': unknown key 'prior_oods'; did you mean "
        r"'prior_odds'\?"),
    "unknown-model-setting": (
        [("[scenarios.parameters]\nlithosphere_thickness = { value = 100.0 }",
          "[scenarios.model]\nmelting_regio = \"triangle\"")],
        r"key 'scenarios\[2\]\.model\.melting_regio': unknown key 'melting_regio'; did you "
        r"mean 'melting_region'\?"),
    "bad-comparison-setting": (
        [("live_points = 200", "live_points = 10")],
        r"line 36, key 'comparison\.live_points': 10 must be a whole number >= 50"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_scenario_input(write, case):
    replacements, message = BAD[case]
    path = write(*replacements)
    with pytest.raises(InputError, match=message):
        read_scenarios(path)


@pytest.mark.parametrize("case", ["unknown-parameter", "duplicate-name", "zero-odds",
                                  "fixed-value-out-of-domain"])
def test_bad_scenario_input_stops_the_command(write, capsys, case):
    replacements, message = BAD[case]
    path = write(*replacements)
    out = path.parent / "results"
    assert main(["compare", str(path), "--out", str(out), "--quiet"]) == 2
    _, err = capsys.readouterr()
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("lidmelt compare: error: ")
    assert "Traceback" not in err
    assert re.search(message, lines[0])
    assert not out.exists() and not out.with_name("results.partial").exists()
