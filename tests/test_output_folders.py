"""Every command's output by the one rule: the user's files are never touched, a live run's
folder is never taken, and a refused run leaves no folder behind."""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from helpers import small_study, cli_refused
from lidmelt.cli import main
from lidmelt.inversion import InputError
from lidmelt.inversion.outputs.folder import (
    MANIFEST,
    check_replaceable,
    remove_listed,
    write_manifest,
)
from lidmelt.inversion.outputs.identity import check_same_run
from survey_helpers import truth_table, write_sites, write_study

DATA = Path(__file__).parent / "data"
# A user's own files whose names lidmelt also writes (the survey's record among them).
_FIELDWORK = {"survey.json": b'{"my": "field campaign"}\n', "report.md": b"# My notes\n"}


def _snapshot(folder: Path) -> dict:
    """Every file and folder below `folder`, with the bytes of the files."""
    return {p: (p.read_bytes() if p.is_file() else None) for p in sorted(folder.rglob("*"))}


_refused = cli_refused  # exit 2, one line, no traceback


@pytest.fixture
def fieldwork(tmp_path):
    folder = tmp_path / "fieldwork"
    folder.mkdir()
    for name, data in _FIELDWORK.items():
        (folder / name).write_bytes(data)
    return folder


@pytest.fixture(scope="module")
def survey_inputs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("survey-inputs")
    study = write_study(folder)
    sites = write_sites(folder, study, truth_table(1390.0, [18.0, 30.0]), 4)
    return study, sites


def _survey(study, sites, out, *extra):
    return ["survey", str(study), "--sites", str(sites), "--out", str(out), "--quiet",
            "--workers", "1", *extra]


# ---- the user's folder with lidmelt-looking names: every command refuses it -----------


def test_survey_force_never_replaces_a_users_folder(fieldwork, survey_inputs, capsys):
    before = _snapshot(fieldwork)
    err = _refused(capsys, *_survey(*survey_inputs, fieldwork, "--force"))
    assert "was not written by lidmelt survey" in err
    err = _refused(capsys, *_survey(*survey_inputs, fieldwork, "--resume"))
    assert "there is no survey to resume here" in err
    assert _snapshot(fieldwork) == before


def test_fit_force_never_replaces_a_users_folder(fieldwork, tmp_path, capsys):
    study = small_study(tmp_path / "project")
    before = _snapshot(fieldwork)
    err = _refused(capsys, "fit", str(study), "--out", str(fieldwork), "--force", "--quiet")
    assert "was not written by lidmelt fit" in err
    assert _snapshot(fieldwork) == before


def test_compare_force_never_replaces_a_users_folder(fieldwork, tmp_path, capsys):
    for name in ("scenarios.toml", "crust.csv", "basalts.csv"):
        shutil.copy(DATA / name, tmp_path / name)
    before = _snapshot(fieldwork)
    err = _refused(capsys, "compare", str(tmp_path / "scenarios.toml"), "--out",
                   str(fieldwork), "--force", "--quiet")
    assert "was not written by lidmelt compare" in err
    assert _snapshot(fieldwork) == before


def test_column_plot_never_replaces_a_users_file(fieldwork, capsys):
    figure = fieldwork / "profile.png"
    figure.write_bytes(b"\x89PNG\r\n\x1a\n my own figure")
    before = _snapshot(fieldwork)
    args = ["column", "--potential-temperature", "1350", "--plot", str(figure)]
    assert "already exists; pass --force" in _refused(capsys, *args)
    assert "was not written by lidmelt" in _refused(capsys, *args, "--force")
    assert _snapshot(fieldwork) == before
    # a figure lidmelt wrote is replaced with --force, and only with it
    own = fieldwork.parent / "pt.png"
    assert main(args[:-1] + [str(own)]) == 0
    capsys.readouterr()
    assert "already exists" in _refused(capsys, *args[:-1], str(own))
    assert main([*args[:-1], str(own), "--force"]) == 0


