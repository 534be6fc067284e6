"""``lidmelt fit`` and ``lidmelt demo`` used like a user would, including mistakes."""

from __future__ import annotations

import hashlib
import json
import os
import re
import select
import signal
import subprocess
import sys
import time
from pathlib import Path

import emcee
import numpy as np
import pandas as pd
import pytest
from helpers import DEMO, assert_same_outputs
from helpers import small_study as _small_study
from matplotlib import image
from matplotlib.colors import to_rgb
from lidmelt import demo_data
from lidmelt.forward import figure_style as style
from lidmelt.inversion import OUTPUT_FILES, SUMMARY_COLUMNS
from lidmelt.inversion.fitting.checkpoint import stored_steps
from lidmelt.cli import main


def _fit(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_demo_end_to_end(tmp_path, capsys):
    out_dir = tmp_path / "demo-results"
    # (Its speed is measured by benchmarks/inversion_speed.py, not asserted here.)
    code, out, err = _fit(capsys, "demo", "--out", str(out_dir), "--quiet")
    assert code == 0, err
    assert f"Results written to {out_dir.resolve()}" in out
    assert "Mantle potential temperature" in out and "°C" in out
    assert sorted(p.name for p in out_dir.iterdir()) == sorted(OUTPUT_FILES)
    assert not out_dir.with_name(out_dir.name + ".partial").exists()

    summary = pd.read_csv(out_dir / "summary.csv")
    assert tuple(summary.columns) == SUMMARY_COLUMNS
    assert summary["parameter"].tolist() == ["potential_temperature", "lithosphere_thickness",
                                             "solidus_offset"]
    assert summary["unit"].tolist() == ["degC", "km", "degC"]
    assert (summary["ess"] >= 2000).all()  # the default ESS target of the demo
    assert ((summary["q2.5"] < summary["q16"]) & (summary["q16"] < summary["median"])
            & (summary["median"] < summary["q84"]) & (summary["q84"] < summary["q97.5"])).all()
    # The demo data were simulated at Tp 1400 degC and a 46 km lid (demo_data docstring).
    truth = summary.set_index("parameter")
    assert truth.loc["potential_temperature", "q2.5"] < 1400 < truth.loc[
        "potential_temperature", "q97.5"]
    assert truth.loc["lithosphere_thickness", "q2.5"] < 46 < truth.loc[
        "lithosphere_thickness", "q97.5"]
    derived = pd.read_csv(out_dir / "derived.csv")
    assert derived["parameter"].tolist() == ["onset_depth", "crustal_thickness",
                                             "mean_melt_fraction", "mean_melting_pressure"]
    samples = pd.read_csv(out_dir / "samples.csv")
    assert {"potential_temperature", "crustal_thickness", "log_posterior"} <= set(samples)
    assert np.isfinite(samples.to_numpy(float)).all()

    diagnostics = json.loads((out_dir / "diagnostics.json").read_text())
    assert diagnostics["converged"] is True
    assert set(diagnostics["split_rhat_approximate"]) == set(summary["parameter"])
    assert 0.1 < diagnostics["acceptance_fraction"]["mean"] < 0.9
    run = json.loads((out_dir / "run.json").read_text())
    study_bytes = demo_data.study_path().read_bytes()
    assert run["study_sha256"] == hashlib.sha256(study_bytes).hexdigest()
    assert run["seed"] == 1 and run["command_line"][:2] == ["lidmelt", "demo"]
    assert run["versions"]["emcee"] == emcee.__version__

    backend = emcee.backends.HDFBackend(str(out_dir / "chain.h5"), read_only=True)
    assert backend.get_chain().shape[1:] == (48, 3)
    report = (out_dir / "report.md").read_text()
    for phrase in ("68 %", "95 %", "converged", "no basis on their own", "katz2003"):
        assert phrase in report
    # The figures hold what they should (their content is tested on the Figure objects
    # in test_figures): at 150 dpi every figure is over 5 inches a side, and the colours
    # of their parts (forward.figure_style) cover a share of the image that a blank or
    # half-drawn figure would not reach.
    _check_png(out_dir / "corner.png",
               {style.POSTERIOR: 0.005, style.MAP: 0.0001, style.PRIOR: 0.0003})
    _check_png(out_dir / "fit.png", {style.POSTERIOR: 0.001, style.INK: 0.005})
    _check_png(out_dir / "pt.png", {style.MAP: 0.0005, style.LID: 0.0002, style.INK: 0.003})


def _check_png(path: Path, colours: dict[str, float]) -> None:
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    pixels = image.imread(path)[..., :3]
    assert min(pixels.shape[:2]) > 750, (path.name, pixels.shape)
    drawn = np.mean(np.any(pixels < 0.95, axis=-1))
    assert 0.03 < drawn < 0.8, (path.name, drawn)
    for colour, least in colours.items():
        share = np.mean(np.all(np.abs(pixels - to_rgb(colour)) < 0.06, axis=-1))
        assert share > least, (path.name, colour, share)


def test_correlated_pt_and_free_model_errors_end_to_end(tmp_path, capsys):
    rows = (DEMO / "basalts.csv").read_text().strip().splitlines()
    basalts = "\n".join([rows[0] + ",pt_correlation"]
                        + [row + ",0.6" for row in rows[1:]]) + "\n"
    free = ('equilibration = "path"\n'
            'model_error = { prior = "log-uniform", min = 0.01, max = 0.5 }\n'
            'temperature_model_error = { prior = "uniform", min = 0.0, max = 60.0 }\n')
    study = _small_study(tmp_path / "study", basalts=basalts,
                         replace=('equilibration = "path"\n', free))
    out_dir = tmp_path / "out"
    code, out, err = _fit(capsys, "fit", str(study), "--out", str(out_dir), "--quiet")
    assert code == 0, err
    summary = pd.read_csv(out_dir / "summary.csv")
    assert summary["parameter"].tolist()[3:] == ["basalts.model_error",
                                                 "basalts.temperature_model_error"]
    assert summary["unit"].tolist()[3:] == ["GPa", "degC"]
    assert {"basalts.model_error", "basalts.temperature_model_error"} <= set(
        pd.read_csv(out_dir / "samples.csv").columns)
    report = (out_dir / "report.md").read_text()
    assert "with correlated P-T errors" in report
    assert "Model error of basalts" in report
    assert "Temperature model error of basalts" in out
    diagnostics = json.loads((out_dir / "diagnostics.json").read_text())
    assert set(diagnostics["ess"]) == set(summary["parameter"])


def test_same_seed_gives_identical_outputs(tmp_path, capsys):
    study = _small_study(tmp_path / "study")
    runs = {}
    for label, seed in (("a", "3"), ("b", "3"), ("c", "4")):
        code, _, err = _fit(capsys, "fit", str(study), "--out", str(tmp_path / label),
                            "--seed", seed, "--quiet")
        assert code == 0, err
        runs[label] = tmp_path / label
    assert_same_outputs(runs["a"], runs["b"])  # run.json records wall time
    chains = [emcee.backends.HDFBackend(str(runs[k] / "chain.h5"), read_only=True).get_chain()
              for k in "abc"]
    np.testing.assert_array_equal(chains[0], chains[1])
    assert not np.array_equal(chains[0][-1], chains[2][-1])
    assert (runs["a"] / "summary.csv").read_bytes() != (runs["c"] / "summary.csv").read_bytes()


def test_existing_folder_is_refused_and_force_replaces_only_lidmelt_folders(tmp_path, capsys):
    study = _small_study(tmp_path / "study")
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    (out_dir / "keep.txt").write_text("old result")
    code, _, err = _fit(capsys, "fit", str(study), "--out", str(out_dir), "--quiet")
    assert code == 2
    assert "already exists" in err and "--force" in err and len(err.splitlines()) == 1
    code, _, err = _fit(capsys, "fit", str(study), "--out", str(out_dir), "--quiet", "--force")
    assert code == 2 and "not written by lidmelt" in err and len(err.splitlines()) == 1
    assert (out_dir / "keep.txt").read_text() == "old result"
    (out_dir / "keep.txt").unlink()
    out_dir.rmdir()
    code, _, err = _fit(capsys, "fit", str(study), "--out", str(out_dir), "--quiet")
    assert code == 0, err
    first = {p.name: p.stat().st_ino for p in out_dir.iterdir()}
    code, _, err = _fit(capsys, "fit", str(study), "--out", str(out_dir), "--quiet", "--force")
    assert code == 0, err
    assert sorted(p.name for p in out_dir.iterdir()) == sorted(OUTPUT_FILES)
    assert json.loads((out_dir / "lidmelt-files.json").read_text())["files"] == sorted(
        OUTPUT_FILES)
    assert all(p.stat().st_ino != first[p.name] for p in out_dir.iterdir())  # new files
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "study"]  # nothing left


