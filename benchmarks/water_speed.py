"""Cost of a free source-water content: the demo fit with water fixed and with water free.

Usage::

    python benchmarks/water_speed.py [--repeat N] [--seed S] [--water-max PPM]

The demo study holds water at 150 ppm; the free-water study is the same file with
``water`` given a uniform prior on 0 to ``--water-max`` ppm. Both are fitted in this run
with `inversion.fit` (MAP start, sampling until the stopping rule is met, MAP polish; no
files written), after the forward model's tables are loaded once, so the times compare
like with like. Printed per fit: wall time, steps, smallest ESS, ESS per second, and how
many melting-path tables were built or newly written to the cache during it (both must be
0: every water value is served by the one table that covers water). The last line is the
ratio of the free-water to the fixed-water time (target: about 3 or less). The
single-point route the MAP search and the figures use is timed separately. The demo's data
barely constrain water, so the free-water posterior spans its prior and the fit warns that
it piles against the bounds; the count of such warnings is printed.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
import warnings
from pathlib import Path

os.environ.setdefault("MPLBACKEND", "Agg")

import numpy as np  # noqa: E402
from lidmelt import demo_data, inversion  # noqa: E402
from lidmelt.forward import _cache, _table, melt_column  # noqa: E402

TARGET_RATIO = 3.0
_FIXED_LINE = "water = { value = 150.0 }"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=2, help="timed fits of each study")
    parser.add_argument("--seed", type=int, default=1, help="seed of the first repeat")
    parser.add_argument("--water-max", type=float, default=500.0,
                        help="upper bound (ppm) of the free-water prior")
    args = parser.parse_args(argv)
    fixed = inversion.Study.from_file(demo_data.study_path())
    with tempfile.TemporaryDirectory() as tmp:
        free = _free_water_study(Path(tmp), args.water_max)
        _count_builds()
        _warm_tables()
        print(f"{os.cpu_count()} CPUs; table cache {_cache.cache_folder()}")
        _single_points()
        times = {}
        for label, study in (("water fixed at 150 ppm", fixed),
                             (f"water free, uniform 0-{args.water_max:g} ppm", free)):
            rows = [_one(label, study, args.seed + i) for i in range(args.repeat)]
            times[label] = float(np.median([r["seconds"] for r in rows]))
    fixed_time, free_time = times.values()
    ratio = free_time / fixed_time
    print(f"median fit time: fixed {fixed_time:.2f} s, free {free_time:.2f} s; "
          f"free / fixed = {ratio:.2f} (target <= {TARGET_RATIO:g})")
    return 0 if ratio <= TARGET_RATIO else 1


def _free_water_study(folder: Path, water_max: float):
    """The demo study with water free: a copy of its folder with one line changed."""
    source = demo_data.study_path().parent
    for name in ("crust.csv", "basalts.csv"):
        shutil.copy(source / name, folder / name)
    text = demo_data.study_path().read_text()
    if _FIXED_LINE not in text:
        raise SystemExit(f"the demo study no longer holds {_FIXED_LINE!r}; update this script")
    prior = f'water = {{ prior = "uniform", min = 0.0, max = {water_max:g} }}'
    (folder / "study.toml").write_text(text.replace(_FIXED_LINE, prior))
    return inversion.Study.from_file(folder / "study.toml")


def _warm_tables() -> None:
    start = time.perf_counter()
    melt_column(1400.0, 40.0, water=[0.0, 150.0])
    print(f"tables loaded or built once: {time.perf_counter() - start:.1f} s")


def _single_points(n: int = 300) -> None:
    """One point per call at a new water value each time, as in the MAP search."""
    rng = np.random.default_rng(7)
    waters = rng.uniform(0.0, 500.0, n)
    start = time.perf_counter()
    for water in waters:
        melt_column(1400.0, 40.0, water=water)
    per_call = (time.perf_counter() - start) / n
    print(f"single-point calls at {n} different water values: {1e3 * per_call:.2f} ms each")


def _one(label: str, study, seed: int) -> dict:
    builds_before = len(_BUILDS)
    files_before = _table_files()
    start = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:  # counted, not printed in full
        warnings.simplefilter("always")
        posterior = inversion.fit(study, seed=seed, quiet=True)
        summary = posterior.summary()  # includes the MAP polish
    seconds = time.perf_counter() - start
    new_files = len(_table_files() - files_before)
    ess = summary.set_index("parameter")["ess"]
    print(f"{label}, seed {seed}: {seconds:.2f} s, {posterior.chain.shape[0]} steps x "
          f"{posterior.chain.shape[1]} walkers, converged={posterior.converged}, "
          f"smallest ESS {ess.min():.0f} ({ess.idxmin()}), {ess.min() / seconds:.0f} ESS/s; "
          f"tables built {len(_BUILDS) - builds_before}, new cache files {new_files}; "
          f"{len(caught)} posterior warnings")
    return {"seconds": seconds}


_BUILDS = []  # one entry per table built in this process


def _count_builds() -> None:
    """Record every call of the table builder."""
    build = _table._build

    def counting(*args):
        _BUILDS.append(args[-1].size)
        return build(*args)

    _table._build = counting


def _table_files() -> set[str]:
    folder = _cache.cache_folder()
    if folder is None:
        return set()
    return {entry.path.name for entry in _cache.list_folder(folder).tables}


if __name__ == "__main__":
    sys.exit(main())