def test_a_kind_of_result_replaces_only_its_own_kind(tmp_path, capsys):
    study = small_study(tmp_path / "project")
    other = tmp_path / "old-comparison"
    other.mkdir()
    write_manifest(other, ["evidence.csv"], kind="comparison")
    (other / "evidence.csv").write_text("hours of nested sampling")
    before = _snapshot(other)
    err = _refused(capsys, "fit", str(study), "--out", str(other), "--force", "--quiet")
    assert "holds a lidmelt comparison, not a fit result" in err
    assert _snapshot(other) == before


# ---- nested manifests -----------------------------------------------------------------


def _nested(root: Path) -> Path:
    """A top folder listing `runs/`, which lists `a/`, which lists one file."""
    root.mkdir()
    write_manifest(root, ["top.csv"], kind="comparison", folders=["runs"])
    (root / "top.csv").write_text("x")
    (root / "runs").mkdir()
    write_manifest(root / "runs", [], kind="survey sites", folders=["a", "b"])
    (root / "runs" / "a").mkdir()
    write_manifest(root / "runs" / "a", ["site.json"], kind="survey site")
    (root / "runs" / "a" / "site.json").write_text("{}")
    (root / "runs" / "b").mkdir()  # created, killed before its manifest: empty, ours
    return root


def test_nested_manifests_are_followed_to_the_bottom(tmp_path):
    root = _nested(tmp_path / "out")
    own = check_replaceable(root, kind="comparison")
    assert {p.relative_to(root).as_posix() for p in own} == {
        MANIFEST, "top.csv", "runs", f"runs/{MANIFEST}", "runs/a", f"runs/a/{MANIFEST}",
        "runs/a/site.json", "runs/b"}
    for foreign in ("runs/a/notes.txt", "runs/c/x.csv", "runs/b/x.csv"):
        path = root / foreign
        path.parent.mkdir(exist_ok=True)
        path.write_text("mine")
        before = _snapshot(root)
        with pytest.raises(InputError, match="holds 'runs/(a/notes.txt|c|b)'"):
            check_replaceable(root)
        assert _snapshot(root) == before
        path.unlink()
        if path.parent.name == "c":
            path.parent.rmdir()
    remove_listed(root, check_replaceable(root))
    assert not root.exists()


def test_a_survey_folder_with_a_foreign_site_folder_is_not_replaced(survey_inputs, tmp_path,
                                                                   capsys):
    out = tmp_path / "run"
    assert main(_survey(*survey_inputs, out)) == 0
    top = json.loads((out / MANIFEST).read_text())
    assert top["kind"] == "survey" and top["folders"] == ["sites"]
    sites = json.loads((out / "sites" / MANIFEST).read_text())
    assert sites["folders"] == ["0001-S01", "0002-S02"]
    for extra in ("sites/0003-S03/site.json", "sites/0001-S01/my-fit.csv"):
        path = out / extra
        path.parent.mkdir(exist_ok=True)
        path.write_text("mine")
        before = _snapshot(out)
        err = _refused(capsys, *_survey(*survey_inputs, out, "--force"))
        assert f"holds '{'/'.join(Path(extra).parts[:2 if '0003' in extra else 3])}'" in err
        assert _snapshot(out) == before
        path.unlink()
    (out / "sites" / "0003-S03").rmdir()
    assert main(_survey(*survey_inputs, out, "--force")) == 0


# ---- one run per folder ---------------------------------------------------------------


def _finished(folder: Path) -> int:
    return len(list((folder / "sites").glob("*/site.json"))) if folder.exists() else 0


