"""``lidmelt column`` used as a newcomer would."""

import csv
import io
import json

import pytest
from lidmelt.forward import melt_column
from lidmelt.cli import main
from lidmelt.cli.column import parse_values


def test_crust_against_tp_for_a_30_km_lid(capsys):
    assert main(["column", "--potential-temperature", "1300:1500:50",
                 "--lithosphere-thickness", "30", "--format", "csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert [float(r["potential_temperature_c"]) for r in rows] == [1300, 1350, 1400, 1450,
                                                                   1500]
    crust = [float(r["crustal_thickness_km"]) for r in rows]
    assert crust == sorted(crust)
    # CSV keeps full precision: the printed number reads back to the same float.
    assert crust[2] == float(melt_column(1400.0, 30.0).crustal_thickness)


def test_all_combinations_and_json_with_the_csv_keys(capsys):
    argv = ["column", "--potential-temperature", "1350,1400", "--water", "0,100",
            "--melting-region", "column,triangle"]
    assert main([*argv, "--format", "json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert main([*argv, "--format", "csv"]) == 0
    csv_rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    rows = data["rows"]
    assert len(rows) == 8
    assert {r["melting_region"] for r in rows} == {"column", "triangle"}
    # same quantities in the same order; the CSV column adds the unit (tables' rule)
    assert [data["columns"][k] for k in rows[0]] == list(csv_rows[0])
    assert list(csv_rows[0])[:3] == ["potential_temperature_c", "lithosphere_thickness_km",
                                     "water_ppm"]
    assert "mean_melting_pressure_gpa" in csv_rows[0] and "mean_melt_fraction" in csv_rows[0]
    grouped = [key for keys in data["groups"].values() for key in keys]
    assert grouped == list(rows[0])
    assert list(data["groups"])[1:] == ["where it melts", "how much", "what melt"]
    assert data["units"]["onset_depth"] == "km"
    assert data["units"]["potential_temperature"] == "degC"


def test_table_says_shared_inputs_once_and_units_in_their_own_line(capsys):
    assert main(["column", "--potential-temperature", "1300,1350",
                 "--lithosphere-thickness", "30"]) == 0
    text = capsys.readouterr().out
    intro, table, legend = text.strip().split("\n\n")
    assert "lid (lithosphere) thickness 30.0 km" in intro
    groups, labels, units, *body = table.splitlines()
    assert labels.split("|")[0].split() == ["Tp"]  # the only input that varies comes first
    assert units.split("|")[0].split() == ["°C"]
    assert [line.split("|")[0].split() for line in body] == [["1300"], ["1350"]]
    assert groups.split("|")[1].strip() == "where it melts"
    assert len({len(line) for line in (labels, units, *body)}) == 1
    # fixed decimals per quantity: onset depth with one, melt fraction with three
    onset, top = body[0].split("|")[1].split()
    assert len(onset.split(".")[1]) == 1
    assert len(body[0].split("|")[3].split()[0].split(".")[1]) == 3
    assert "onset = depth where melting starts" in legend


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
     (["--solidus-offset=-150"], "solidus_offset = -150 degC is outside"),
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


def test_rows_stream_in_chunks_with_the_same_table(capsys, monkeypatch):
    # Chunks of 2 rows must give the very text of one chunk: widths, order, every format.
    from lidmelt.cli import column

    argv = ["column", "--potential-temperature", "1300:1500:50", "--lithosphere-thickness",
            "20,40"]
    outputs = {}
    whole = column.CHUNK_ROWS
    for size in (whole, 2):
        monkeypatch.setattr(column, "CHUNK_ROWS", size)
        for fmt in ("table", "csv", "json"):
            assert main([*argv, "--format", fmt]) == 0
            outputs[size, fmt] = capsys.readouterr().out
    for fmt in ("table", "csv", "json"):
        assert outputs[2, fmt] == outputs[whole, fmt]
    # a wider value in a later chunk (Tp varies slowest, hot rows come last) still aligns:
    # the widths include the rows at the ends of every option
    table = outputs[2, "table"].split("\n\n")[1].splitlines()
    assert len({len(line) for line in table[1:]}) == 1
    rows = json.loads(outputs[2, "json"])["rows"]
    assert len(rows) == 10 and rows[1]["lithosphere_thickness"] == 40.0
    assert rows[-2]["melt_thickness"] >= 10.0 > rows[0]["melt_thickness"]  # widths differ


def test_json_rows_are_one_per_line(capsys):
    assert main(["column", "--potential-temperature", "1300,1350,1400", "--format",
                 "json"]) == 0
    text = capsys.readouterr().out
    lines = [line for line in text.splitlines() if line.lstrip().startswith('{"potential')]
    assert len(lines) == 3
    assert json.loads(lines[0].rstrip(","))["potential_temperature"] == 1300.0


def test_a_table_build_is_never_silent(tmp_path, monkeypatch, capsys):
    # A cold cache: the build shows a bar with the time left and says when it is done.
    from lidmelt.forward import _table

    monkeypatch.setenv("LIDMELT_CACHE", str(tmp_path))
    _table.path_table.cache_clear()
    try:
        assert main(["column", "--parameterization", "mckenzie-bickle1988"]) == 0
    finally:
        _table.path_table.cache_clear()
    err = capsys.readouterr().err
    assert "building the mckenzie-bickle1988 melting table for a dry source" in err
    assert "left" in err
    assert "built the mckenzie-bickle1988 melting table for a dry source in" in err
    assert str(tmp_path) in err


def test_trace_elements_adds_the_pooled_melts_ratios(capsys):
    from lidmelt.forward.trace import ELEMENTS, pooled_trace_elements

    argv = ["column", "--potential-temperature", "1250,1400", "--lithosphere-thickness",
            "46,100", "--water", "150", "--trace-elements"]
    assert main([*argv, "--format", "csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert list(rows[0])[-3:] == ["la_yb_cn", "sm_yb_cn", "dy_yb_cn"]
    # CI chondrite, Sun & McDonough 1989, Table 1 (ppm; value from memory)
    ci = {"La": 0.237, "Sm": 0.153, "Dy": 0.254, "Yb": 0.170}
    for row in rows:
        tp, lid = float(row["potential_temperature_c"]), float(row["lithosphere_thickness_km"])
        res = melt_column(tp, lid, water=150.0)
        if res.melt_thickness == 0.0:  # nothing melts: no ratios, empty cells
            assert row["la_yb_cn"] == row["sm_yb_cn"] == row["dy_yb_cn"] == ""
            continue
        melt = dict(zip(ELEMENTS, pooled_trace_elements(res).melt, strict=True))
        for key, num in (("la_yb_cn", "La"), ("sm_yb_cn", "Sm"), ("dy_yb_cn", "Dy")):
            expected = (melt[num] / ci[num]) / (melt["Yb"] / ci["Yb"])
            # 2 %: the fast route's stated accuracy against the interval route
            # (docs/model.md, "The fast route"); the CI values above are those of the file
            assert float(row[key]) == pytest.approx(expected, rel=0.02)
    la_yb = {(r["potential_temperature_c"], r["lithosphere_thickness_km"]): r["la_yb_cn"]
             for r in rows}
    # A thicker lid stops melting deeper, in garnet, where Yb stays in the residue:
    # the pooled melt's La/Yb rises (common practice)
    assert float(la_yb["1400.0", "100.0"]) > 3 * float(la_yb["1400.0", "46.0"])
    assert main([*argv, "--format", "json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["units"]["la_yb"] == "cn" and data["columns"]["la_yb"] == "la_yb_cn"
    assert sum(r["la_yb"] is None for r in data["rows"]) == sum(r["la_yb_cn"] == ""
                                                                for r in rows) == 1
    assert main(argv) == 0
    assert "La/Yb" in capsys.readouterr().out
    assert main(argv[:-1] + ["--format", "csv"]) == 0  # without the option: no ratio columns
    assert "la_yb_cn" not in capsys.readouterr().out


# The ten rare earths of the pooled melt, as --trace-elements all gives them (CSV names).
_PPM = ("la_ppm", "ce_ppm", "nd_ppm", "sm_ppm", "eu_ppm", "gd_ppm", "dy_ppm", "er_ppm",
        "yb_ppm", "lu_ppm")
_REE_GRID = ["column", "--potential-temperature", "1250,1400", "--lithosphere-thickness",
             "46,100", "--water", "150"]


def _csv_rows(capsys, *argv) -> list[dict]:
    assert main([*argv, "--format", "csv"]) == 0
    return list(csv.DictReader(io.StringIO(capsys.readouterr().out)))


def test_trace_elements_all_gives_the_fast_routes_ppm_with_the_chosen_source(capsys):
    from lidmelt.forward.trace import ELEMENTS, fast_trace_elements

    rows = _csv_rows(capsys, *_REE_GRID, "--trace-elements", "all", "--trace-source",
                     "salters_stracke_2004", "--trace-transition", "2.0:2.8")
    assert list(rows[0])[-13:] == ["la_yb_cn", "sm_yb_cn", "dy_yb_cn", *_PPM]
    melted = 0
    for row in rows:
        res = melt_column(float(row["potential_temperature_c"]),
                          float(row["lithosphere_thickness_km"]), water=150.0)
        if res.melt_thickness == 0.0:  # nothing melts: empty cells, as for the ratios
            assert all(row[k] == "" for k in _PPM)
            continue
        melted += 1
        melt = fast_trace_elements(res, source="salters_stracke_2004",
                                   transition=(2.0, 2.8)).melt
        for column, value in zip(_PPM, melt, strict=True):
            # the same computation on a batch of points and on one: only the order of
            # floating-point sums may differ
            assert float(row[column]) == pytest.approx(value, rel=1e-12)
        assert float(row["la_yb_cn"]) == pytest.approx(
            (melt[0] / melt[8]) * (0.170 / 0.237), rel=1e-12)  # CI La, Yb: Sun & McDonough
        # 1989 (value from memory; the model's own file holds the same numbers)
        # Mass balance (common practice): the melt extracted, a mass F_max per unit of
        # source, cannot carry more of an element than the source held, and La, far more
        # incompatible than the melt fraction is large (bulk D ~ 0.01), is nearly all in it
        # once F >= 0.1. DM, Salters & Stracke 2004, Table 5, ppm (value from memory)
        f_max = float(row["max_melt_fraction"])
        source = (0.234, 0.772, 0.713, 0.270, 0.107, 0.395, 0.531, 0.371, 0.401, 0.063)
        shares = [float(row[c]) * f_max / c0 for c, c0 in zip(_PPM, source, strict=True)]
        assert all(0.0 < s <= 1.0 + 1e-12 for s in shares), shares
        if f_max >= 0.1:
            assert shares[0] > 0.99, shares
    assert melted == 3
    assert [c.removesuffix("_ppm") for c in _PPM] == [e.lower() for e in ELEMENTS]


def test_concentrations_scale_with_the_source_as_fractional_melting_is_linear(capsys):
    # Shaw 1970: the fractional melt is C0 times a function of D and F alone, so two
    # sources give concentrations in the ratio of their source values, element by element.
    # DMM, Workman & Hart 2005 (EPSL 231), Table 1, ppm (value from memory)
    workman_hart = {"la": 0.192, "ce": 0.550, "nd": 0.581, "sm": 0.239, "eu": 0.096,
                    "gd": 0.358, "dy": 0.505, "er": 0.348, "yb": 0.365, "lu": 0.058}
    # DM, Salters & Stracke 2004 (G-cubed 5), Table 5, ppm (value from memory)
    salters_stracke = {"la": 0.234, "ce": 0.772, "nd": 0.713, "sm": 0.270, "eu": 0.107,
                       "gd": 0.395, "dy": 0.531, "er": 0.371, "yb": 0.401, "lu": 0.063}
    grid = ["column", "--potential-temperature", "1300:1500:100", "--lithosphere-thickness",
            "0,60,90", "--melting-region", "column,triangle", "--trace-elements", "all"]
    wh = _csv_rows(capsys, *grid)  # the default source: Workman & Hart 2005
    ss = _csv_rows(capsys, *grid, "--trace-source", "salters_stracke_2004")
    assert len(wh) == len(ss) == 18
    for a, b in zip(wh, ss, strict=True):
        if a["la_ppm"] == "":
            assert b["la_ppm"] == ""
            continue
        for element, c0 in workman_hart.items():
            expected = salters_stracke[element] / c0
            assert float(b[f"{element}_ppm"]) / float(a[f"{element}_ppm"]) == pytest.approx(
                expected, rel=1e-9)
        # and each ratio by the ratio of the two sources' ratios
        for num in ("la", "sm", "dy"):
            expected = (salters_stracke[num] / salters_stracke["yb"]) / (
                workman_hart[num] / workman_hart["yb"])
            assert float(b[f"{num}_yb_cn"]) / float(a[f"{num}_yb_cn"]) == pytest.approx(
                expected, rel=1e-9)
    assert sum(r["la_ppm"] != "" for r in wh) >= 12


def test_the_table_says_which_source_and_transition(capsys, monkeypatch):
    from lidmelt.cli import column

    argv = [*_REE_GRID, "--trace-elements", "all", "--trace-transition", "2.2:2.9"]
    assert main(argv) == 0
    table = capsys.readouterr().out
    head = " ".join(table.split("\n\n")[0].split())
    assert "workman_hart_2005" in head and "2.20–2.90 GPa" in head
    assert "La–Lu = concentrations in the pooled melt" in " ".join(table.split())
    # in chunks of one row the text is the same (the widths come from the extreme rows)
    monkeypatch.setattr(column, "CHUNK_ROWS", 1)
    assert main(argv) == 0
    assert capsys.readouterr().out == table
    # bare --trace-elements: the ratios only, as before; "ratios" says the same
    assert main([*_REE_GRID, "--trace-elements", "--format", "json"]) == 0
    bare = capsys.readouterr().out
    assert '"la_yb"' in bare and '"la"' not in bare
    assert main([*_REE_GRID, "--trace-elements", "ratios", "--format", "json"]) == 0
    assert capsys.readouterr().out == bare
    assert main([*_REE_GRID, "--trace-elements", "all", "--format", "json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["units"]["la"] == "ppm" and data["columns"]["lu"] == "lu_ppm"
    assert sum(r["yb"] is None for r in data["rows"]) == 1


@pytest.mark.parametrize("argv, message", [
    (["--trace-source", "salters_stracke_2004"],
     "--trace-source: give it with --trace-elements"),
    (["--trace-transition", "2:3"], "--trace-transition: give it with --trace-elements"),
    (["--trace-elements", "--trace-source", "workman_hart"],
     "--trace-source: unknown source 'workman_hart'"),
    (["--trace-elements", "--trace-transition", "3.0:2.5"],
     "--trace-transition: must be LO:HI in GPa with 0 <= LO < HI <= 10"),
    (["--trace-elements", "--trace-transition", "2.5:12"], "0 <= LO < HI <= 10"),
    (["--trace-elements", "--trace-transition", "2.5"], "must be LO:HI in GPa"),
    (["--trace-elements", "some"], "--trace-elements: unknown 'some'; choose ratios or all"),
])
def test_trace_options_refused_with_one_line(argv, message, capsys):
    from helpers import cli_refused

    assert message in cli_refused(capsys, "column", *argv)
