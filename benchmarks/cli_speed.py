"""Start-up time of the command line against a bare ``python -c "import numpy"``.

Targets: ``lidmelt --help`` and ``lidmelt --version`` at most 3 times the bare numpy
import; a one-row ``lidmelt column`` with a warm table cache well under 1 s.

Usage::

    python benchmarks/cli_speed.py [--repeat N]

Each command runs `--repeat` times in a fresh interpreter; the median wall time is
printed with its ratio to the numpy baseline measured in the same run (machines are
noisy, so only ratios measured together are compared).
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import time

HELP_TARGET_RATIO = 3.0
COLUMN_TARGET_SECONDS = 1.0


def _lidmelt() -> list[str]:
    """The installed console script, or the same entry point through ``-m``."""
    script = shutil.which("lidmelt")
    return [script] if script else [sys.executable, "-m", "lidmelt.cli"]


def _median_seconds(argv: list[str], repeat: int) -> float:
    times = []
    env = {**os.environ, "MPLBACKEND": "Agg"}
    for _ in range(repeat):
        start = time.perf_counter()
        subprocess.run(argv, check=True, stdout=subprocess.DEVNULL, env=env)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=7, help="runs per command")
    args = parser.parse_args(argv)
    lidmelt = _lidmelt()
    subprocess.run([*lidmelt, "column"], check=True, stdout=subprocess.DEVNULL)  # warm cache
    baseline = _median_seconds([sys.executable, "-c", "import numpy"], args.repeat)
    print(f"python -c 'import numpy': {baseline:.3f} s (baseline)")
    worst = 0.0
    for extra in (["--help"], ["--version"]):
        seconds = _median_seconds([*lidmelt, *extra], args.repeat)
        worst = max(worst, seconds / baseline)
        print(f"lidmelt {extra[0]}: {seconds:.3f} s, {seconds / baseline:.2f} x baseline "
              f"(target <= {HELP_TARGET_RATIO:g} x)")
    column = _median_seconds([*lidmelt, "column", "--potential-temperature", "1400"],
                             args.repeat)
    print(f"lidmelt column (one row, warm cache): {column:.3f} s "
          f"(target well under {COLUMN_TARGET_SECONDS:g} s)")
    ok = worst <= HELP_TARGET_RATIO and column < COLUMN_TARGET_SECONDS
    print("targets met" if ok else "TARGETS MISSED")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