def test_a_running_survey_keeps_its_folder(survey_inputs, tmp_path, capsys):
    study, _ = survey_inputs
    many = write_sites(tmp_path, study, truth_table(1390.0, np.linspace(15, 45, 6)), 9)
    out = tmp_path / "live"
    child = subprocess.Popen([sys.executable, "-m", "lidmelt.cli",
                              *_survey(study, many, out)],
                             start_new_session=True, stdout=subprocess.DEVNULL,
                             stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        while _finished(out) < 1 and time.monotonic() < deadline and child.poll() is None:
            time.sleep(0.05)
        assert child.poll() is None, "the first survey ended before the test could start"
        for flag in ("--force", "--resume"):
            err = _refused(capsys, *_survey(study, many, out, flag))
            assert f"another lidmelt run (process {child.pid}" in err
        _, stderr = child.communicate(timeout=300)
    finally:
        if child.poll() is None:
            os.killpg(child.pid, signal.SIGKILL)
            child.wait()
    assert child.returncode == 0, stderr
    assert _finished(out) == 6 and (out / "sites_summary.csv").is_file()
    assert not (tmp_path / ".live.lock").exists()


# ---- refused runs leave nothing behind; odd --out values are clear errors --------------


def test_bad_options_of_a_survey_leave_no_folder(survey_inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert "workers = 0 must be at least 1" in _refused(
        capsys, *_survey(*survey_inputs, out)[:-2], "--workers", "0")
    with pytest.raises(SystemExit) as stop:  # the seed is checked while parsing
        main(list(_survey(*survey_inputs, out, "--seed", "-1")))
    assert stop.value.code == 2
    assert list(tmp_path.iterdir()) == []


def test_a_joint_survey_with_every_site_bad_leaves_no_folder(survey_inputs, tmp_path,
                                                            capsys):
    study, _ = survey_inputs
    sites = tmp_path / "sites.csv"
    sites.write_text("site,thickness_km,thickness_sigma_km\nA,7.0,-1\nB,6.5,-1\n",
                     encoding="utf-8")
    out = tmp_path / "out"
    err = _refused(capsys, *_survey(study, sites, out, "--mode", "joint"))
    assert "no site could be used: every row has a bad value; the first, 'A'" in err
    assert not out.exists() and not list(tmp_path.glob(".out*"))


@pytest.mark.parametrize("command", ["fit", "compare", "survey"])
def test_the_root_folder_as_out_is_a_clear_error(command, survey_inputs, tmp_path, capsys):
    if command == "survey":
        argv = _survey(*survey_inputs, "/", "--force")
    else:
        for name in ("scenarios.toml", "crust.csv", "basalts.csv"):
            shutil.copy(DATA / name, tmp_path / name)
        argv = [command, str(tmp_path / "scenarios.toml"), "--out", "/", "--force",
                "--quiet"]
    assert "cannot be the root folder" in _refused(capsys, *argv)


@pytest.mark.parametrize("command", ["fit", "compare", "survey"])
def test_a_linked_out_is_named_as_a_link(command, survey_inputs, tmp_path, capsys):
    real = tmp_path / "real"
    real.mkdir()
    (real / "report.md").write_text("mine")
    link = tmp_path / "link"
    link.symlink_to(real)
    if command == "survey":
        argv = _survey(*survey_inputs, link)
    else:
        for name in ("scenarios.toml", "crust.csv", "basalts.csv"):
            shutil.copy(DATA / name, tmp_path / name)
        argv = [command, str(tmp_path / "scenarios.toml"), "--out", str(link), "--quiet"]
    for extra in ((), ("--force",)) + ((("--resume",),) if command == "survey" else ()):
        err = _refused(capsys, *argv, *extra)
        assert "is a symbolic link" in err and "is a file" not in err
    assert (real / "report.md").read_text() == "mine" and link.is_symlink()


def test_a_resume_names_every_entry_that_changed(tmp_path):
    stored = {"the seed": "1", "the table a.csv": "x", "the lidmelt version": "1.0"}
    check_same_run(stored, dict(stored), since="then", file=tmp_path)
    with pytest.raises(InputError, match="cannot resume: the seed and the table b.csv "
                       "changed since then"):
        check_same_run({**stored, "the table b.csv": "y"}, {**stored, "the seed": "2"},
                       since="then", file=tmp_path)
    with pytest.raises(InputError, match="no readable fingerprint"):
        check_same_run(None, stored, since="then", file=tmp_path)
