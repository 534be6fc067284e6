"""``lidmelt compare``: rank the scenarios of a study by evidence and by PSIS-LOO."""

from __future__ import annotations

import argparse
import importlib.util
import sys
import warnings
from pathlib import Path

__all__ = ["add_arguments", "run"]

_EPILOG = """\
The study file holds [[scenarios]] tables (name, description, optional prior_odds and
[scenarios.parameters] / [scenarios.model] overrides of the base study); a study without
them is one scenario. For every scenario lidmelt estimates the evidence ln Z with its
standard error (nested sampling, checked by quadrature up to 3 free parameters), samples
the posterior as 'lidmelt fit' does and computes the leave-one-out predictive accuracy
(PSIS-LOO).

DIR gets evidence.csv, compare.png (.pdf or .svg with --figure-format), report.md,
comparison.json and one folder per scenario (what 'lidmelt fit' writes, posterior.nc
included). Finished scenarios are kept in DIR.partial/ while the others run; after an
interruption, --resume continues with the unfinished ones (refused if the study file or
its tables changed). Units: potential temperature in degC, lid thickness in km; ln Z,
ln B and elpd_loo in natural-log units. Results are scientific estimates that depend on
the chosen parameterization and priors.

Needs the optional packages nautilus-sampler and arviz: pip install 'lidmelt[compare]'.
"""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``lidmelt compare``."""
    from .fit import _add_common

    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = _EPILOG
    parser.add_argument("study", metavar="STUDY", help="study file (TOML) with [[scenarios]]")
    parser.add_argument("--out", metavar="DIR", required=True,
                        help="result folder to create (refused if it exists, see --force)")
    _add_common(parser)
    for action in parser._actions:  # the options of fit, worded for a comparison
        if action.dest == "resume":
            action.help = ("skip the scenarios an interrupted run finished in DIR.partial/ "
                           "(refused if the study, a table, the seed or the settings "
                           "changed)")


def run(args: argparse.Namespace) -> int:
    """Compare the scenarios of the study named on the command line; 0 on success."""
    from ..inversion.errors import WriteError
    from .fit import _QuietInterrupts

    out = Path(args.out)
    with _QuietInterrupts() as interrupts, warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = _compare(args, out)
        except KeyboardInterrupt:
            interrupts.silence()
            _say_interrupted(out)
            return 130
        except WriteError as err:
            print(f"lidmelt compare: error: {err}; the finished scenarios are kept - free "
                  "some space, then run the same command with --resume", file=sys.stderr)
            return 1
    _print_warnings(caught)
    _print_result(result, out)
    return 0


def _compare(args, out: Path):
    from ..inversion.comparison import compare
    from ..inversion.study.scenarios import read_scenarios

    found = read_scenarios(args.study)  # bad input stops here, before any folder exists
    _require_optional_packages()
    total, names = len(found.scenarios), list(found.names)

    def progress(message: str) -> None:
        if not args.quiet:
            index = names.index(message.split(":")[0]) + 1
            print(f"[{index}/{total}] {message}", file=sys.stderr, flush=True)

    return compare(found, seed=args.seed, out=out, resume=args.resume, force=args.force,
                   quiet=args.quiet, progress=progress, figure_format=args.figure_format)


def _require_optional_packages() -> None:
    from ._usage import UsageError

    missing = [pip for module, pip in (("nautilus", "nautilus-sampler"), ("arviz", "arviz"))
               if importlib.util.find_spec(module) is None]
    if missing:
        raise UsageError(f"lidmelt compare needs {' and '.join(missing)}; install them with "
                         "pip install 'lidmelt[compare]'")


def _say_interrupted(out: Path) -> None:
    partial = out.absolute().with_name(out.name + ".partial")
    if partial.is_dir():
        print(f"lidmelt compare: interrupted; the finished scenarios are kept in {partial}/ "
              "- continue with the same command and --resume", file=sys.stderr)
    else:
        print("lidmelt compare: interrupted; nothing was kept", file=sys.stderr)


def _print_warnings(caught) -> None:
    """The comparison's caveats one line each (the samplers' own are among them)."""
    from ..inversion.errors import NotConvergedWarning, PosteriorWarning
    from ..inversion.comparison import ComparisonWarning

    for warning in caught:
        if issubclass(warning.category, ComparisonWarning):
            print(f"lidmelt: warning: {warning.message}", file=sys.stderr)
        elif not issubclass(warning.category, (NotConvergedWarning, PosteriorWarning)):
            warnings.showwarning(warning.message, warning.category, warning.filename,
                                 warning.lineno)


def _print_result(result, out: Path) -> None:
    from ..forward.quantities import format_percent, format_signed

    table = result.table().set_index("scenario")
    n = len(result.results)
    print(f"{result.scenarios.base.name}: {n} scenario{'s' if n != 1 else ''} compared")
    print(f"  {'scenario':<16} {'probability':>12} {'ln Z':>17} {'elpd_loo':>15}")
    for name in table.index:
        row = table.loc[name]
        print(f"  {name:<16} {format_percent(row['probability']):>12} "
              f"{format_signed(row['log_evidence'], 2):>9} ± {row['log_evidence_sd']:<5.2f} "
              f"{format_signed(row['elpd_loo'], 1):>7} ± {row['elpd_loo_se']:<5.1f}")
    where = out.resolve()
    print(f"Most probable: {result.ranking()[0]}. Results written to {where}/ (start with "
          f"{where / 'report.md'})")
