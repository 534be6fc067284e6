"""Shared test set-up: headless plotting, and one small reference fit for the suite."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")

import pytest  # noqa: E402


@pytest.fixture(scope="session")
def reference(tmp_path_factory):
    """A small study and the result folder of its uninterrupted CLI run.

    The run checks convergence every 50 steps and stops at step 200 or so, so faults can
    be placed at the second and third checkpoint records.
    """
    from helpers import small_study
    from lidmelt.inversion.cli import main

    root = tmp_path_factory.mktemp("reference")
    study = small_study(root / "study")
    assert main(["fit", str(study), "--out", str(root / "ref"), "--quiet"]) == 0
    return study, root / "ref"
