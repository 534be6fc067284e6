"""``lidmelt demo``: fit the bundled demo study end to end and say where the results are."""

from __future__ import annotations

import argparse

from .fit import _add_common, _study, run_fit

__all__ = ["DEFAULT_OUT", "add_arguments", "run"]

#: Result folder of the demo, relative to the working directory.
DEFAULT_OUT = "lidmelt-demo"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``lidmelt demo``."""
    parser.epilog = ("Fits the invented demo study shipped with lidmelt (an imaginary rift "
                     "segment) and writes the same result folder as 'lidmelt fit'. The first "
                     "run on a machine also builds the melting table across water content "
                     "(minutes, once; a bar shows the time left).")
    parser.add_argument("--out", metavar="DIR", default=DEFAULT_OUT,
                        help=f"result folder to create (default: ./{DEFAULT_OUT})")
    _add_common(parser)


def run(args: argparse.Namespace) -> int:
    """Fit the demo study; 0 on success."""
    from .. import demo_data

    path = demo_data.study_path()
    print(f"lidmelt demo: fitting {path}")
    return run_fit(lambda: _study(path), args)
