"""Study files: parsing, defaults, scenario/site variants and every bad-input rule."""

import dataclasses
import hashlib
import shutil
from pathlib import Path

import numpy as np
import pytest

from lidmelt import forward
from lidmelt.inversion.errors import InputError
from lidmelt.inversion.observations import CrustalThickness, MeltingPressure
from lidmelt.inversion.study.priors import LogUniform, Normal, TruncatedNormal, Uniform
from lidmelt.inversion.study import DEFAULT_FIXED, PARAMETERS, ModelSettings, SamplerSettings, Study

DATA = Path(__file__).parent / "data"
BASE = (DATA / "study.toml").read_text()


@pytest.fixture
def make_study(tmp_path):
    """Write a variant of the test study (text replacements) next to copies of its tables."""
    for name in ("crust.csv", "basalts.csv"):
        shutil.copy(DATA / name, tmp_path / name)

    def make(*replacements, text=None):
        text = BASE if text is None else text
        for old, new in replacements:
            assert old in text, old  # guards the test itself, not user input
            text = text.replace(old, new, 1)
        path = tmp_path / "study.toml"
        path.write_text(text)
        return path

    return make


# ---- a valid study -------------------------------------------------------------------------


def test_reads_the_test_study():
    study = Study.from_file(DATA / "study.toml")
    assert study.name == "Murrowtack Saddle (test)"
    assert study.free_parameters == ("potential_temperature", "lithosphere_thickness",
                                     "solidus_offset")
    assert study.fixed == {"water": 0.0, "active_upwelling": 1.0}
    assert study.priors["potential_temperature"] == Uniform(1200.0, 1700.0)
    # The normal prior on the solidus offset is cut to forward.PARAMETER_DOMAIN (-100, 100).
    assert study.priors["solidus_offset"] == TruncatedNormal(0.0, 20.0, -100.0, 100.0)
    assert study.model == ModelSettings("katz2003", "column", 2900.0, 3300.0)
    assert study.sampler == SamplerSettings(walkers=32, seed=1)
    crust, basalts = study.observations
    assert isinstance(crust, CrustalThickness) and crust.model_error == 0.5
    assert isinstance(basalts, MeltingPressure) and basalts.equilibration == "top"
    assert basalts.has_temperature and len(basalts) == 5 and len(crust) == 4
    assert study.file_hash == hashlib.sha256((DATA / "study.toml").read_bytes()).hexdigest()


