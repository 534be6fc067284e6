"""Command-line entry point ``lidmelt``: a thin layer over the public API.

Each subcommand lives in its own module exposing ``add_arguments(parser)`` and
``run(args) -> int``; this module only dispatches and turns user mistakes into
exit code 2 with a one-line message.
"""

from __future__ import annotations

import argparse
import sys

from forward import _cli_column

# name -> (module, one-line help); the fit and demo commands register here too.
_COMMANDS = {
    "column": (_cli_column, "tabulate the melting column for given conditions"),
}


class UsageError(Exception):
    """A user mistake on the command line or in an input file (exit code 2)."""


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lidmelt",
        description="Mantle potential temperature and lithosphere thickness from melting "
        "observations. Results are scientific estimates that depend on the chosen "
        "melting parameterization.",
    )
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name, (module, help_text) in _COMMANDS.items():
        module.add_arguments(sub.add_parser(name, help=help_text, description=help_text))
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    module, _ = _COMMANDS[args.command]
    try:
        return module.run(args)
    except (UsageError, ValueError) as err:
        print(f"lidmelt {args.command}: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
