"""Forward-model speed: fast tabulated route vs one solve_ivp integration per sample.

Run: ``python benchmarks/forward_speed.py [--samples 100000] [--reference 20]``.
Both routes are timed in the same run on one core and reported as a ratio (machines
are noisy; compare ratios, not seconds). Table building is a one-off per
parameterization, dry and across water (cached on disk), and is reported separately.
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one core, before numpy loads
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from lidmelt.forward import melt_column  # noqa: E402
from lidmelt.forward.reference import reference_column  # noqa: E402


def _samples(rng, n, wet):
    tp = rng.uniform(1250.0, 1650.0, n)
    lid = rng.uniform(0.0, 150.0, n)
    water = rng.uniform(0.0, 500.0, n) if wet else np.zeros(n)
    return tp, lid, water


def _fast_rate(tp, lid, water, repeats=3):
    melt_column(tp[:10], lid[:10], water=water[:10])  # warm: load or build the table
    best = np.inf
    for _ in range(repeats):
        start = time.perf_counter()
        res = melt_column(tp, lid, water=water)
        best = min(best, time.perf_counter() - start)
    return tp.size / best, res


def _reference_rate(tp, lid, water, n_ref):
    start = time.perf_counter()
    refs = [reference_column(tp[i], lid[i], water=water[i], rtol=1e-8) for i in range(n_ref)]
    return n_ref / (time.perf_counter() - start), refs


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=100_000)
    parser.add_argument("--reference", type=int, default=20, help="samples for solve_ivp")
    args = parser.parse_args(argv)
    rng = np.random.default_rng(20261201)
    print(f"{'case':5} {'fast eval/s':>12} {'solve_ivp eval/s':>17} {'ratio':>9} "
          f"{'max |d melt| km':>16} {'max |d F|':>10}")
    for wet in (False, True):
        tp, lid, water = _samples(rng, args.samples, wet)
        t0 = time.perf_counter()
        melt_column(tp[:2], lid[:2], water=water[:2])
        build = time.perf_counter() - t0
        fast, res = _fast_rate(tp, lid, water)
        slow, refs = _reference_rate(tp, lid, water, args.reference)
        d_melt = max(abs(r.melt_thickness - res.melt_thickness[i]) for i, r in enumerate(refs))
        d_f = max(abs(r.max_melt_fraction - res.max_melt_fraction[i]) for i, r in enumerate(refs))
        print(f"{'wet' if wet else 'dry':5} {fast:12.3g} {slow:17.3g} {fast / slow:9.3g} "
              f"{d_melt:16.4f} {d_f:10.5f}   (table load/build {build:.1f} s, once)")


if __name__ == "__main__":
    main()