BAD_BASALTS = "sample,pressure_gpa,pressure_sigma_gpa,temperature_c,temperature_sigma_c\nA,1.5,0.2,1380,30\n"
LID_40 = "\nlithosphere_thickness = { value = 40.0 }"


@pytest.mark.parametrize(
    ("edit", "message"),
    [
        ({"basalts": BAD_BASALTS + "B,1.8,-0.1,1400,30\n"},
         r"basalts.csv, line 3, column 'pressure_sigma_gpa'"),
        ({"basalts": BAD_BASALTS + "B,12.0,0.2,1400,30\n"},
         r"basalts.csv, line 3, column 'pressure_gpa'"),
        ({"basalts": BAD_BASALTS + "B,abc,0.2,1400,30\n"}, r"line 3, column 'pressure_gpa'"),
        ({"basalts": BAD_BASALTS + "B,nan,0.2,1400,30\n"}, r"line 3, column 'pressure_gpa'"),
        ({"basalts": "sample,pressure_gpa\nA,1.5\n"}, r"pressure_sigma_gpa"),
        ({"sampler": "walkrs = 16\nseed = 4\n"},
         r"key 'sampler.walkrs'.*did you mean 'walkers'"),
        ({"parameters": 'potential_temperature = { prior = "uniformm", min = 1.0, max = 2.0 }'
                        + LID_40}, r"uniform"),
        ({"parameters": 'potential_temperature = { prior = "uniform", min = 1500.0, '
                        'max = 1400.0 }' + LID_40}, r"potential_temperature"),
        ({"parameters": 'potential_temperature = { value = 1400.0 }\n'
                        'lithosphere_thickness = { value = -5.0 }'}, r"lithosphere_thickness"),
        ({"sampler": "walkers = 16\nseed = [1\n"}, r"malformed TOML"),
        ({"replace": ('equilibration = "path"\n', "")},
         r"study.toml, line \d+, key 'observations\[2\].equilibration': missing "
         r"'equilibration'.*\"top\".*\"pooled\".*\"path\""),
    ],
)
def test_bad_input_exits_2_with_one_line_and_no_folder(tmp_path, capsys, edit, message):
    study = _small_study(tmp_path / "study", **edit)
    out_dir = tmp_path / "out"
    code, out, err = _fit(capsys, "fit", str(study), "--out", str(out_dir), "--quiet")
    assert code == 2
    assert len(err.strip().splitlines()) == 1, err
    assert err.startswith("lidmelt fit: error: ")
    assert "Traceback" not in err
    assert re.search(message, err), err
    assert not out_dir.exists()
    assert not out_dir.with_name("out.partial").exists()
    assert [p.name for p in tmp_path.iterdir()] == ["study"]  # no temporary folders either


