"""Cost of basalt chemistry inside the posterior against the same rows as derived P-T.

Target: evaluating the log-posterior with 30 ``basalt_analyses`` rows (Fe3+/ΣFe sampled,
so every walker interpolates its own P-T and covariance) costs at most 2x the same
evaluation with the 30 derived P-T rows as a ``melting_pressure`` block (fixed). A full
fit's time is dominated by these evaluations (the same number of them for the same
chain), so the log-posterior over a batch of walkers is what is timed here; one-off
costs (the grid built at study load) are printed apart.

Usage::

    python benchmarks/chemistry_speed.py [--repeat N] [--walkers W] [--equilibration E]

Prints the median time per batch of both and their ratio, measured in one run.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("MPLBACKEND", "Agg")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from lidmelt import inversion  # noqa: E402
from lidmelt.inversion.observations import BasaltAnalyses, MeltingPressure  # noqa: E402
from lidmelt.inversion.study.priors import Uniform  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from chemistry_helpers import crystallise, primary_for  # noqa: E402

TARGET_RATIO = 2.0
COLUMNS = ("sio2", "tio2", "al2o3", "feot", "mno", "mgo", "cao", "na2o", "k2o", "p2o5")


def _analyses(n: int, rng: np.random.Generator) -> pd.DataFrame:
    rows = []
    for i in range(n):
        p, t = 1.6 + 1.2 * rng.random(), 1370.0 + 80.0 * rng.random()
        analysis, _ = crystallise(primary_for(p, t, fe3=0.10), 0.03 + 0.03 * rng.random())
        rows.append((f"s{i}", *analysis))
    return pd.DataFrame(rows, columns=("sample", *COLUMNS))


def _study(block):
    return inversion.Study(
        name="bench", source=None, model=inversion.ModelSettings(),
        priors={"potential_temperature": Uniform(1300.0, 1550.0),
                "lithosphere_thickness": Uniform(10.0, 100.0)},
        fixed={"water": 150.0, "active_upwelling": 1.0, "solidus_offset": 0.0},
        observations=(block,))


def _time(logpost, theta, repeat: int) -> float:
    logpost(theta)  # warm (tables loaded)
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        logpost(theta)
        times.append(time.perf_counter() - start)
    return float(np.median(times))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=30)
    parser.add_argument("--walkers", type=int, default=48)
    parser.add_argument("--equilibration", default="path", choices=("top", "pooled", "path"))
    args = parser.parse_args(argv)
    rng = np.random.default_rng(7)
    frame = _analyses(30, rng)
    start = time.perf_counter()
    chem = BasaltAnalyses.from_frame(frame, equilibration=args.equilibration,
                                     thermobarometer="lee2009", relative_error=0.01,
                                     fe3_fraction=Uniform(0.06, 0.16))
    load = time.perf_counter() - start
    derived = MeltingPressure.from_frame(
        chem.data[["sample", "pressure_gpa", "pressure_sigma_gpa", "temperature_c", "temperature_sigma_c",
                   "pt_correlation"]], equilibration=args.equilibration)
    theta = np.column_stack([rng.uniform(1350, 1500, args.walkers),
                             rng.uniform(20, 80, args.walkers),
                             rng.uniform(0.06, 0.16, args.walkers)])
    t_chem = _time(inversion.LogPosterior(_study(chem)), theta, args.repeat)
    t_pt = _time(inversion.LogPosterior(_study(derived)), theta[:, :2], args.repeat)
    ratio = t_chem / t_pt
    print(f"30 rows, {args.walkers} walkers, equilibration {args.equilibration}; "
          f"{os.cpu_count()} CPUs")
    print(f"study load with chemistry (9-node grid over Fe3+/ΣFe): {load:.2f} s (once)")
    print(f"log-posterior per batch: chemistry {1e3 * t_chem:.2f} ms, derived P-T "
          f"{1e3 * t_pt:.2f} ms; ratio {ratio:.2f}")
    ok = ratio <= TARGET_RATIO
    print("target met" if ok else "TARGET MISSED", f"(ratio <= {TARGET_RATIO:g})")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
