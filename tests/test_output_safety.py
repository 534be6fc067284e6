"""--force replaces only what lidmelt wrote; one run at a time per result folder."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from helpers import small_study
from lidmelt.inversion import InputError
from lidmelt.inversion.outputs.folder import (
    MANIFEST,
    check_replaceable,
    output_lock,
    remove_stale_temporaries,
    write_manifest,
)
from lidmelt.cli import main


def _snapshot(folder: Path) -> dict:
    """Every file below `folder` with its bytes."""
    return {p: p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _cli(capsys, *argv):
    code = main(list(argv))
    return code, capsys.readouterr().err


def _refused(capsys, *argv) -> str:
    code, err = _cli(capsys, *argv)
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err, err
    return err


def test_force_on_the_current_folder_deletes_nothing(tmp_path, capsys, monkeypatch):
    study = small_study(tmp_path / "project")
    (tmp_path / "project" / "notes.txt").write_text("field notes")
    monkeypatch.chdir(tmp_path / "project")
    before = _snapshot(tmp_path)
    err = _refused(capsys, "fit", str(study), "--out", ".", "--force", "--quiet")
    assert "is the current folder" in err
    err = _refused(capsys, "fit", str(study), "--out", "..", "--force", "--quiet")
    assert "contains it" in err
    assert _snapshot(tmp_path) == before


def test_force_on_the_study_or_table_folder_deletes_nothing(tmp_path, capsys):
    study = small_study(tmp_path / "project")
    # Even a manifest claiming every file does not make the study's folder replaceable.
    write_manifest(tmp_path / "project", [p.name for p in (tmp_path / "project").iterdir()],
                   kind="fit result")
    before = _snapshot(tmp_path)
    err = _refused(capsys, "fit", str(study), "--out", str(tmp_path / "project"), "--force",
                   "--quiet")
    assert "holds the input file" in err
    assert _snapshot(tmp_path) == before


def test_force_on_a_file_deletes_nothing(tmp_path, capsys):
    study = small_study(tmp_path / "project")
    target = tmp_path / "thesis.docx"
    target.write_bytes(b"three years of work")
    err = _refused(capsys, "fit", str(study), "--out", str(target), "--force", "--quiet")
    assert "is a file" in err
    assert target.read_bytes() == b"three years of work"


def test_force_on_a_lidmelt_folder_with_a_user_file_deletes_nothing(tmp_path, capsys):
    study = small_study(tmp_path / "project")
    old = tmp_path / "old-result"
    old.mkdir()
    (old / "summary.csv").write_text("old summary")
    write_manifest(old, ["summary.csv"], kind="fit result")
    (old / "my-notes.txt").write_text("interpretation")
    before = _snapshot(tmp_path)
    err = _refused(capsys, "fit", str(study), "--out", str(old), "--force", "--quiet")
    assert "holds 'my-notes.txt', which lidmelt did not write" in err
    assert _snapshot(tmp_path) == before


def test_force_on_a_folder_lidmelt_did_not_mark_deletes_nothing(tmp_path, capsys):
    study = small_study(tmp_path / "project")
    other = tmp_path / "results"
    other.mkdir()
    (other / "summary.csv").write_text("someone else's")
    err = _refused(capsys, "fit", str(study), "--out", str(other), "--force", "--quiet")
    assert f"it has no {MANIFEST}" in err
    assert (other / "summary.csv").read_text() == "someone else's"


def test_rule_lists_own_files_and_temporaries_and_refuses_the_rest(tmp_path):
    folder = tmp_path / "out"
    folder.mkdir()
    write_manifest(folder, ["summary.csv"], kind="checkpoint", patterns=["step-*.npz"])
    own = ["summary.csv", "step-000000050.npz", ".step-000000100.npz.ab12cd34.tmp.npz"]
    for name in own:
        (folder / name).write_text("x")
    assert sorted(p.name for p in check_replaceable(folder)) == sorted([MANIFEST, *own])
    (folder / "sub").mkdir()
    with pytest.raises(InputError, match="holds 'sub'"):
        check_replaceable(folder)
    (folder / "sub").rmdir()
    (folder / "step-1.txt").write_text("x")  # not the pattern
    with pytest.raises(InputError, match="holds 'step-1.txt'"):
        check_replaceable(folder)
    assert check_replaceable(tmp_path / "absent") == []


def test_rule_refuses_links_and_a_forged_manifest(tmp_path):
    real = tmp_path / "real"
    real.mkdir()
    write_manifest(real, [], kind="fit result")
    (tmp_path / "link").symlink_to(real)
    with pytest.raises(InputError, match="is a symbolic link"):
        check_replaceable(tmp_path / "link")
    (real / MANIFEST).write_text(json.dumps({"written_by": "someone", "files": []}))
    with pytest.raises(InputError, match="not written by lidmelt"):
        check_replaceable(real)


def test_rule_refuses_a_folder_holding_a_table_read_from_elsewhere(tmp_path):
    tables = tmp_path / "shared-tables"
    tables.mkdir()
    (tables / "crust.csv").write_text("site,thickness_km,thickness_sigma_km\n")
    write_manifest(tables, ["crust.csv"], kind="fit result")
    with pytest.raises(InputError, match="holds the input file crust.csv"):
        check_replaceable(tables, inputs=[tables / "crust.csv"])
    assert check_replaceable(tables)  # without that input it would be replaceable


def test_stale_staging_folders_of_killed_runs_are_removed_but_not_foreign_ones(tmp_path):
    target = tmp_path / "run"
    ours = tmp_path / ".run.writing-k2j4x9ab"
    ours.mkdir()
    write_manifest(ours, ["summary.csv"], kind="fit result")
    (ours / "summary.csv").write_text("half a result")
    empty = tmp_path / ".run.old-77aa88bb"
    empty.mkdir()
    foreign = tmp_path / ".run.writing-somebody"
    foreign.mkdir()
    (foreign / "data.bin").write_text("not ours")
    remove_stale_temporaries(target)
    assert not ours.exists() and not empty.exists()
    assert (foreign / "data.bin").read_text() == "not ours"


def test_a_live_run_holds_the_folder_and_a_dead_ones_lock_is_taken_over(tmp_path, capsys):
    study = small_study(tmp_path / "project")
    target = tmp_path / "run"
    lock = tmp_path / ".run.lock"
    live = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        lock.write_text(f"{live.pid} {os.uname().nodename}\n")
        err = _refused(capsys, "fit", str(study), "--out", str(target), "--quiet")
        assert f"another lidmelt run (process {live.pid}" in err
        assert not target.exists() and not (tmp_path / "run.partial").exists()
    finally:
        live.kill()
        live.wait()
    # The same process id, now ended: a killed run's lock, taken over.
    with output_lock(target) as held:
        assert held == lock and lock.read_text().split()[0] == str(os.getpid())
        with output_lock(target):  # re-entrant within one process
            pass
        assert lock.exists()
    assert not lock.exists()