def test_missing_study_file_exits_2(tmp_path, capsys):
    code, _, err = _fit(capsys, "fit", str(tmp_path / "nope.toml"), "--out",
                        str(tmp_path / "out"))
    assert code == 2 and "nope.toml" in err and "not found" in err
    assert not (tmp_path / "out").exists()


def test_resume_without_checkpoint_is_refused(tmp_path, capsys):
    study = _small_study(tmp_path / "study")
    code, _, err = _fit(capsys, "fit", str(study), "--out", str(tmp_path / "out"), "--resume")
    assert code == 2 and "no interrupted run" in err


def _ctrl_c_enabled():
    """In the child: a shell running the suite in the background ignores SIGINT, which
    the child would inherit (and Python then installs no KeyboardInterrupt handler)."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _wait_for(process, text: bytes, timeout: float) -> bytes:
    """Read the process's stderr until `text` appears (tqdm writes no newlines)."""
    seen = b""
    deadline = time.monotonic() + timeout
    fd = process.stderr.fileno()
    while text not in seen:
        if time.monotonic() > deadline or process.poll() is not None:
            raise AssertionError(f"did not see {text!r}: {seen[-500:]!r}")
        ready, _, _ = select.select([fd], [], [], 0.2)
        if ready:
            seen += os.read(fd, 65536)
    return seen


