"""Rare-earth speed: REE pooled along the path vs plain melt_column, per point.

Run: ``python benchmarks/trace_speed.py [--samples 2000] [--intervals 12] [--walkers 48]``.
All are timed in the same run on one core (best of several repeats) and reported as
ratios (machines are noisy; compare ratios, not seconds). The interval route's time
includes reading the melting path from the table (``MeltColumn.profile``) and the Shaw
steps; the fast route (``fast_trace_elements``) reads F at a few pressures and sums
closed forms. The table itself is loaded once, before timing. Target: fast route
<= 3x melt_column per point.

Second measurement: a fit with a ``rare_earths`` block costs at most 2x the same fit
without it. A fit's time is the log-posterior over a batch of walkers times the number
of batches (the same for the same chain), so the batch is timed: the Orvanta demo study
``study_rare_earths.toml`` (crust + eight REE samples, 150 ppm water) against the same
study with its crust block only, at the same walker positions, as it is (column) and with
the triangular melting region. Target: ratio <= 2. Third, the whole sampler: the same
fixed-length run (300 steps, the fit's moves and its end-of-run checks) with and without
the REE block, wall time (best of three).
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one core, before numpy loads
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import time  # noqa: E402

from dataclasses import replace  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

from lidmelt import inversion  # noqa: E402
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


FIT_TARGET = 2.0
POINT_TARGET = 3.0
_DEMO = Path(__file__).resolve().parents[1] / "demo_data" / "orvanta_rift"


def _median_time(call, repeats):
    call()  # warm: tables loaded
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        call()
        times.append(time.perf_counter() - start)
    return float(np.median(times))


def fit_ratio(*, walkers: int = 48, repeats: int = 30, region: str = "column") -> float:
    """Median log-posterior time per batch, crust + REE over crust alone; prints both."""
    with_ree = inversion.Study.from_file(_DEMO / "study_rare_earths.toml")
    with_ree = replace(with_ree, model=replace(with_ree.model, melting_region=region))
    crust = replace(with_ree, observations=with_ree.observations[:1])  # the crust block
    rng = np.random.default_rng(20261205)
    theta = np.column_stack([rng.uniform(1300.0, 1500.0, walkers),
                             rng.uniform(10.0, 100.0, walkers),
                             rng.normal(0.0, 20.0, walkers)])
    post_ree, post_crust = inversion.LogPosterior(with_ree), inversion.LogPosterior(crust)
    t_ree = _median_time(lambda: post_ree(theta), repeats)
    t_crust = _median_time(lambda: post_crust(theta), repeats)
    ratio = t_ree / t_crust
    print(f"log-posterior per batch of {walkers} walkers (Orvanta demo, {region}): crust + "
          f"REE {1e3 * t_ree:.2f} ms, crust alone {1e3 * t_crust:.2f} ms; ratio {ratio:.2f} "
          f"({'target met' if ratio <= FIT_TARGET else 'TARGET MISSED'}: <= {FIT_TARGET:g})")
    return ratio


def sampler_ratio(*, walkers: int = 48, steps: int = 300, region: str = "column",
                  repeats: int = 3) -> float:
    """The same fixed-length sampler run (the fit's own moves, start and stopping
    checks) with and without the REE block: wall time ratio; prints both."""
    import warnings

    from lidmelt.inversion.fitting.sampler import run_chain

    with_ree = inversion.Study.from_file(_DEMO / "study_rare_earths.toml")
    with_ree = replace(with_ree, model=replace(with_ree.model, melting_region=region))
    crust = replace(with_ree, observations=with_ree.observations[:1])
    rng = np.random.default_rng(20261206)
    start = np.column_stack([rng.normal(1400.0, 5.0, walkers), rng.normal(45.0, 2.0, walkers),
                             rng.normal(0.0, 5.0, walkers)])
    times = {}
    for label, study in (("crust + REE", with_ree), ("crust alone", crust)):
        post = inversion.LogPosterior(study)
        post(start)  # warm: tables loaded

        def run(post=post):
            with warnings.catch_warnings():  # a fixed length, so never "converged"
                warnings.simplefilter("ignore")
                run_chain(post, start, seed=1, ess_target=1e9, max_steps=steps,
                          check_interval=steps, quiet=True)

        times[label] = _best(run, repeats)
    ratio = times["crust + REE"] / times["crust alone"]
    print(f"sampler, {steps} steps x {walkers} walkers (Orvanta demo, {region}): crust + REE "
          f"{times['crust + REE']:.2f} s, crust alone {times['crust alone']:.2f} s; ratio "
          f"{ratio:.2f} ({'target met' if ratio <= FIT_TARGET else 'TARGET MISSED'}: "
          f"<= {FIT_TARGET:g})")
    return ratio


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=2000)
    parser.add_argument("--intervals", type=int, default=DEFAULT_INTERVALS)
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument("--walkers", type=int, default=48)
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
        ratio = fast / plain
        print(f"{region:9} {plain * per:18.2f} {ree * per:16.2f} {fast * per:11.2f} "
              f"{ree / plain:15.1f} {ratio:10.1f}  "
              f"({'target met' if ratio <= POINT_TARGET else 'TARGET MISSED'}: "
              f"<= {POINT_TARGET:g})")
    for region in ("column", "triangle"):
        fit_ratio(walkers=args.walkers, region=region)
    for region in ("column", "triangle"):
        sampler_ratio(walkers=args.walkers, region=region)


if __name__ == "__main__":
    main()
