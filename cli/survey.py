"""``lidmelt survey``: every site of a study area, on local cores or a Dask cluster."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

__all__ = ["add_arguments", "run"]

_EPILOG = """\
SITES.csv has one row per site: site, thickness_km, thickness_sigma_km; optional position_km;
optional pressure_gpa with pressure_sigma_gpa; optional temperature_c with
temperature_sigma_c (and pt_correlation beside them). Lines starting with # are comments.
A row with a bad value fails only its own site (named with its line
and column in the summary and the report). The study file gives model, priors and sampler
settings (its [[observations]] are not used) and a [survey] table: equilibration = "top" |
"pooled" | "path" is required when the sites carry pressures; tp_spread = { prior = ... }
makes --mode joint hierarchical.

Units: potential temperature and its spread in degC, lid and crust thickness and position
in km, pressure in GPa.

Each site's result is written to DIR/sites/ as soon as it is done; after an interruption
run the same command with --resume. Outputs: sites_summary.csv, area.csv (joint mode),
survey.nc (every site's posterior draws; ArviZ/xarray), profile.png (.pdf or .svg with
--figure-format), report.md. Results are scientific estimates that depend on the chosen
melting parameterization.
"""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``lidmelt survey``."""
    from .fit import _seed
    from .fit import add_figure_format

    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = _EPILOG
    parser.add_argument("study", metavar="STUDY", help="study file (TOML) with [survey]")
    parser.add_argument("--sites", metavar="SITES.csv", required=True,
                        help="sites table, one row per site")
    parser.add_argument("--out", metavar="DIR", required=True, help="result folder")
    parser.add_argument("--mode", choices=("independent", "joint"), default="independent",
                        help="one posterior per site (default), or one area-wide "
                        "potential temperature with a lid per site")
    where = parser.add_mutually_exclusive_group()
    where.add_argument("--workers", metavar="N", type=int, default=None,
                       help="local worker processes (default: number of cores)")
    where.add_argument("--scheduler", metavar="ADDRESS", default=None,
                       help="run on an existing Dask cluster, e.g. tcp://host:8786 "
                       "(needs pip install 'lidmelt[cluster]')")
    parser.add_argument("--seed", metavar="N", type=_seed, default=None,
                        help="master seed (default: [sampler] seed); site k gets the k-th "
                        "child seed, so results do not depend on the workers")
    parser.add_argument("--resume", action="store_true",
                        help="continue an interrupted survey in DIR (refused if the "
                        "study, the sites file or the settings changed)")
    parser.add_argument("--force", action="store_true",
                        help="replace DIR if it holds an earlier survey")
    parser.add_argument("--keep-chains", action="store_true",
                        help="keep every site's chain (emcee) or posterior grid")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    add_figure_format(parser)


def run(args: argparse.Namespace) -> int:
    """Run the survey: 0 when it completed with at least one site's result (even if
    some sites failed), 1 when no site gave a result (joint mode: no area-wide answer),
    130 when interrupted; bad input exits 2 (the package's `InputError` handling)."""
    from ..inversion.survey import survey

    try:
        result = survey(args.study, args.sites, out=args.out, mode=args.mode,
                        workers=args.workers, scheduler=args.scheduler, seed=args.seed,
                        resume=args.resume, force=args.force, quiet=args.quiet,
                        keep_chains=args.keep_chains, figure_format=args.figure_format)
    except KeyboardInterrupt:
        print(f"lidmelt survey: interrupted; finished sites are kept in {args.out}/ - "
              "continue by running the same command with --resume", file=sys.stderr)
        return 130
    _print_result(result)
    if not result.usable:
        what = "there is no area-wide answer" if args.mode == "joint" else "nothing to show"
        print(f"lidmelt survey: no site gave a result ({len(result.records)} failed); "
              f"{what}; see {Path(result.folder) / 'report.md'}", file=sys.stderr)
        return 1
    return 0


def _print_result(result) -> None:
    from ..forward.quantities import format_signed, unit_text

    folder = Path(result.folder).resolve()
    n = len(result.records)
    print(f"survey: {len(result.usable)} of {n} sites gave a result")
    if result.area is not None:
        used = int(result.area["sites"].iloc[0])
        print(f"  area-wide answer from the {used} sites with a result:")
        for _, row in result.area.iterrows():
            unit = unit_text(row["unit"])
            median, low, high = (format_signed(row[q], 1) for q in ("median", "q2.5", "q97.5"))
            print(f"  {row['parameter']} ({row['meaning']}): median {median} "
                  f"{unit}, 95 % interval {low} to {high} {unit}")
        flagged = result.in_tension
        print(f"  consistency check: {len(flagged)} of {used} sites in tension with the "
              "rest" + (": " + ", ".join(r["site"] for r in flagged) if flagged else ""))
    for record in result.failed:
        print(f"lidmelt survey: site '{record['site']}': {record['status']}",
              file=sys.stderr)
    print(f"Results written to {folder}/ (start with {folder / 'report.md'})")