def test_paths_are_relative_to_the_study_file(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # somewhere else entirely
    study = Study.from_file(DATA / "study.toml")
    assert study.observations[0].file.resolve() == (DATA / "crust.csv").resolve()


def test_defaults_for_unmentioned_parameters_and_sections(make_study):
    text = """
[parameters]
potential_temperature = { prior = "uniform", min = 1300.0, max = 1500.0 }
lithosphere_thickness = { value = 30.0 }
[[observations]]
kind = "crustal_thickness"
file = "crust.csv"
"""
    study = Study.from_file(make_study(text=text))
    assert study.name == "study"  # file name without extension
    assert study.free_parameters == ("potential_temperature",)
    assert study.fixed == {"lithosphere_thickness": 30.0, **DEFAULT_FIXED}
    assert study.model == ModelSettings()
    assert study.sampler == SamplerSettings()
    assert study.sampler.ess_target == 2000 and study.sampler.tau_multiple == 50.0
    assert study.observations[0].thickness_of == "crust"


def test_free_parameters_follow_the_canonical_order(make_study):
    path = make_study(("water = { value = 0.0 }",
                       'water = { prior = "uniform", min = 0.0, max = 200.0 }'),
                      ("active_upwelling = { value = 1.0 }",
                       'active_upwelling = { prior = "log-uniform", min = 0.5, max = 4.0 }'))
    assert Study.from_file(path).free_parameters == PARAMETERS


def test_with_overrides_makes_a_scenario():
    study = Study.from_file(DATA / "study.toml")
    hot = study.with_overrides(
        {"potential_temperature": 1450.0,
         "water": {"prior": "uniform", "min": 0.0, "max": 300.0},
         "lithosphere_thickness": Uniform(10.0, 60.0)},
        melting_region="triangle")
    assert hot.fixed["potential_temperature"] == 1450.0
    assert hot.priors["water"] == Uniform(0.0, 300.0)
    assert hot.priors["lithosphere_thickness"] == Uniform(10.0, 60.0)
    assert hot.free_parameters == ("lithosphere_thickness", "water", "solidus_offset")
    assert hot.model.melting_region == "triangle" and hot.model.parameterization == "katz2003"
    # The original is untouched.
    assert study.free_parameters[0] == "potential_temperature"
    assert study.model.melting_region == "column"
    # A normal prior given in code is cut to the physical range too.
    cut = study.with_overrides({"solidus_offset": Normal(0.0, 80.0)})
    assert cut.priors["solidus_offset"] == TruncatedNormal(0.0, 80.0, -100.0, 100.0)


@pytest.mark.parametrize(
    ("parameters", "settings", "match"),
    [
        ({"potential_temperatur": 1400.0}, {},
        r"key 'parameters.potential_temperatur': unknown parameter.*did you mean"
        r" 'potential_temperature'"),
        ({"potential_temperature": 2500.0}, {},
            r"fixed value 2500 is outside the physical range \[1000, 1800\]"),
        ({"active_upwelling": 0.0}, {}, r"outside the physical range \(0, 20\]"),
        ({"lithosphere_thickness": Uniform(-5.0, 50.0)}, {},
            r"reaches outside the physical range \[0, 400\]"),
        ({}, {"melting_regio": "triangle"},
            r"key 'model.melting_regio': unknown key.*did you mean 'melting_region'"),
        ({}, {"melting_region": "sheet"}, r"key 'model.melting_region': unknown value 'sheet'"),
    ],
)
def test_with_overrides_validates(parameters, settings, match):
    study = Study.from_file(DATA / "study.toml")
    with pytest.raises(InputError, match=match):
        study.with_overrides(parameters, **settings)


def test_dry_parameterization_refuses_free_water():
    study = Study.from_file(DATA / "study.toml")
    # water is fixed at 0, so a dry parameterization is fine
    dry = study.with_overrides(parameterization="mckenzie-bickle1988")
    assert dry.model.supports_water is False
    with pytest.raises(InputError, match=r"parameters.water'.*dry parameterization"):
        study.with_overrides({"water": 50.0}, parameterization="mckenzie-bickle1988")


def test_with_observations_makes_a_site_and_with_sampler():
    study = Study.from_file(DATA / "study.toml")
    crust_only = study.with_observations(study.observations[:1])
    assert len(crust_only.observations) == 1 and crust_only.priors == study.priors
    quick = study.with_sampler(max_steps=500, check_interval=100, start="map")
    assert quick.sampler.max_steps == 500 and quick.sampler.start == "map"
    with pytest.raises(InputError, match=r"key 'sampler.strat'.*did you mean 'start'"):
        study.with_sampler(strat="map")
    with pytest.raises(TypeError, match="ObservationSet"):
        study.with_observations(["crust.csv"])


def test_study_is_frozen():
    study = Study.from_file(DATA / "study.toml")
    with pytest.raises(dataclasses.FrozenInstanceError):
        study.name = "other"


def test_free_model_errors_in_a_study_file(make_study):
    path = make_study(("model_error = 0.5",
                       'model_error = { prior = "log-uniform", min = 0.01, max = 0.5 }'),
                      ('equilibration = "top"',
                       'equilibration = "top"\ntemperature_model_error = { prior = '
                       '"uniform", min = 0.0, max = 60.0 }'))
    study = Study.from_file(path)
    crust, basalts = study.observations
    assert crust.model_error == LogUniform(0.01, 0.5)
    assert basalts.temperature_model_error == Uniform(0.0, 60.0)
    assert [(e.name, e.block, e.option, e.unit) for e in study.error_parameters] == [
        ("crust.model_error", 0, "model_error", "km"),
        ("basalts.temperature_model_error", 1, "temperature_model_error", "degC")]
    # The physical parameters stay as they were; the errors come after them.
    assert study.free_parameters == ("potential_temperature", "lithosphere_thickness",
                                     "solidus_offset")
    assert "crust.model_error: free, log-uniform on [0.01, 0.5] km" in study.describe()
    # Five free values now, so 8 walkers are too few (2 per free value).
    with pytest.raises(InputError, match=r"walkers = 8 is too few for 5 free parameters"):
        study.with_sampler(walkers=8)


def test_error_parameter_names_are_unique_and_file_safe(tmp_path):
    shutil.copy(DATA / "crust.csv", tmp_path / "crust survey (2019).csv")
    study = Study.from_file(DATA / "study.toml")
    free = {"model_error": {"prior": "uniform", "min": 0.0, "max": 2.0}}
    a = CrustalThickness.from_spec({"file": "crust.csv", **free}, base_dir=DATA)
    b = CrustalThickness.from_spec({"file": "crust.csv", **free}, base_dir=DATA)
    c = CrustalThickness.from_spec({"file": "crust survey (2019).csv", **free},
                                   base_dir=tmp_path)
    names = [e.name for e in study.with_observations([a, b, c]).error_parameters]
    assert names == ["crust-1.model_error", "crust-2.model_error",
                     "crust_survey__2019_.model_error"]


def test_describe_lists_every_parameter():
    text = Study.from_file(DATA / "study.toml").describe()
    for name in PARAMETERS:
        assert name in text
    assert "uniform on [0, 150] km" in text and "fixed at 0 ppm" in text


# ---- every bad-input rule ---------------------------------------------------------------

CASES = {
    # malformed TOML: file and line
    "malformed-toml": (('Saddle (test)"', 'Saddle (test)'),
                       r"study.toml, line 3: malformed TOML"),
    # misspelt keys at every level, with the nearest valid one
    "misspelt-section": (("[sampler]", "[smapler]"),
        r"line 28, key 'smapler': unknown section 'smapler'; did you mean 'sampler'"),
    "misspelt-study-key": (('name = "Murrowtack', 'nme = "Murrowtack'),
                           r"key 'study.nme': unknown key 'nme'; did you mean 'name'"),
    "misspelt-model-key": (("melting_region = ", "melting_regio = "),
                           r"line 8, key 'model.melting_regio'.*did you mean 'melting_region'"),
    "misspelt-parameter": (("solidus_offset = {", "solidus_ofset = {"),
        r"line 16, key 'parameters.solidus_ofset': unknown parameter.*did you"
        r" mean 'solidus_offset'"),
    "misspelt-prior-key": (("min = 0.0, max = 150.0", "min = 0.0, mx = 150.0"),
        r"line 13, key 'parameters.lithosphere_thickness.mx'.*did you mean 'max'"),
    "misspelt-observation-key": (('equilibration = "top"', 'equilibraton = "top"'),
        r"line 26, key 'observations\[2\].equilibraton'.*did you mean 'equilibration'"),
    "misspelt-sampler-key": (("walkers = 32", "walker = 32"),
                             r"key 'sampler.walker'.*did you mean 'walkers'"),
    # priors
    "unknown-prior": (('prior = "normal"', 'prior = "gaussian"'),
        r"key 'parameters.solidus_offset.prior': unknown prior 'gaussian'; valid"
        r" choices: 'uniform', 'normal'"),
    "misspelt-prior": (('prior = "normal"', 'prior = "normall"'),
                       r"unknown prior 'normall'; did you mean 'normal'"),
    "min-equals-max": (("min = 1200.0, max = 1700.0", "min = 1700.0, max = 1700.0"),
        r"key 'parameters.potential_temperature.min': min \(1700\) must be less"
        r" than max \(1700\)"),
    "min-above-max": (("min = 1200.0, max = 1700.0", "min = 1700.0, max = 1200.0"),
                      r"min \(1700\) must be less than max \(1200\)"),
    "sd-zero": (("sd = 20.0", "sd = 0.0"),
        r"key 'parameters.solidus_offset.sd': sd = 0 must be > 0"),
    "sd-negative": (("sd = 20.0", "sd = -3.0"), r"sd = -3 must be > 0"),
    "prior-outside-domain": (("min = 1200.0, max = 1700.0", "min = 1200.0, max = 1900.0"),
        r"potential_temperature.max': prior max 1900 is outside the physical"
        r" range \[1000, 1800\]"),
    "value-and-prior": (("water = { value = 0.0 }",
                         'water = { value = 0.0, prior = "uniform" }'),
                        r"has value = \.\.\. \(fixed\) and also 'prior'"),
    "string-number": (("min = 1200.0", 'min = "1200"'), r"'1200' is not a number"),
    "missing-tp": (('potential_temperature = { prior = "uniform", min = 1200.0, '
                    'max = 1700.0 }\n', ""),
        r"key 'parameters.potential_temperature': 'potential_temperature' must be given"),
    # fixed values outside the physical range
    "fixed-water-negative": (("water = { value = 0.0 }", "water = { value = -5.0 }"),
        r"line 14, key 'parameters.water.value': fixed value -5 is outside the"
        r" physical range \[0, 1000\]"),
    "fixed-upwelling-zero": (("active_upwelling = { value = 1.0 }",
                              "active_upwelling = { value = 0.0 }"),
                             r"fixed value 0 is outside the physical range \(0, 20\]"),
    "crust-density": (("crust_density = 2900.0", "crust_density = 29000.0"),
        r"key 'model.crust_density': 29000 kg/m\^3 is outside the physical range"),
    # model choices
    "unknown-parameterization": (('"katz2003"', '"katz2004"'),
        r"line 7, key 'model.parameterization': unknown value 'katz2004'; did you"
        r" mean 'katz2003'"),
    "unknown-melting_region": (('melting_region = "column"', 'melting_region = "plume"'),
        r"key 'model.melting_region': unknown value 'plume'; valid choices: 'column', 'triangle'"),
    # observation blocks
    "unknown-kind": (('kind = "crustal_thickness"', 'kind = "crustal_thicknes"'),
        r"key 'observations\[1\].kind': unknown kind 'crustal_thicknes'; did you"
        r" mean 'crustal_thickness'"),
    "missing-kind": (('kind = "crustal_thickness"\n', ""),
        r"observations\[1\].kind': missing 'kind'"),
    "unknown-equilibration": (('equilibration = "top"', 'equilibration = "pooledd"'),
        r"observations\[2\].equilibration': unknown value 'pooledd'; did you mean 'pooled'"),
    "missing-equilibration": (('equilibration = "top"\n', ""),
        r"line 23, key 'observations\[2\].equilibration': missing 'equilibration', where "
        r"the basalts last equilibrated with the mantle: \"top\" \(at the top of melting.*"
        r"\"pooled\" \(at the mean melting pressure.*\"path\" \(anywhere along"),
    "unknown-thickness-of": (("model_error = 0.5", 'model_error = 0.5\nthickness_of = "mlt"'),
        r"observations\[1\].thickness_of': unknown value 'mlt'; did you mean 'melt'"),
    "negative-model-error": (("model_error = 0.5", "model_error = -0.5"),
                             r"observations\[1\].model_error': -0.5 must be >= 0"),
    "missing-observation-file": (('file = "crust.csv"', 'file = "crust_2019.csv"'),
        r"crust_2019.csv, key 'observations\[1\].file': observation file not found"),
    "missing-file-key": (('file = "crust.csv"\n', ""),
        r"observations\[1\].file': missing 'file'"),
    # sampler
    "too-few-walkers": (("walkers = 32", "walkers = 4"),
        r"key 'sampler.walkers': walkers = 4 is too few for 3 free parameters.*at least 6"),
    "negative-seed": (("seed = 1", "seed = -1"),
        r"key 'sampler.seed': seed -1 must be a whole number from 0 to 4294967295"),
    "fractional-walkers": (("walkers = 32", "walkers = 32.5"), r"32.5 must be a whole number"),
    "unknown-start": (("seed = 1", 'seed = 1\nstart = "maximum"'),
        r"key 'sampler.start': unknown value 'maximum'; valid choices: 'prior', 'map'"),
}


@pytest.mark.parametrize("case", list(CASES))
def test_bad_study_file(make_study, case):
    replacement, match = CASES[case]
    path = make_study(replacement)
    with pytest.raises(InputError, match=match) as info:
        Study.from_file(path)
    message = str(info.value)
    assert "\n" not in message  # one line for stderr
    assert message.startswith(str(path.parent))  # names the file


def test_dry_parameterization_with_free_water(make_study):
    path = make_study(('"katz2003"', '"mckenzie-bickle1988"'),
                      ("water = { value = 0.0 }",
                       'water = { prior = "uniform", min = 0.0, max = 100.0 }'))
    with pytest.raises(InputError, match=r"key 'parameters.water'.*dry parameterization"):
        Study.from_file(path)


def test_missing_study_file(tmp_path):
    with pytest.raises(InputError, match=r"nowhere.toml: study file not found"):
        Study.from_file(tmp_path / "nowhere.toml")
    with pytest.raises(InputError, match=r"is a folder, not a study file"):
        Study.from_file(tmp_path)


def test_not_utf8(make_study):
    path = make_study()
    path.write_bytes(b'[study]\nname = "\xff"\n')
    with pytest.raises(InputError, match=r"not UTF-8 text"):
        Study.from_file(path)


def test_no_observations(make_study):
    text = BASE.split("[[observations]]")[0] + "[sampler]\nwalkers = 32\n"
    with pytest.raises(InputError,
                       match=r"key 'observations': no observations; add at least one"):
        Study.from_file(make_study(text=text))


def test_everything_fixed(make_study):
    path = make_study(('{ prior = "uniform", min = 1200.0, max = 1700.0 }',
                       "{ value = 1400.0 }"),
                      ('{ prior = "uniform", min = 0.0, max = 150.0 }', "{ value = 40.0 }"),
                      ('{ prior = "normal", mean = 0.0, sd = 20.0 }', "{ value = 0.0 }"))
    with pytest.raises(InputError, match=r"every parameter is fixed"):
        Study.from_file(path)


def test_bad_table_row_is_named_through_the_study(make_study):
    path = make_study()
    table = "site,thickness_km,thickness_sigma_km\nA,7.0,0.8\nB,6.5,-0.3\n"
    (path.parent / "crust.csv").write_text(table)
    with pytest.raises(InputError,
                       match=r"crust.csv, line 3, column 'thickness_sigma_km': "
                             r"value -0.3 must be >= 0.001 km"):
        Study.from_file(path)


def test_study_values_reach_the_forward_model():
    # The parsed settings, passed on to forward.melt_column, give the column of the values
    # written in tests/data/study.toml (typed here by hand): prior medians Tp 1450 degC,
    # lid 75 km, offset 0 degC; water 0, active upwelling 1, crust 2900 kg/m^3.
    study = Study.from_file(DATA / "study.toml")
    values = {name: np.array([study.priors[name].ppf(0.5)]) for name in study.free_parameters}
    values.update({name: np.array([v]) for name, v in study.fixed.items()})
    column = forward.melt_column(
        values.pop("potential_temperature"), values.pop("lithosphere_thickness"), **values,
        parameterization=study.model.parameterization, melting_region=study.model.melting_region,
        crust_density=study.model.crust_density, mantle_density=study.model.mantle_density)
    by_hand = forward.melt_column(1450.0, 75.0, water=0.0, active_upwelling=1.0,
                                  solidus_offset=0.0, parameterization="katz2003",
                                  melting_region="column", crust_density=2900.0,
                                  mantle_density=3300.0)
    assert float(by_hand.crustal_thickness) > 1.0  # a column that melts: a real check
    for name in ("crustal_thickness", "onset_depth", "mean_melting_pressure"):
        np.testing.assert_allclose(getattr(column, name), [getattr(by_hand, name)],
                                   rtol=1e-12)
