"""Smaller input gaps: unreadable files, impossible values, odd characters, CLI options,
and the line between a user's mistake (exit 2) and a bug (traceback, exit 1)."""

from __future__ import annotations

import errno
from pathlib import Path

import pytest
from helpers import small_study, cli_refused
from lidmelt import inversion
from lidmelt.cli import fit as cli_fit
from lidmelt.cli import main

CRUST_HEAD = "site,thickness_km,thickness_sigma_km\n"


_refused = cli_refused  # exit 2, one line, no traceback


@pytest.mark.parametrize("which", ["study.toml", "crust.csv"])
@pytest.mark.parametrize("method", ["read_bytes", "is_file"])  # the file, or its folder
def test_an_unreadable_file_is_an_input_error_naming_it(tmp_path, capsys, monkeypatch, which,
                                                        method):
    study = small_study(tmp_path / "study")
    original = getattr(Path, method)

    def denied(self, *args, **kwargs):
        if self.name == which:
            raise PermissionError(errno.EACCES, "Permission denied", str(self))
        return original(self, *args, **kwargs)

    monkeypatch.setattr(Path, method, denied)
    err = _refused(capsys, "fit", str(study), "--out", str(tmp_path / "out"))
    assert which in err and "cannot be read (Permission denied)" in err
    assert not (tmp_path / "out").exists()


def test_an_impossible_crust_thickness_names_file_row_and_range(tmp_path, capsys):
    study = small_study(tmp_path / "study", crust=CRUST_HEAD + "A,6.5,0.6\nB,1e300,0.5\n")
    err = _refused(capsys, "fit", str(study), "--out", str(tmp_path / "out"))
    assert "crust.csv, line 3, column 'thickness_km': value 1e+300 must be between 0 and " \
           "60 km" in err
    assert "prior" not in err


@pytest.mark.parametrize("cell", ["6_5", "٦.5", "0x10"])
def test_numbers_python_reads_but_a_table_must_not(tmp_path, capsys, cell):
    study = small_study(tmp_path / "study", crust=CRUST_HEAD + f"A,{cell},0.6\n")
    err = _refused(capsys, "fit", str(study), "--out", str(tmp_path / "out"))
    assert f"line 2, column 'thickness_km': '{cell}' is not a number" in err


@pytest.mark.parametrize("char", ["\x00", "\u2028", "\x0c", "\x85"])
def test_control_characters_in_a_cell_are_refused(tmp_path, capsys, char):
    crust = CRUST_HEAD + "A,6.5,0.6\n" + f"B line{char} two,5.8,0.5\n"
    study = small_study(tmp_path / "study", crust=crust)
    err = _refused(capsys, "fit", str(study), "--out", str(tmp_path / "out"))
    assert f"line 3, column 'site': a cell holds the control character " \
           f"U+{ord(char):04X}" in err


@pytest.mark.parametrize("seed", ["-1", str(2**32), "1.5"])
def test_a_bad_seed_names_the_option_and_the_range(tmp_path, capsys, seed):
    study = small_study(tmp_path / "study")
    with pytest.raises(SystemExit) as stop:  # argparse's own usage error, exit 2
        main(["fit", str(study), "--out", str(tmp_path / "out"), "--seed", seed])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert f"argument --seed: '{seed}' must be a whole number from 0 to 4294967295" in err
    with pytest.raises(inversion.InputError, match=r"key 'seed': seed -1 must be a whole"):
        inversion.fit(inversion.Study.from_file(study), seed=-1)


def test_plot_into_a_missing_folder_is_refused_and_not_created(tmp_path, capsys):
    target = tmp_path / "figures" / "pt.png"
    err = _refused(capsys, "column", "--plot", str(target))
    assert "the folder for the --plot file does not exist" in err
    assert not (tmp_path / "figures").exists()


def test_missing_parameter_message_has_single_braces(tmp_path):
    path = small_study(tmp_path / "study", parameters='water = { value = 0.0 }')
    with pytest.raises(inversion.InputError) as info:
        inversion.Study.from_file(path)
    assert "{ prior = \"uniform\", min = ..., max = ... } or { value = ... }" in str(info.value)
    assert "}}" not in str(info.value)


def test_an_unknown_column_names_the_columns_the_kind_reads(tmp_path):
    study = small_study(tmp_path / "study", crust="site,depth_km,notes\nA,6.5,x\n")
    with pytest.raises(inversion.InputError) as info:
        inversion.Study.from_file(study)
    message = str(info.value)
    # 'notes' is a remark (NOTE_PREFIX); 'depth_km' is refused, listing what is read
    assert "crust.csv, line 1, column 'depth_km': unknown column 'depth_km'; this table " \
        "reads site, thickness_km, thickness_sigma_km" in message
    assert "valid choices" not in message


def test_missing_column_hint_does_not_offer_the_found_columns_as_choices(tmp_path):
    study = small_study(tmp_path / "study", crust="site,thickness_km,notes\nA,6.5,x\n")
    with pytest.raises(inversion.InputError) as info:
        inversion.Study.from_file(study)
    message = str(info.value)
    assert message.endswith("missing column 'thickness_sigma_km' (found: site, "
                            "thickness_km, notes)")


def test_a_bug_is_a_traceback_not_an_input_error(tmp_path, monkeypatch):
    def buggy(args):
        raise ValueError("internal: a bug, not the user's mistake")

    monkeypatch.setattr(cli_fit, "run", buggy)
    with pytest.raises(ValueError, match="internal"):  # uncaught: Python prints it, exit 1
        main(["fit", "study.toml", "--out", str(tmp_path / "out")])


def test_a_value_outside_the_model_domain_is_an_input_error(capsys):
    err = _refused(capsys, "column", "--potential-temperature", "5000")
    assert "potential_temperature = 5000 degC is outside the model domain" in err


def test_water_with_a_dry_parameterization_is_an_input_error(capsys):
    err = _refused(capsys, "column", "--parameterization", "mckenzie-bickle1988",
                   "--water", "100")
    assert "--water: mckenzie-bickle1988 is a dry parameterization" in err
