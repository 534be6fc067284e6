"""--resume continues only the same problem: same study file, tables, seed and version."""

from __future__ import annotations

import shutil

import pytest
from helpers import DiskFull, assert_same_outputs
from lidmelt import _atomic, inversion
from lidmelt.inversion.outputs import identity as _provenance
from lidmelt.inversion.fitting.checkpoint import RECORDS, stored_steps
from lidmelt.cli import main


@pytest.fixture()
def stopped(reference, tmp_path, monkeypatch):
    """A copy of the reference study with a run stopped (by a full disk) after `nth` - 1
    checkpoint records; returns (study file, result folder)."""
    study = shutil.copytree(reference[0].parent, tmp_path / "study") / "study.toml"
    out = tmp_path / "run"

    def stop(nth: int):
        with monkeypatch.context() as patch:
            patch.setattr(_atomic, "_write_all", DiskFull(RECORDS, nth=nth))
            assert main(["fit", str(study), "--out", str(out), "--quiet"]) == 1
        return study, out

    return stop


def _resume(capsys, study, out, *extra):
    code = main(["fit", str(study), "--out", str(out), "--quiet", "--resume", *extra])
    return code, capsys.readouterr().err


def test_resume_refuses_changed_inputs_and_names_them(stopped, capsys, monkeypatch,
                                                      reference):
    study, out = stopped(nth=2)
    capsys.readouterr()
    crust = study.parent / "crust.csv"
    original = crust.read_text()
    crust.write_text(original.replace("6.5,0.6", "6.6,0.6"))  # one cell of one row
    code, err = _resume(capsys, study, out)
    assert code == 2 and len(err.strip().splitlines()) == 1
    assert "cannot resume: the table crust.csv changed since the run was stored" in err
    assert "pass --force to start over" in err
    crust.write_text(original)

    code, err = _resume(capsys, study, out, "--seed", "5")
    assert code == 2 and "cannot resume: the seed changed" in err

    text = study.read_text()
    study.write_text(text + "# a comment\n")
    code, err = _resume(capsys, study, out)
    assert code == 2 and "cannot resume: the study file study.toml changed" in err
    study.write_text(text)

    with monkeypatch.context() as patch:
        real = _provenance.package_version
        patch.setattr(_provenance, "package_version",
                      lambda name: "99.0" if name == "lidmelt" else real(name))
        code, err = _resume(capsys, study, out)
    assert code == 2 and "cannot resume: the lidmelt version changed" in err

    assert stored_steps(out.with_name("run.partial")) == 50  # refusals touch nothing
    code, err = _resume(capsys, study, out)  # everything restored: it continues
    assert code == 0, err
    assert_same_outputs(out, reference[1])


def test_resume_refuses_a_scenario_built_from_the_same_file(stopped, capsys):
    study_path, out = stopped(nth=2)
    study = inversion.Study.from_file(study_path)
    hotter = study.with_overrides({"solidus_offset": 10.0})
    with pytest.raises(inversion.InputError, match="the study settings changed"):
        inversion.fit(hotter, out=out, resume=True, quiet=True)


def _flip_byte_of_record(partial, index: int) -> None:
    """Flip one payload byte of the `index`-th record of the checkpoint file."""
    path = partial / RECORDS
    data, at = bytearray(path.read_bytes()), 0
    for _ in range(index):
        at += 60 + int.from_bytes(data[at + 20:at + 28], "little")
    data[at + 100] ^= 0xFF  # inside the payload (the frame is 60 bytes)
    path.write_bytes(bytes(data))


def test_a_damaged_record_is_discarded_with_a_warning(stopped, capsys, reference):
    study, out = stopped(nth=3)
    capsys.readouterr()
    partial = out.with_name("run.partial")
    size = (partial / RECORDS).stat().st_size
    _flip_byte_of_record(partial, 1)
    first = 60 + int.from_bytes((partial / RECORDS).read_bytes()[20:28], "little")
    code, err = _resume(capsys, study, out)
    assert code == 0, err
    assert (f"lidmelt: warning: checkpoint file {RECORDS} ends in a damaged or incomplete "
            f"record ({size - first} bytes); it is discarded (continuing from step 50)") in err
    assert_same_outputs(out, reference[1])  # the chain is the same, only redone


def test_a_checkpoint_without_any_usable_record_is_refused_not_restarted(stopped, capsys):
    study, out = stopped(nth=2)
    capsys.readouterr()
    partial = out.with_name("run.partial")
    _flip_byte_of_record(partial, 0)
    damaged = (partial / RECORDS).read_bytes()
    code, err = _resume(capsys, study, out)
    assert code == 2
    assert "holds no complete step" in err and "pass --force to start over" in err
    assert (partial / RECORDS).read_bytes() == damaged  # refusing changes nothing
