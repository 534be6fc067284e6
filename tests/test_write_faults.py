"""A full disk while writing the checkpoint or the results: one line, exit 1, checkpoint
kept, and a resume that gives the uninterrupted result byte for byte."""

from __future__ import annotations

import errno
import os
import stat
from pathlib import Path

from helpers import FULL, DiskFull, assert_same_outputs
from lidmelt import _atomic
from lidmelt.inversion.fitting.checkpoint import HEADER, RECORDS, _read_frames, stored_steps
from lidmelt.inversion.outputs.folder import MANIFEST
from lidmelt.cli import main


def _fit(capsys, study, out, *extra):
    code = main(["fit", str(study), "--out", str(out), "--quiet", *extra])
    return code, capsys.readouterr().err


def _resume_matches(capsys, study, out, reference) -> None:
    code, err = _fit(capsys, study, out, "--resume")
    assert code == 0, err
    assert_same_outputs(out, reference)
    assert not out.with_name(out.name + ".partial").exists()


def test_full_disk_in_the_middle_of_a_checkpoint_record(reference, tmp_path, capsys,
                                                        monkeypatch):
    study, ref = reference
    out, partial = tmp_path / "run", tmp_path / "run.partial"
    with monkeypatch.context() as patch:
        patch.setattr(_atomic, "_write_all", DiskFull(RECORDS, nth=2))
        code, err = _fit(capsys, study, out)
    assert code == 1
    assert err.strip() == (
        f"lidmelt fit: error: cannot write {partial / RECORDS} ({FULL}); the "
        f"checkpoint up to step 50 is kept in {partial}; free some space, then run the same "
        "command with --resume")
    # The half-written record is cut off; the complete one before it is intact.
    assert sorted(p.name for p in partial.iterdir()) == sorted([MANIFEST, HEADER, RECORDS])
    assert stored_steps(partial) == 50 and not out.exists()
    _resume_matches(capsys, study, out, ref)


def test_a_failed_flush_to_the_disk_cuts_the_record_off(reference, tmp_path, capsys,
                                                         monkeypatch):
    study, ref = reference
    out, partial = tmp_path / "run", tmp_path / "run.partial"
    flush, calls = os.fsync, []

    def failing_fsync(fd):
        if stat.S_ISREG(os.fstat(fd).st_mode):  # not the folder's own flush
            calls.append(fd)
            if len(calls) == 3:  # the third record: written, not known to be on the disk
                raise OSError(errno.ENOSPC, FULL)
        flush(fd)

    with monkeypatch.context() as patch:
        patch.setattr(_atomic.os, "fsync", failing_fsync)
        code, err = _fit(capsys, study, out)
    assert code == 1 and "the checkpoint up to step 100 is kept" in err
    assert len(err.strip().splitlines()) == 1
    assert stored_steps(partial) == 100
    _, _, left = _read_frames(partial / RECORDS)
    assert left == 0  # nothing of the failed record is left behind
    _resume_matches(capsys, study, out, ref)


def test_full_disk_while_writing_the_results(reference, tmp_path, capsys, monkeypatch):
    study, ref = reference
    out, partial = tmp_path / "run", tmp_path / "run.partial"
    with monkeypatch.context() as patch:
        patch.setattr(_atomic, "_write_all", DiskFull("fit.png"))
        code, err = _fit(capsys, study, out)
    assert code == 1 and len(err.strip().splitlines()) == 1
    kept = stored_steps(partial)
    assert f"cannot write {out / 'fit.png'} ({FULL}); the checkpoint up to step {kept} " \
           "is kept" in err
    assert kept > 0 and not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.partial"]  # no half result
    _resume_matches(capsys, study, out, ref)  # the finished chain is not extended


def test_full_disk_at_the_first_record_keeps_nothing_and_leaves_nothing(reference, tmp_path,
                                                                        capsys, monkeypatch):
    study, _ = reference
    out = tmp_path / "run"
    with monkeypatch.context() as patch:
        patch.setattr(_atomic, "_write_all", DiskFull(RECORDS))
        code, err = _fit(capsys, study, out)
    assert code == 1
    assert "no step had been stored yet, so nothing was kept" in err and "--resume" not in err
    assert list(tmp_path.iterdir()) == []