@pytest.mark.skipif(sys.platform == "win32", reason="signals to a child process")
def test_sigterm_keeps_a_resumable_checkpoint(tmp_path, capsys):
    study = _small_study(tmp_path / "study", sampler=(
        "walkers = 16\nseed = 9\nstart = \"map\"\ness_target = 5000\ncheck_interval = 50\n"))
    out_dir = tmp_path / "run"
    process = subprocess.Popen(
        [sys.executable, "-m", "lidmelt.cli", "fit", str(study), "--out", str(out_dir)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=dict(os.environ, MPLBACKEND="Agg"))
    try:
        _wait_for(process, b"ESS ", timeout=120)
        process.send_signal(signal.SIGTERM)  # what a job scheduler sends at its time limit
        _, err = process.communicate(timeout=60)
    finally:
        if process.poll() is None:
            process.kill()
    assert process.returncode == 130, err
    assert b"continue it by running the same command with --resume" in err
    assert stored_steps(tmp_path / "run.partial") >= 50  # the first record and after
    assert not out_dir.exists()
    # A new run on the same folder must not silently throw the checkpoint away.
    code, _, err = _fit(capsys, "fit", str(study), "--out", str(out_dir), "--quiet")
    assert code == 2 and "pass --resume to continue it or --force" in err
    assert stored_steps(tmp_path / "run.partial") >= 50


def _wait_for_record(folder: Path, process, timeout: float) -> None:
    """Wait until the checkpoint holds its first record (the run is past its first check)."""
    deadline = time.monotonic() + timeout
    while not stored_steps(folder):
        if time.monotonic() > deadline or process.poll() is not None:
            raise AssertionError(f"no checkpoint record in {folder}")
        time.sleep(0.05)


@pytest.mark.skipif(sys.platform == "win32", reason="SIGINT to a child process")
def test_repeated_ctrl_c_is_one_line_and_resume_is_byte_identical(tmp_path, capsys):
    study = _small_study(tmp_path / "study", sampler=(
        "walkers = 16\nseed = 9\nstart = \"map\"\ness_target = 1200\ncheck_interval = 50\n"))
    out_dir = tmp_path / "run"
    env = dict(os.environ, MPLBACKEND="Agg")
    process = subprocess.Popen(
        [sys.executable, "-m", "lidmelt.cli", "fit", str(study), "--out",
         str(out_dir), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env, preexec_fn=_ctrl_c_enabled)
    try:
        _wait_for_record(tmp_path / "run.partial", process, timeout=120)
        for _ in range(5):  # an impatient user
            process.send_signal(signal.SIGINT)
            time.sleep(0.02)
        _, err = process.communicate(timeout=60)
    finally:
        if process.poll() is None:
            process.kill()
    assert process.returncode == 130, err
    lines = err.decode().strip().splitlines()
    assert len(lines) == 1, err  # no traceback, no "emcee: Exception while calling ..."
    assert "interrupted; the chain up to step" in lines[0] and "--resume" in lines[0]
    assert not out_dir.exists()
    kept = stored_steps(tmp_path / "run.partial")
    assert f"up to step {kept} " in lines[0] and kept >= 50

    code, _, err = _fit(capsys, "fit", str(study), "--out", str(out_dir), "--resume",
                        "--quiet")
    assert code == 0, err
    assert not (tmp_path / "run.partial").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run", "study"]  # no lock left
    code, _, err = _fit(capsys, "fit", str(study), "--out", str(tmp_path / "ref"), "--quiet")
    assert code == 0, err
    run = json.loads((out_dir / "run.json").read_text())
    assert run["resumed_from_step"] == kept  # it really continued the stored chain
    assert "resumed_from_step" not in json.loads((out_dir / "diagnostics.json").read_text())
    assert_same_outputs(out_dir, tmp_path / "ref")


class _TermWhileWriting:
    """Stand-in for lidmelt's low-level writer: the first write of `name` stores half its
    bytes, then SIGTERM arrives (what a job scheduler sends at its time limit)."""

    def __init__(self, name: str) -> None:
        from lidmelt import _atomic

        self.name, self.real, self.sent = name, _atomic._write_all, False

    def __call__(self, handle, data: bytes) -> None:
        from lidmelt import _atomic

        if not self.sent and _atomic.temporary_target(Path(handle.name).name) == self.name:
            self.sent = True
            handle.write(data[: len(data) // 2])
            os.kill(os.getpid(), signal.SIGTERM)
        self.real(handle, data)


def _term_after(real):
    """`real`, then SIGTERM to this process."""
    def call(*args, **kwargs):
        result = real(*args, **kwargs)
        os.kill(os.getpid(), signal.SIGTERM)
        return result
    return call


@pytest.mark.skipif(sys.platform == "win32", reason="SIGTERM to the test process")
def test_sigterm_while_the_results_are_written(tmp_path, capsys, monkeypatch):
    # Sampling has finished; SIGTERM comes (1) while posterior.nc is half written in the
    # staging folder, (2) as the finished folder is moved into place. Neither may leave a
    # half-written file under a final name or a state the same command cannot finish.
    from helpers import own_signal_handlers
    from lidmelt import _atomic
    from lidmelt.inversion.results import writers

    study = _small_study(tmp_path / "study", sampler=(
        "walkers = 16\nseed = 4\nstart = \"prior\"\nmax_steps = 100\ncheck_interval = 50\n"))
    argv = ["fit", str(study), "--quiet"]
    with own_signal_handlers():
        with monkeypatch.context() as patch:
            patch.setattr(_atomic, "_write_all", _TermWhileWriting("posterior.nc"))
            code, _, err = _fit(capsys, *argv, "--out", str(tmp_path / "a"))
        assert code == 130, err
        assert "up to step 100 is kept" in err and "--resume" in err
        assert sorted(p.name for p in tmp_path.iterdir()) == ["a.partial", "study"]

        with monkeypatch.context() as patch:
            patch.setattr(writers, "publish_folder", _term_after(writers.publish_folder))
            code, _, err = _fit(capsys, *argv, "--out", str(tmp_path / "b"))
        assert code == 130, err
        assert len(err.strip().splitlines()) == 1 and "complete" in err, err
        # the results are whole and the checkpoint is gone: nothing is left to resume
        assert not (tmp_path / "b.partial").exists()
        assert not list(tmp_path.glob(".b.*")) and not list(tmp_path.glob(".a.*"))

    code, _, err = _fit(capsys, *argv, "--out", str(tmp_path / "a"), "--resume")
    assert code == 0, err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a", "b", "study"]
    assert_same_outputs(tmp_path / "a", tmp_path / "b")
