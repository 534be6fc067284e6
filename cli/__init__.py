"""Command-line entry point ``lidmelt``: a thin layer over the public API.

Each subcommand lives in its own module exposing ``add_arguments(parser)`` and
``run(args) -> int``; this module only dispatches and turns user mistakes (the input
error types: `InputError`, `UsageError`, forward's `DomainError`) into exit code 2 with a
one-line message on stderr (no traceback, no result folder). Any other exception is a
bug and shows as one, with its traceback.
"""

from __future__ import annotations

import argparse
import sys

from ..forward._validation import DomainError
from ..inversion.errors import InputError, OutputConflict
from . import cache, column, compare, demo, fit, primary_melts, survey
from ._usage import UsageError

# name -> (module, one-line help)
_COMMANDS = {
    "column": (column, "tabulate the melting column for given conditions"),
    "fit": (fit, "fit a study file: posterior of potential temperature and lid "
            "thickness"),
    "demo": (demo, "fit the bundled demo study end to end (under a minute)"),
    "compare": (compare, "rank competing scenarios of a study by Bayesian evidence and "
                "leave-one-out prediction"),
    "survey": (survey, "many sites of a study area: each site's posterior and an "
               "area-wide potential temperature, on local cores or a Dask cluster"),
    "primary-melts": (primary_melts, "primary melts and their pressure and temperature "
                      "from basalt analyses (look before fitting them)"),
    "cache": (cache, "show or clear the folder of tabulated melting paths"),
}


class _VersionAction(argparse.Action):
    """``--version``: look the installed version up only when asked (it costs ~30 ms)."""

    def __init__(self, option_strings, dest, **kwargs):
        super().__init__(option_strings, dest, nargs=0, default=argparse.SUPPRESS,
                         help="show the installed version of lidmelt and exit")

    def __call__(self, parser, namespace, values, option_string=None):
        from .. import __version__

        sys.stdout.write(f"lidmelt {__version__}\n")
        parser.exit()


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lidmelt",
        description="Mantle potential temperature and lithosphere thickness from melting "
        "observations. Results are scientific estimates that depend on the chosen "
        "melting parameterization.",
    )
    parser.add_argument("--version", action=_VersionAction)
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name, (module, help_text) in _COMMANDS.items():
        module.add_arguments(sub.add_parser(name, help=help_text, description=help_text))
    return parser


#: How the command line resolves each kind of `OutputConflict` (its `reason`).
_REMEDIES = {
    "exists": "pass --force to replace it or choose another --out",
    "checkpoint": "pass --resume to continue it or --force to start over",
    "no-checkpoint": "run again without --resume",
    "changed": "restore what changed, or pass --force to start over",
}


def _worded(err) -> str:
    """The one-line message, with an output conflict's remedy in terms of flags."""
    if isinstance(err, OutputConflict):
        return str(InputError(f"{err.problem}; {_REMEDIES[err.reason]}", file=err.file))
    return str(err)


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    args = parser.parse_args(argv)
    args.argv = ["lidmelt", *argv]
    module, _ = _COMMANDS[args.command]
    try:
        return module.run(args)
    except (InputError, UsageError, DomainError) as err:  # not ValueError: a bug shows
        print(f"lidmelt {args.command}: error: {_worded(err)}", file=sys.stderr)
        return 2
    except OSError as err:  # e.g. a result folder that cannot be written
        print(f"lidmelt {args.command}: error: {err}", file=sys.stderr)
        return 1

