"""Sites per minute of ``lidmelt survey`` on 1 and 2 workers, local processes and Dask.

Sites of the demo kind (crust thickness at every site, a melting pressure at every third,
2 free parameters: grid posteriors) are simulated from the forward model, surveyed in
independent mode with each executor, and timed inside one run (the ratios are what
counts on a shared machine). The numbers of every run are checked to be identical.
Then the time of a 1000-site survey on N workers is projected from the measured rate.

Run: ``python benchmarks/survey_speed.py [--sites 60] [--mode independent|joint]``
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from lidmelt import demo_data
from lidmelt.inversion.survey import load_survey_study, survey
from lidmelt.inversion.survey.simulate import simulate_sites


def _sites(folder: Path, n: int) -> Path:
    study, settings = load_survey_study(demo_data.survey_paths()[0])
    rng = np.random.default_rng(5)
    pressure = np.full(n, np.nan)
    pressure[::3] = 0.15
    truth = pd.DataFrame({"site": [f"B{k:04d}" for k in range(n)],
                          "position_km": 5.0 * np.arange(n),
                          "potential_temperature": rng.normal(1380.0, 20.0, n),
                          "lithosphere_thickness": rng.uniform(15.0, 55.0, n),
                          "thickness_sigma_km": 0.5, "pressure_sigma_gpa": pressure})
    table = simulate_sites(study, settings, truth, rng)
    for column in ("pressure_gpa", "pressure_sigma_gpa"):
        table[column] = table[column].map(lambda v: "" if pd.isna(v) else repr(v))
    path = folder / "sites.csv"
    table.to_csv(path, index=False)
    return path


def _timed(label, sites, folder, mode, **where):
    study = demo_data.survey_paths()[0]
    started = time.perf_counter()
    result = survey(study, sites, out=folder / label, mode=mode, quiet=True, **where)
    seconds = time.perf_counter() - started
    return seconds, (folder / label / "sites_summary.csv").read_text(), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, default=60)
    parser.add_argument("--mode", default="independent", choices=("independent", "joint"))
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="lidmelt-survey-bench-"))
    sites = _sites(folder, args.sites)
    _timed("warm-up", sites, folder, args.mode, workers=1)  # table cache, imports
    runs = {}
    for workers in (1, 2):
        runs[f"local, {workers} worker(s)"] = _timed(f"local{workers}", sites, folder,
                                                      args.mode, workers=workers)
    saved = os.environ.get("OMP_NUM_THREADS")  # LocalCluster sets it and leaves it set
    from distributed import LocalCluster

    for workers in (1, 2):
        with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                          dashboard_address=None, host="127.0.0.1") as cluster:
            runs[f"Dask, {workers} worker(s)"] = _timed(
                f"dask{workers}", sites, folder, args.mode,
                scheduler=cluster.scheduler_address)
    if saved is None:
        os.environ.pop("OMP_NUM_THREADS", None)
    texts = {text for _, text, _ in runs.values()}
    print(f"{args.sites} sites, {args.mode} mode; identical numbers on every executor: "
          f"{len(texts) == 1}; load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} "
          "cores (other work on the machine lowers the 2-worker ratio)")
    rates = {}
    for label, (seconds, _, _) in runs.items():
        rates[label] = 60.0 * args.sites / seconds
        print(f"  {label:22s} {seconds:7.1f} s  {rates[label]:7.0f} sites/min")
    for kind in ("local", "Dask"):
        ratio = rates[f"{kind}, 2 worker(s)"] / rates[f"{kind}, 1 worker(s)"]
        print(f"  {kind}: 2 workers / 1 worker = {ratio:.2f}")
    per_worker = rates["local, 2 worker(s)"] / 2.0
    print(f"Projection (rate per worker on 2 workers, {per_worker:.0f} sites/min, times N):")
    for n in (2, 8, 32, 128):
        print(f"  1000 sites on {n:3d} workers: 1000 / ({per_worker:.0f} x {n}) = "
              f"{1000.0 / (per_worker * n):.1f} min")


if __name__ == "__main__":
    main()
