"""``lidmelt column`` used as a newcomer would."""

import csv
import io
import json

import pytest

from lidmelt.forward import melt_column
from lidmelt.inversion.cli.column import parse_values
from lidmelt.inversion.cli import main


def test_crust_against_tp_for_a_30_km_lid(capsys):
    assert main(["column", "--potential-temperature", "1300:1500:50",
                 "--lithosphere-thickness", "30", "--format", "csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert [float(r["potential_temperature_c"]) for r in rows] == [1300, 1350, 1400, 1450, 1500]
    crust = [float(r["crustal_thickness_km"]) for r in rows]
    assert crust == sorted(crust)
    expected = float(melt_column(1400.0, 30.0).crustal_thickness)
    assert crust[2] == pytest.approx(expected, rel=1e-3)


def test_all_combinations_and_json(capsys):
    assert main(["column", "--potential-temperature", "1350,1400", "--water", "0,100",
                 "--melting-region", "column,triangle", "--format", "json"]) == 0
    rows = json.loads(capsys.readouterr().out)
    assert len(rows) == 8
    assert {r["melting_region"] for r in rows} == {"column", "triangle"}


def test_aligned_table_has_units_in_headers(capsys):
    assert main(["column", "--potential-temperature", "1350"]) == 0
    header, row = capsys.readouterr().out.splitlines()
    assert "crustal_thickness_km" in header and "mean_melting_pressure_gpa" in header
    assert len(header) == len(row)


def test_plot_writes_a_png(tmp_path, capsys):
    out = tmp_path / "pt.png"
    assert main(["column", "--potential-temperature", "1300,1450", "--lithosphere-thickness",
                 "0,40", "--water", "150", "--plot", str(out)]) == 0
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "P-T diagram written to" in capsys.readouterr().err


@pytest.mark.parametrize(
    "argv, message",
    [(["--potential-temperature", "hot"], "--potential-temperature: cannot read 'hot'"),
     (["--water", "10:0:5"], "--water: cannot read '10:0:5'"),
     (["--potential-temperature", "2500"], "potential_temperature = 2500 degC is outside"),
     (["--melting-region", "plume"], "--melting-region: unknown 'plume'"),
     (["--parameterization", "katz"], "--parameterization: unknown 'katz'"),
     (["--plot", "figure.pdf"], "must end in .png")],
)
def test_bad_values_exit_2_with_one_line(argv, message, capsys):
    assert main(["column", *argv]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1 and "Traceback" not in err


def test_range_is_inclusive():
    assert parse_values("1300:1400:50", "x") == [1300.0, 1350.0, 1400.0]
    assert parse_values("0, 20,45", "x") == [0.0, 20.0, 45.0]
