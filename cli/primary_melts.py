"""``lidmelt primary-melts``: look at basalt analyses before fitting them.

Reads a ``basalt_analyses`` table, adds olivine to each sample, applies a
thermobarometer and writes one CSV row per sample (primary composition, P, T, their
1-sigma and correlation, flags and refusals) with the column names of the observation
kinds (`inversion.observations.basalt_analyses.primary_melt_table`). The CSV goes to
stdout, or with ``--out`` to a file, written atomically. A file lidmelt wrote starts with
the line `SIGNATURE`; an existing file is replaced only with ``--force`` and only if it
starts so (lidmelt never overwrites a file it did not write).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..inversion.errors import InputError, OutputConflict

#: First line of every CSV this command writes (how it recognises its own files).
SIGNATURE = "# written by lidmelt primary-melts"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.description = (
        "Primary melts and their pressure and temperature of equilibration for every "
        "sample of a basalt_analyses table: olivine is added back to the target Fo and a "
        "thermobarometer applied, with the analytical and calibration errors. Samples "
        "that olivine addition cannot serve are listed with the reason. Results are "
        "estimates that depend on the thermobarometer and on these correction choices.")
    parser.add_argument("table", metavar="TABLE", help="basalt_analyses table (CSV)")
    parser.add_argument("--thermobarometer", required=True, metavar="KEY",
                        help="method key, e.g. lee2009, putirka2008_eq15")
    parser.add_argument("--fe3-fraction", required=True, type=float, metavar="RATIO",
                        help="Fe3+/ΣFe of the analysed melts (0-0.5; required)")
    parser.add_argument("--olivine-fo", type=float, default=0.90, metavar="FO",
                        help="Fo of the mantle olivine (0.85-0.95; default 0.90)")
    parser.add_argument("--kd-model", default="roeder_emslie_1970", metavar="NAME",
                        help="roeder_emslie_1970 (default) or toplis_2005")
    parser.add_argument("--relative-error", type=float, default=0.0, metavar="FRACTION",
                        help="relative 1σ of every oxide, e.g. 0.01 (default 0)")
    parser.add_argument("--out", metavar="FILE.csv", help="write the CSV here, not stdout")
    parser.add_argument("--force", action="store_true",
                        help="replace --out if lidmelt primary-melts wrote it")


def check_out(out: Path, *, force: bool, table: Path) -> None:
    """Refuse an output that is missing its folder, is the input, or is not ours."""
    if not out.parent.is_dir():
        raise InputError("the folder for the CSV does not exist; create it first",
                         file=out.parent)
    if out.resolve() == table.resolve():
        raise InputError("the output is the input table; choose another file", file=out)
    if not (out.exists() or out.is_symlink()):
        return
    if not force:
        raise OutputConflict("the output file already exists", reason="exists", file=out)
    if out.is_symlink() or not out.is_file() or not _ours(out):
        raise InputError(f"the output file was not written by lidmelt (its first line is "
                         f"not '{SIGNATURE}'); lidmelt replaces only files it wrote",
                         file=out)


def _ours(path: Path) -> bool:
    try:
        with open(path, encoding="utf-8", errors="replace") as handle:
            return handle.readline().startswith(SIGNATURE)
    except OSError:
        return False


def run(args) -> int:
    from .._atomic import write_text
    from ..inversion.observations.basalt_analyses import primary_melt_table

    table = Path(args.table)
    out = None if args.out is None else Path(args.out).absolute()
    if out is not None:
        check_out(out, force=args.force, table=table)
    frame = primary_melt_table(table, thermobarometer=args.thermobarometer,
                               fe3_fraction=args.fe3_fraction, olivine_fo=args.olivine_fo,
                               kd_model=args.kd_model, relative_error=args.relative_error)
    header = (f"{SIGNATURE} {' '.join(args.argv[2:])}\n"
              "# scientific estimates: they depend on the thermobarometer and on the "
              "correction choices\n")
    text = header + frame.to_csv(index=False, float_format="%.6g", lineterminator="\n")
    refused = [f"{s}: {r}" for s, r in zip(frame["sample"], frame["refused"], strict=True)
               if r]
    if out is None:
        sys.stdout.write(text)
    else:
        write_text(out, text)
        print(f"{len(frame)} samples written to {out}", file=sys.stderr)
    for line in refused:
        print(f"refused {line}", file=sys.stderr)
    return 0
