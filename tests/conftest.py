"""Shared test set-up: headless plotting, a table cache of the test session's own, and
one small reference fit for the suite."""

import os
from pathlib import Path

import pytest

os.environ.setdefault("MPLBACKEND", "Agg")


@pytest.fixture(scope="session", autouse=True)
def table_cache(tmp_path_factory):
    """The folder of tabulated melting paths for the whole session (``LIDMELT_CACHE``).

    A test run never writes to the user's cache: the tables are built once per session in
    a temporary folder, which subprocesses inherit through the environment. Set
    ``LIDMELT_TEST_CACHE`` to a folder to keep them between sessions instead.
    """
    kept = os.environ.get("LIDMELT_TEST_CACHE")
    if kept:
        folder = Path(kept)
    elif "PYTEST_XDIST_WORKER" in os.environ:
        # parallel workers share one folder of this run (the tables are built once, under
        # the cache's per-table lock), inside the run's own temporary root
        folder = tmp_path_factory.getbasetemp().parent / "lidmelt-cache"
        folder.mkdir(exist_ok=True)
    else:
        folder = tmp_path_factory.mktemp("lidmelt-cache")
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("LIDMELT_CACHE", str(folder))
        patch.delenv("LIDMELT_CACHE_MAX_MB", raising=False)
        yield folder


@pytest.fixture(scope="session")
def reference(tmp_path_factory):
    """A small study and the result folder of its uninterrupted CLI run.

    The run checks convergence every 50 steps and stops at step 200 or so, so faults can
    be placed at the second and third checkpoint records.
    """
    from helpers import small_study
    from lidmelt.cli import main

    root = tmp_path_factory.mktemp("reference")
    study = small_study(root / "study")
    assert main(["fit", str(study), "--out", str(root / "ref"), "--quiet"]) == 0
    return study, root / "ref"
