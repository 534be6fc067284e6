"""``lidmelt fit``: run the inversion of a study file and write the result folder."""

from __future__ import annotations

import argparse
import signal
import sys
import threading
import warnings
from pathlib import Path

from .._errors import NotConvergedWarning

__all__ = ["add_arguments", "print_result", "run", "run_fit"]

_EPILOG = """\
Units: potential temperature and solidus offset in degC, lid (lithosphere) thickness and
crust thickness in km, water in ppm H2O of the bulk source, pressure in GPa.

The chain is checkpointed in DIR.partial/ while the sampler runs; after an interruption
(Ctrl-C, a crash) continue it with --resume. All outputs are written at the end, at once:
summary.csv, derived.csv, samples.csv, chain.h5, diagnostics.json, run.json, corner.png,
fit.png, pt.png and report.md. Results are scientific estimates that depend on the chosen
melting parameterization.
"""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``lidmelt fit``."""
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = _EPILOG
    parser.add_argument("study", metavar="STUDY", help="study file (TOML)")
    parser.add_argument("--out", metavar="DIR", required=True,
                        help="result folder to create (refused if it exists, see --force)")
    _add_common(parser)


def _add_common(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--seed", metavar="N", type=int, default=None,
                        help="master random seed (default: [sampler] seed of the study); "
                        "the same seed gives identical results")
    parser.add_argument("--resume", action="store_true",
                        help="continue the interrupted run checkpointed in DIR.partial/")
    parser.add_argument("--force", action="store_true",
                        help="replace an existing result folder or old checkpoint")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")


def run(args: argparse.Namespace) -> int:
    """Fit the study named on the command line; 0 on success."""
    from ..study import Study

    study = Study.from_file(args.study)
    return run_fit(study, args, command=getattr(args, "argv", ["lidmelt", "fit", args.study]))


def run_fit(study, args: argparse.Namespace, *, command: list[str]) -> int:
    """Shared by ``fit`` and ``demo``: fit, report to stdout, handle interruption."""
    out = Path(args.out)
    if threading.current_thread() is not threading.main_thread():
        return _run_and_report(study, args, out, command)
    # A job scheduler's SIGTERM is handled like Ctrl-C: the checkpoint stays resumable.
    previous = signal.signal(signal.SIGTERM, _terminate)
    try:
        return _run_and_report(study, args, out, command)
    finally:
        signal.signal(signal.SIGTERM, previous)


def _terminate(signum, frame):
    raise KeyboardInterrupt


def _run_and_report(study, args, out: Path, command: list[str]) -> int:
    from ..posterior import fit

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NotConvergedWarning)
        try:
            posterior = fit(study, seed=args.seed, out=out, resume=args.resume,
                            quiet=args.quiet, force=args.force, command=command)
        except KeyboardInterrupt:
            partial = out.with_name(out.name + ".partial")
            if partial.exists():
                print(f"lidmelt: interrupted; the chain so far is kept in {partial}/ - "
                      "continue it by running the same command with --resume",
                      file=sys.stderr)
            else:
                print("lidmelt: interrupted before the first checkpoint; nothing was kept",
                      file=sys.stderr)
            return 130
    for warning in caught:
        if issubclass(warning.category, NotConvergedWarning):
            print(f"lidmelt: warning: {warning.message}", file=sys.stderr)
        else:
            warnings.showwarning(warning.message, warning.category, warning.filename,
                                 warning.lineno)
    print_result(posterior, out)
    return 0


def print_result(posterior, out: Path) -> None:
    """Headline numbers and where the results are, on stdout."""
    from ...forward.quantities import quantity
    from ..report import interval_words

    state = "converged" if posterior.converged else "NOT CONVERGED (see report.md)"
    print(f"{posterior.study.name}: {state}; {posterior.chain.shape[0]} steps x "
          f"{posterior.chain.shape[1]} walkers")
    for _, row in posterior.summary().iterrows():
        print(f"  {quantity(row['parameter']).title}: {interval_words(row).replace('**', '')}")
    where = out.resolve()
    print(f"Results written to {where}/ (start with {where / 'report.md'})")
