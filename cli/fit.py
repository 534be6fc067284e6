"""``lidmelt fit``: run the inversion of a study file and write the result folder."""

from __future__ import annotations

import argparse
import signal
import sys
import threading
import warnings
from pathlib import Path

__all__ = ["add_arguments", "add_figure_format", "print_result", "run", "run_fit"]

_EPILOG = """\
Units: potential temperature and solidus offset in degC, lid (lithosphere) thickness and
crust thickness in km, water in ppm H2O of the bulk source, pressure in GPa.

The chain is checkpointed in DIR.partial/ while the sampler runs; after an interruption
(Ctrl-C, SIGTERM, a full disk) continue it with --resume. All outputs are written at the
end, at once: summary.csv, derived.csv, samples.csv, chain.h5, diagnostics.json,
run.json, posterior.nc (ArviZ InferenceData), corner.png, fit.png, pt.png (.pdf or .svg
with --figure-format), report.md and lidmelt-files.json (the list of files lidmelt
wrote, which --force relies on). Exit codes: 0 done (read the warnings),
1 a write failed or an internal error, 2 bad input or a folder in the way, 130
interrupted. Results are scientific estimates that depend on the chosen melting
parameterization.
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
    parser.add_argument("--seed", metavar="N", type=_seed, default=None,
                        help="master random seed, 0 to 4294967295 (default: [sampler] seed "
                        "of the study); the same seed gives identical results")
    parser.add_argument("--resume", action="store_true",
                        help="continue the interrupted run checkpointed in DIR.partial/ "
                        "(refused if the study, a table, the seed or lidmelt changed)")
    parser.add_argument("--force", action="store_true",
                        help="replace a result folder or checkpoint that lidmelt wrote "
                        "(never a folder holding other files or the study's inputs)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    add_figure_format(parser)


def add_figure_format(parser: argparse.ArgumentParser) -> None:
    """``--figure-format``: the same option, the same words, on every command that draws."""
    from ..forward.figure_output import DEFAULT_FIGURE_FORMAT, FIGURE_FORMATS

    parser.add_argument("--figure-format", choices=FIGURE_FORMATS,
                        default=DEFAULT_FIGURE_FORMAT, metavar="FORMAT",
                        help="file format of the figures: png (default), pdf or svg "
                        "(vector, fonts embedded, sized for a journal column)")


def _seed(text: str) -> int:
    """``--seed``: digits only (no sign, point or exponent), then the one seed rule."""
    from ..inversion.errors import InputError
    from ..inversion.study.seeds import SEED_LIMIT, check_seed

    digits = text.strip()
    try:
        return check_seed(int(digits) if digits.isascii() and digits.isdigit() else text)
    except InputError:
        raise argparse.ArgumentTypeError(
            f"{text!r} must be a whole number from 0 to {SEED_LIMIT - 1}") from None


def run(args: argparse.Namespace) -> int:
    """Fit the study named on the command line; 0 on success."""
    return run_fit(lambda: _study(args.study), args)


def _study(path):
    from ..inversion.study.file import Study  # imported here: its libraries take a while to load

    return Study.from_file(path)


def run_fit(load_study, args: argparse.Namespace) -> int:
    """Shared by ``fit`` and ``demo``: read the study (``load_study()``), fit, report to
    stdout, handle interruption from the first moment on."""
    from ..inversion.errors import WriteError

    out = Path(args.out)
    with _QuietInterrupts() as interrupts, warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            posterior = _fit(load_study(), args, out)
        except KeyboardInterrupt as stop:
            interrupts.silence()
            _print_warnings(caught)
            _say_interrupted(out, stop)
            return 130
        except WriteError as err:
            _print_warnings(caught)
            hint = "; free some space, then run the same command with --resume"
            print(f"lidmelt {args.command}: error: {err}{hint if err.kept_steps else ''}",
                  file=sys.stderr)
            return 1
    _print_warnings(caught, posterior)
    print_result(posterior, out)
    return 0


def _fit(study, args, out: Path):
    from ..inversion.fitting.run import fit

    return fit(study, seed=args.seed, out=out, resume=args.resume, quiet=args.quiet,
               force=args.force, provenance={"command_line": list(args.argv)},
               figure_format=args.figure_format)


def _print_warnings(caught, posterior=None) -> None:
    """lidmelt's warnings one line each; the posterior's own list replaces the sampler's."""
    from ..inversion.fitting.checkpoint import ResumeWarning
    from ..inversion.errors import NotConvergedWarning, PosteriorWarning

    for warning in caught:
        if issubclass(warning.category, (NotConvergedWarning, PosteriorWarning)):
            continue  # the same lines are in posterior.warnings
        if issubclass(warning.category, ResumeWarning):
            print(f"lidmelt: warning: {warning.message}", file=sys.stderr)
        else:
            warnings.showwarning(warning.message, warning.category, warning.filename,
                                 warning.lineno)
    for line in [] if posterior is None else posterior.warnings:
        print(f"lidmelt: warning: {line}", file=sys.stderr)


def _say_interrupted(out: Path, stop: KeyboardInterrupt) -> None:
    from ..inversion.errors import InterruptedWhenComplete
    from ..inversion.fitting.checkpoint import stored_steps

    if isinstance(stop, InterruptedWhenComplete):
        print(f"lidmelt: interrupted as the results were finished; {stop.folder}/ is "
              "complete and nothing is left to resume", file=sys.stderr)
        return
    partial = out.with_name(out.name + ".partial")
    steps = stored_steps(partial)
    if steps:
        print(f"lidmelt: interrupted; the chain up to step {steps} is kept in {partial}/ - "
              "continue it by running the same command with --resume", file=sys.stderr)
    else:
        print("lidmelt: interrupted before the first step was stored; nothing was kept",
              file=sys.stderr)


class _QuietInterrupts:
    """Ctrl-C and SIGTERM (a scheduler's time limit): the first one raises
    KeyboardInterrupt, every later one is ignored, so the command prints one line and
    ends with exit code 130 however many times the keys are pressed. The sampler holds
    signals back itself until its checkpoint is complete (see `inversion.fitting.sampler`)."""

    _SIGNALS = (signal.SIGINT, signal.SIGTERM)

    def __enter__(self):
        self.seen = False
        self.previous = None
        if threading.current_thread() is threading.main_thread():
            self.previous = {s: signal.signal(s, self._handle) for s in self._SIGNALS}
        return self

    def _handle(self, signum, frame):
        if not self.seen:
            self.seen = True
            raise KeyboardInterrupt

    def silence(self) -> None:
        """Ignore further signals (the command is about to end)."""
        self.seen = True

    def __exit__(self, *exc) -> None:
        if self.previous is None:
            return
        for s, handler in self.previous.items():
            # After a real signal the process is ending: stay deaf to more of them.
            signal.signal(s, signal.SIG_IGN if self.seen and exc[0] is None else handler)


def print_result(posterior, out: Path) -> None:
    """Headline numbers and where the results are, on stdout."""
    from ..forward.quantities import quantity
    from ..inversion.results.report import interval_words

    state = "converged" if posterior.converged else "NOT CONVERGED (see report.md)"
    print(f"{posterior.study.name}: {state}; {posterior.chain.shape[0]} steps x "
          f"{posterior.chain.shape[1]} walkers")
    for _, row in posterior.summary().iterrows():
        print(f"  {quantity(row['parameter']).title}: {interval_words(row).replace('**', '')}")
    where = out.resolve()
    print(f"Results written to {where}/ (start with {where / 'report.md'})")
