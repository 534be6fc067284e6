"""report.md: typography, interval wording, citations and the goodness-of-fit section."""

import re

import pytest
from lidmelt import demo_data, inversion
from lidmelt.inversion.results.report import interval_words, render


@pytest.fixture(scope="module")
def text():
    study = inversion.Study.from_file(demo_data.study_path())
    # A short run is enough to test the wording, not the statistics.
    posterior = inversion.fit(study.with_sampler(walkers=16, ess_target=300,
                                                 tau_multiple=20, check_interval=50),
                              quiet=True)
    return render(posterior)


def _row(median, q16, q84, sd, unit="degC"):
    return {"median": median, "q16": q16, "q84": q84, "q2.5": q16 - 2 * sd,
            "q97.5": q84 + 2 * sd, "sd": sd, "unit": unit}


def test_symmetric_interval_is_written_plus_minus():
    assert interval_words(_row(10.0, 9.0, 11.0, 1.0)).startswith("**10.0 ± 1.0 °C**")


def test_asymmetric_interval_keeps_both_sides_with_a_true_minus_sign():
    words = interval_words(_row(1392.0, 1382.0, 1404.0, 11.0))
    assert words.startswith("**1392 +12/\N{MINUS SIGN}10 °C**")
    assert "68 %: 1382 to 1404 °C" in words


def test_negative_numbers_and_ranges_use_the_minus_sign_and_to(text):
    words = interval_words(_row(-4.0, -15.0, 19.0, 17.0))
    assert "68 %: \N{MINUS SIGN}15 to 19 °C" in words
    assert not re.search(r"(?<![\w.])-\d", text)  # no hyphen-minus before a number
    assert not re.search(r"\d\s*[–-]\s*[\d−]", text)  # ranges say "to", not a dash
    assert "value(s)" not in text and "(s)" not in text


def test_parameterization_is_named_by_its_citation(text):
    assert "Katz et al. (2003)" in text


def test_every_observation_block_gets_a_goodness_of_fit_line(text):
    section = text.split("## How well the model fits the data")[1].split("## ")[0]
    assert "posterior predictive p-value" in section and "−2 log L" in section
    for name in ("crust.csv", "basalts.csv"):
        assert re.search(rf"- {re.escape(name)} \(\d+ rows\): p = [\d.<]", section)


def test_the_report_says_crust_or_melt_and_the_density_ratio(text):
    # mass balance: crust = melt x rho_mantle / rho_crust = 3300 / 2900 (demo densities)
    assert "crust = melt × ρ_mantle/ρ_crust = melt × 1.138 (3300/2900 kg/m³" in text
    assert 'thickness_of = "melt"' in text and "13 to 28 °C for 7 to 35 km" in text


def test_both_readings_are_worded_and_shift_tp_as_stated():
    from lidmelt import forward
    from lidmelt.inversion.observations.crust import READING_SHIFT, thickness_reading
    from scipy import optimize

    melt = thickness_reading("melt", 2900.0, 3300.0)
    assert "melt thickness itself" in melt and "cooler mantle" in melt
    # READING_SHIFT against a fresh root search (scipy brentq) on the forward model:
    # Tp giving 7 and 35 km of crust read as crust and read as melt (dry, column, no lid)
    for thickness, shift in zip((7.0, 35.0), READING_SHIFT, strict=True):
        tp = {key: optimize.brentq(lambda t, key=key: float(getattr(forward.melt_column(
            t, 0.0), key)) - thickness, 1250.0, 1750.0, xtol=0.01)
            for key in ("crustal_thickness", "melt_thickness")}
        assert tp["melt_thickness"] - tp["crustal_thickness"] == pytest.approx(shift,
                                                                              abs=0.5)
