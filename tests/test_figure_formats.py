"""``--figure-format``: every command that draws writes PDF or SVG on request, fonts
embedded, listed in its manifest; and posterior.nc in every result folder."""

from __future__ import annotations

import json
import re
import shutil
import xml.etree.ElementTree as ElementTree
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from helpers import small_study
from survey_helpers import truth_table, write_sites, write_study

from lidmelt.cli import main
from lidmelt.forward.figure_output import DOUBLE_COLUMN, FIGURE_FORMATS, figure_bytes
from lidmelt.inversion.results.writers import output_files

DATA = Path(__file__).parent / "data"


def _is_pdf_with_embedded_truetype(data: bytes) -> bool:
    # PDF 1.7 reference, 5.5.4 and 5.8: a PDF starts "%PDF"; an embedded TrueType font
    # program is a /FontFile2 stream (Type 3 fonts, matplotlib's default, have none)
    return data.startswith(b"%PDF") and b"/FontFile2" in data and b"/Type3" not in data


def _pdf_width_inches(data: bytes) -> float:
    # PDF 1.7 reference, 3.8.4 and 10.10.1: /MediaBox [x0 y0 x1 y1] in units of 1/72 inch
    x0, _, x1, _ = (float(v) for v in re.search(rb"/MediaBox\s*\[([^\]]+)\]", data)
                    .group(1).split())
    return (x1 - x0) / 72.0


def _manifest(folder: Path) -> set[str]:
    return set(json.loads((folder / "lidmelt-files.json").read_text())["files"])


def test_the_saver_writes_each_format_with_fonts_embedded():
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3.46, 2.5))
    fig.subplots().set_xlabel("Temperature (°C)")
    data = {fmt: figure_bytes(fig, fmt) for fmt in FIGURE_FORMATS}
    assert data["png"].startswith(b"\x89PNG\r\n\x1a\n")  # PNG spec, section 5.2
    assert _is_pdf_with_embedded_truetype(data["pdf"])
    root = ElementTree.fromstring(data["svg"])  # well-formed XML, or this raises
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    assert b"<text" not in data["svg"]  # glyphs as paths: looks the same on every machine
    for fmt in FIGURE_FORMATS:  # no time stamp: the same figure, the same bytes
        assert figure_bytes(fig, fmt) == data[fmt]


def test_fit_with_pdf_figures_and_posterior_nc(tmp_path, capsys):
    study = small_study(tmp_path / "study")
    out = tmp_path / "out"
    assert main(["fit", str(study), "--out", str(out), "--quiet", "--figure-format",
                 "pdf"]) == 0, capsys.readouterr().err
    assert sorted(p.name for p in out.iterdir()) == sorted(output_files("pdf"))
    assert _manifest(out) >= {"corner.pdf", "fit.pdf", "pt.pdf", "posterior.nc"}
    for stem in ("corner", "fit", "pt"):
        assert _is_pdf_with_embedded_truetype((out / f"{stem}.pdf").read_bytes()), stem
    assert "fit.pdf" in (out / "report.md").read_text()
    assert (out / "posterior.nc").read_bytes()[:8] == b"\x89HDF\r\n\x1a\n"  # NetCDF-4


def test_a_bad_figure_format_stops_before_sampling(tmp_path, capsys):
    study = small_study(tmp_path / "study")
    with pytest.raises(SystemExit) as stop:
        main(["fit", str(study), "--out", str(tmp_path / "out"), "--figure-format", "jpg"])
    assert stop.value.code == 2 and "invalid choice: 'jpg'" in capsys.readouterr().err
    from lidmelt import inversion

    with pytest.raises(inversion.InputError, match="figure_format.*'jpg'"):
        inversion.fit(inversion.Study.from_file(study), out=tmp_path / "out",
                      figure_format="jpg")
    assert not (tmp_path / "out").exists() and not (tmp_path / "out.partial").exists()


def test_column_svg_is_valid_xml_and_the_suffix_must_match(tmp_path, capsys):
    out = tmp_path / "pt.svg"
    assert main(["column", "--potential-temperature", "1350,1450", "--plot", str(out),
                 "--figure-format", "svg"]) == 0
    ElementTree.parse(out)
    assert main(["column", "--plot", str(tmp_path / "pt.png"), "--figure-format",
                 "pdf"]) == 2
    assert "must end in .pdf" in capsys.readouterr().err


def test_column_pdf(tmp_path):
    out = tmp_path / "pt.pdf"
    assert main(["column", "--lithosphere-thickness", "0,50", "--plot", str(out),
                 "--figure-format", "pdf"]) == 0
    assert _is_pdf_with_embedded_truetype(out.read_bytes())
    # a journal page wide: 178 mm (docs/figures.md); matplotlib writes the figure size
    assert _pdf_width_inches(out.read_bytes()) == pytest.approx(178 / 25.4, abs=1e-3)
    assert DOUBLE_COLUMN == pytest.approx(178 / 25.4)


def test_survey_with_pdf_figure(tmp_path, capsys):
    study = write_study(tmp_path)
    sites = write_sites(tmp_path, study, truth_table(1390.0, [20.0, 40.0]), 5)
    out = tmp_path / "survey"
    assert main(["survey", str(study), "--sites", str(sites), "--out", str(out),
                 "--workers", "1", "--quiet", "--figure-format", "pdf"]) == 0, \
        capsys.readouterr().err
    assert _is_pdf_with_embedded_truetype((out / "profile.pdf").read_bytes())
    assert not (out / "profile.png").exists()
    assert "profile.pdf" in (out / "report.md").read_text()


@pytest.fixture(scope="module")
def compared(tmp_path_factory):
    pytest.importorskip("nautilus")
    folder = tmp_path_factory.mktemp("compare")
    for name in ("scenarios.toml", "crust.csv", "basalts.csv"):
        shutil.copy(DATA / name, folder / name)
    out = folder / "out"
    code = main(["compare", str(folder / "scenarios.toml"), "--out", str(out), "--quiet",
                 "--figure-format", "pdf"])
    assert code == 0
    return out


def test_compare_writes_pdfs_listed_in_the_manifests(compared):
    assert _is_pdf_with_embedded_truetype((compared / "compare.pdf").read_bytes())
    # a journal page wide: 178 mm (docs/figures.md)
    assert _pdf_width_inches((compared / "compare.pdf").read_bytes()) == pytest.approx(
        178 / 25.4, abs=1e-3)
    assert "compare.pdf" in _manifest(compared)
    assert "compare.pdf" in (compared / "report.md").read_text()
    record = json.loads((compared / "comparison.json").read_text())
    assert record["figure_format"] == "pdf"
    for scenario in ("thinned", "unthinned"):
        listed = _manifest(compared / scenario)
        assert {"corner.pdf", "fit.pdf", "pt.pdf", "posterior.nc"} <= listed
        assert _is_pdf_with_embedded_truetype((compared / scenario / "pt.pdf").read_bytes())


def test_scenario_posterior_nc_medians_equal_its_summary(compared):
    az = pytest.importorskip("arviz")
    for scenario in ("thinned", "unthinned"):
        idata = az.from_netcdf(compared / scenario / "posterior.nc")
        summary = pd.read_csv(compared / scenario / "summary.csv").set_index("parameter")
        for name in summary.index:
            # summary.csv holds 6 significant digits (writers._CSV)
            np.testing.assert_allclose(float(idata.posterior[name].median()),
                                       summary.loc[name, "median"], rtol=1e-5)
