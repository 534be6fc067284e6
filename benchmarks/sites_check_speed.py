"""Checking a large sites file: the column-wise checks against the row-by-row rules.

Writes an invented sites file (default 100 000 rows: a thickness everywhere, a pressure
at every third row, one bad value in a thousand), then measures in one run the CPU time
of `read_sites` (column-wise checks, the row-by-row rules only for flagged rows) and of
the row-by-row rules on every row (what `read_sites` did before), the latter on a sample
of rows and scaled linearly (it is linear: one small table per row). Prints both and
their ratio.

Run: ``python benchmarks/sites_check_speed.py [--rows 100000] [--sample 5000]``
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

from lidmelt.inversion.survey.sites import _GROUPS, _site, read_sites


def _write(path: Path, rows: int) -> None:
    rng = np.random.default_rng(1)
    lines = ["site,position_km,thickness_km,sigma_km,pressure_gpa,pressure_sigma_gpa"]
    for k in range(rows):
        thickness = f"{rng.uniform(2, 12):.2f}" if k % 1000 else "-1"
        pressure = f"{rng.uniform(0.5, 2):.3f},0.15" if k % 3 == 0 else ","
        lines.append(f"S{k:06d},{5 * k},{thickness},0.5,{pressure}")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--sample", type=int, default=5_000)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "sites.csv"
        _write(path, args.rows)
        started = time.process_time()
        table = read_sites(path, progress=False)
        fast = time.process_time() - started
        text = path.read_text(encoding="utf-8").splitlines()
        header = text[0].split(",")
        groups = [g for g in _GROUPS if g[0].name in header]
        sample = min(args.sample, args.rows)
        started = time.process_time()
        for k in range(sample):
            _site(k, dict(zip(header, text[k + 1].split(","), strict=True)), k + 2, groups,
                  path)
        slow = (time.process_time() - started) * args.rows / sample
    failed = sum(site.error is not None for site in table.sites)
    print(f"{args.rows} rows ({failed} with a bad value)")
    print(f"column-wise checks (read_sites): {fast:8.2f} s CPU, "
          f"{1e6 * fast / args.rows:7.1f} us a row")
    print(f"row-by-row rules (before):       {slow:8.2f} s CPU, "
          f"{1e6 * slow / args.rows:7.1f} us a row (from {sample} rows)")
    print(f"speed-up: {slow / fast:.0f}x")


if __name__ == "__main__":
    main()
