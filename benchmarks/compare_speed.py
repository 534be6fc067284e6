"""Wall time of the three-scenario demo comparison and of each of its parts.

Target: the demo comparison (lid free / thinned / unthinned, each with its evidence,
quadrature cross-check, posterior and PSIS-LOO, and the result folder) in <= 2 min on one
core; 1 min is the goal worth chasing.

Usage::

    python benchmarks/compare_speed.py [--seed S] [--threads N]

Numerical libraries are limited to ``--threads`` threads (default 1: one core). Prints,
per scenario, the wall time of nested sampling, quadrature, the emcee posterior, LOO and
the checks, with ln Z from both routes; then the import of the optional libraries, the
writing of the result folder, the total wall time, the CPU time of this process (on a
shared machine wall time also counts the waiting) and their ratios to the target.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

TARGET_SECONDS = 120.0
GOAL_SECONDS = 60.0
_PARTS = ("nested", "quadrature", "posterior", "loo", "checks")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=1, help="master seed")
    parser.add_argument("--threads", type=int, default=1, help="BLAS/OpenMP threads")
    parser.add_argument("--spread", type=int, default=0, metavar="K",
                        help="also run nested sampling K times on the lid-free scenario and "
                        "compare the spread of ln Z with its stated error")
    args = parser.parse_args(argv)
    for name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[name] = str(args.threads)  # before numpy is imported
    os.environ.setdefault("MPLBACKEND", "Agg")
    import warnings

    import lidmelt
    from lidmelt import demo_data

    wall, cpu = time.perf_counter(), time.process_time()
    started = time.perf_counter()
    import arviz  # noqa: F401  (timed: the first comparison of a session pays for it)
    import nautilus  # noqa: F401
    imports = time.perf_counter() - started
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = lidmelt.compare(demo_data.scenarios_path(), seed=args.seed)
    with tempfile.TemporaryDirectory() as folder:
        started = time.perf_counter()
        result.save(Path(folder) / "comparison")
        saving = time.perf_counter() - started
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    _print_parts(result)
    print(f"import of nautilus and arviz: {imports:6.1f} s")
    print(f"writing the result folder:    {saving:6.1f} s (figures, tables, chains)")
    print(f"total wall time {wall:.1f} s, CPU time {cpu:.1f} s on {args.threads} thread(s); "
          f"wall / target = {wall / TARGET_SECONDS:.2f}, CPU / target = "
          f"{cpu / TARGET_SECONDS:.2f}, CPU / goal = {cpu / GOAL_SECONDS:.2f}")
    if args.spread:
        _print_spread(args.spread, result.scenarios.settings)
    ok = min(wall, cpu) <= TARGET_SECONDS
    print("target met" if ok else "TARGET MISSED", f"(<= {TARGET_SECONDS:g} s)")
    return 0 if ok else 1


def _print_parts(result) -> None:
    header = "".join(f"{p:>12}" for p in _PARTS)
    print(f"{'scenario':<12}{header}   ln Z nested        ln Z quadrature   evaluations")
    totals = dict.fromkeys(_PARTS, 0.0)
    for r in result.results:
        seconds = "".join(f"{r.seconds.get(p, 0.0):>11.1f}s" for p in _PARTS)
        for p in _PARTS:
            totals[p] += r.seconds.get(p, 0.0)
        ev = r.evidence
        quad = ("-" if ev.quadrature is None
                else f"{ev.quadrature:.3f} ± {ev.quadrature_error:.3f}")
        print(f"{r.name:<12}{seconds}   {ev.log_evidence:.3f} ± {ev.sd:.3f}  {quad:>18}"
              f"   {ev.n_like:>8}")
    print(f"{'all':<12}" + "".join(f"{totals[p]:>11.1f}s" for p in _PARTS))


def _print_spread(k: int, settings) -> None:
    import numpy as np
    from lidmelt import demo_data
    from lidmelt.inversion import LogPosterior, read_scenarios
    from lidmelt.inversion.comparison import nested_evidence

    logpost = LogPosterior(read_scenarios(demo_data.scenarios_path()).scenarios[0].study)
    runs = [nested_evidence(logpost, live_points=settings.live_points,
                            effective_samples=settings.effective_samples, seed=100 + i)
            for i in range(k)]
    values = np.array([r.log_evidence for r in runs])
    stated = np.mean([r.sd for r in runs])
    print(f"lid-free, {k} seeds: ln Z = " + ", ".join(f"{v:.3f}" for v in values)
          + f"; spread (sd) {np.std(values, ddof=1):.4f} against a stated error of "
          f"{stated:.4f} (ratio {np.std(values, ddof=1) / stated:.2f}); "
          f"mean {values.mean():.3f}"
          f"; {np.mean([r.seconds for r in runs]):.1f} s per run")


if __name__ == "__main__":
    sys.exit(main())
