"""Wall time and effective samples per second of the demo fit.

Target: potential temperature, lid thickness and solidus offset free, every
effective sample size (ESS) >= 2000, in <= 20 s on a 2-core machine.

Usage::

    python benchmarks/inversion_speed.py [--repeat N] [--walkers W] [--seed S]

Prints, per repeat, the wall time of `inversion.fit` (MAP start, sampling until the
autocorrelation stopping rule is met, MAP polish; no files written), the steps taken,
the autocorrelation time and ESS of every free parameter, the smallest ESS per second,
and separately the time to write the result folder (tables, chain, three figures).
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("MPLBACKEND", "Agg")

import numpy as np  # noqa: E402

from lidmelt import demo_data  # noqa: E402
from lidmelt import inversion  # noqa: E402

TARGET_ESS = 2000
TARGET_SECONDS = 20.0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3, help="number of timed fits")
    parser.add_argument("--walkers", type=int, default=None, help="override the walkers")
    parser.add_argument("--seed", type=int, default=1, help="seed of the first repeat")
    args = parser.parse_args(argv)
    study = inversion.Study.from_file(demo_data.study_path())
    if args.walkers is not None:
        sampler = dataclasses.replace(study.sampler, walkers=args.walkers)
        study = dataclasses.replace(study, sampler=sampler)
    print(f"demo study: {demo_data.study_path()}")
    print(f"free: {', '.join(study.free_parameters)}; walkers {study.sampler.walkers}; "
          f"ESS target {study.sampler.ess_target}; start {study.sampler.start}; "
          f"{os.cpu_count()} CPUs")
    rows = [_one(study, args.seed + i) for i in range(args.repeat)]
    worst = max(r["seconds"] for r in rows)
    print(f"slowest fit {worst:.2f} s; smallest ESS {min(r['ess_min'] for r in rows):.0f}; "
          f"median ESS/s {np.median([r['ess_per_s'] for r in rows]):.0f}")
    ok = worst <= TARGET_SECONDS and all(r["ess_min"] >= TARGET_ESS for r in rows)
    print("target met" if ok else "TARGET MISSED", f"(ESS >= {TARGET_ESS} in <= "
          f"{TARGET_SECONDS:g} s)")
    return 0 if ok else 1


def _one(study, seed: int) -> dict:
    start = time.perf_counter()
    posterior = inversion.fit(study, seed=seed, quiet=True)
    summary = posterior.summary()  # includes the MAP polish
    seconds = time.perf_counter() - start
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        posterior.save(Path(tmp) / "result")
        save_seconds = time.perf_counter() - t0
    ess = summary.set_index("parameter")["ess"]
    tau = summary.set_index("parameter")["tau"]
    row = {"seconds": seconds, "ess_min": float(ess.min()),
           "ess_per_s": float(ess.min() / seconds)}
    per = ", ".join(f"{n}: tau {tau[n]:.1f}, ESS {ess[n]:.0f}" for n in ess.index)
    print(f"seed {seed}: fit {seconds:.2f} s, {posterior.chain.shape[0]} steps x "
          f"{posterior.chain.shape[1]} walkers, converged={posterior.converged}; {per}; "
          f"min ESS/s {row['ess_per_s']:.0f}; writing outputs {save_seconds:.2f} s")
    return row


if __name__ == "__main__":
    sys.exit(main())
