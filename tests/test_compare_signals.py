"""Ctrl-C and SIGTERM during nested sampling: the run stops, whatever it is doing.

scikit-learn, which trains the nested sampler's networks, catches KeyboardInterrupt
inside its training loop, warns and carries on. A signal there used to be swallowed: the
comparison finished with exit 0 and a ln Z that differed from an uninterrupted run.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
import warnings
from pathlib import Path

import numpy as np
import pytest
from helpers import own_signal_handlers
from lidmelt.inversion.comparison import nested_evidence
from lidmelt.inversion.study.priors import Normal
from toys import GaussianToy

DATA = Path(__file__).parent / "data"
Y = np.array([0.8, 1.4, 0.3, 1.1, 0.9, 1.6])
QUICK = {"live_points": 100, "effective_samples": 300, "seed": 4}

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")


@pytest.fixture(autouse=True)
def python_signal_handlers():
    with own_signal_handlers():  # whatever the test process inherited (nohup, xdist)
        yield


def _toy():
    return GaussianToy(Y, 0.5, Normal(0.0, 2.0))


@pytest.fixture(scope="module")
def uninterrupted():
    return nested_evidence(_toy(), **QUICK).log_evidence


def test_a_signal_inside_network_training_is_not_swallowed(monkeypatch, uninterrupted):
    from sklearn.neural_network import _multilayer_perceptron as mlp

    real, calls = mlp.BaseMultilayerPerceptron._update_no_improvement_count, []

    def ctrl_c_in_an_epoch(self, *args, **kwargs):
        calls.append(1)
        if len(calls) == 5:  # inside scikit-learn's try/except KeyboardInterrupt
            signal.raise_signal(signal.SIGINT)
        return real(self, *args, **kwargs)

    monkeypatch.setattr(mlp.BaseMultilayerPerceptron, "_update_no_improvement_count",
                        ctrl_c_in_an_epoch)
    with warnings.catch_warnings(record=True) as caught, pytest.raises(KeyboardInterrupt):
        warnings.simplefilter("always")
        nested_evidence(_toy(), **QUICK)
    assert len(calls) >= 5  # the signal did arrive during training
    assert not [w for w in caught if "interrupted by user" in str(w.message)]
    monkeypatch.undo()
    assert nested_evidence(_toy(), **QUICK).log_evidence == uninterrupted


@pytest.mark.parametrize("delay", [0.05, 0.4, 1.0])
def test_a_signal_at_any_moment_stops_nested_sampling(delay, uninterrupted):
    timer = threading.Timer(delay, os.kill, (os.getpid(), signal.SIGTERM))
    timer.start()
    try:
        with pytest.raises(KeyboardInterrupt):
            nested_evidence(_toy(), **QUICK)
            time.sleep(5)  # a run shorter than `delay` would not test anything
    finally:
        timer.cancel()
    signal.signal(signal.SIGTERM, signal.SIG_IGN)  # nothing else may still arrive
    assert nested_evidence(_toy(), **QUICK).log_evidence == uninterrupted


# ---- the command line -------------------------------------------------------------------

def _tiny_study(folder: Path) -> Path:
    """The test scenarios' base study alone, with the smallest useful settings."""
    folder.mkdir()
    text = (DATA / "scenarios.toml").read_text().split("[[scenarios]]")[0]
    for old, new in (("ess_target = 400\ntau_multiple = 25", "ess_target = 200\n"
                      "tau_multiple = 10"),
                     ("live_points = 200\neffective_samples = 1000\ngrid_points = 20000",
                      "live_points = 100\neffective_samples = 300\ngrid_points = 4000"),
                     ("min = 0.0, max = 150.0", "min = 30.0, max = 60.0")):
        assert old in text, old  # guards the test itself
        text = text.replace(old, new)
    for name in ("crust.csv", "basalts.csv"):
        (folder / name).write_bytes((DATA / name).read_bytes())
    (folder / "study.toml").write_text(text)
    return folder / "study.toml"


def _compare(study: Path, out: Path, *extra: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "lidmelt.cli", "compare", str(study), "--out", str(out),
         *extra], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        env=dict(os.environ, MPLBACKEND="Agg"),
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))


def _log_z(out: Path) -> float:
    record = json.loads((out / "base" / "scenario.json").read_text())
    return record["evidence"]["log_evidence"]


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    """A one-scenario study and the ln Z of its uninterrupted command-line run."""
    root = tmp_path_factory.mktemp("signals")
    study = _tiny_study(root / "study")
    done = _compare(study, root / "whole", "--quiet")
    _, err = done.communicate(timeout=300)
    assert done.returncode == 0, err
    return study, _log_z(root / "whole")


@pytest.mark.parametrize(("number", "delay"), [(signal.SIGTERM, 0.3), (signal.SIGINT, 1.2)])
def test_the_command_stops_in_nested_sampling_and_resumes_to_the_same_numbers(
        tiny, tmp_path, number, delay):
    study, reference = tiny
    out = tmp_path / "cmp"
    process = _compare(study, out)
    try:
        seen = b""
        while b"evidence (nested sampling" not in seen:
            line = process.stderr.readline()
            assert line, seen  # the run ended before its evidence started
            seen += line
        time.sleep(delay)
        process.send_signal(number)
        _, err = process.communicate(timeout=120)
    finally:
        if process.poll() is None:
            process.kill()
    lines = err.decode().strip().splitlines()
    assert process.returncode == 130, err
    assert len(lines) == 1, err  # no traceback, no library warning
    assert lines[0].startswith("lidmelt compare: interrupted"), err
    assert not out.exists()  # nothing published
    resumed = _compare(study, out, "--quiet", "--resume")
    _, err = resumed.communicate(timeout=300)
    assert resumed.returncode == 0, err
    assert _log_z(out) == reference
