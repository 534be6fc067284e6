"""Rare-earth speed: REE pooled along the path vs plain melt_column, per point.

Run: ``python benchmarks/trace_speed.py [--samples 2000] [--intervals 12]``.
All are timed in the same run on one core (best of several repeats) and reported as
ratios (machines are noisy; compare ratios, not seconds). The interval route's time
includes reading the melting path from the table (``MeltColumn.profile``) and the Shaw
steps; the fast route (``fast_trace_elements``) reads F at a few pressures and sums
closed forms. The table itself is loaded once, before timing. Target: fast route
<= 3x melt_column per point.
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one core, before numpy loads
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from lidmelt.forward import melt_column  # noqa: E402
from lidmelt.forward.trace import (  # noqa: E402
    DEFAULT_INTERVALS,
    fast_trace_elements,
    pooled_trace_elements,
)


def _best(call, repeats):
    best = np.inf
    for _ in range(repeats):
        start = time.perf_counter()
        call()
        best = min(best, time.perf_counter() - start)
    return best


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=2000)
    parser.add_argument("--intervals", type=int, default=DEFAULT_INTERVALS)
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(20261204)
    tp = rng.uniform(1250.0, 1650.0, args.samples)
    lid = rng.uniform(0.0, 150.0, args.samples)
    print(f"{'region':9} {'melt_column us/pt':>18} {'intervals us/pt':>16} "
          f"{'fast us/pt':>11} {'intervals / mc':>15} {'fast / mc':>10}")
    for region in ("column", "triangle"):
        res = melt_column(tp, lid, melting_region=region)  # warm: load the table
        pooled_trace_elements(res, num=args.intervals)
        plain = _best(lambda r=region: melt_column(tp, lid, melting_region=r), args.repeats)
        fast_trace_elements(res)
        ree = _best(lambda r=res: pooled_trace_elements(r, num=args.intervals), args.repeats)
        fast = _best(lambda r=res: fast_trace_elements(r), args.repeats)
        per = 1e6 / args.samples
        print(f"{region:9} {plain * per:18.2f} {ree * per:16.2f} {fast * per:11.2f} "
              f"{ree / plain:15.1f} {fast / plain:10.1f}")


if __name__ == "__main__":
    main()
