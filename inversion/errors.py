"""Exceptions and warnings of the inversion package.

`InputError` is the one exception for a mistake in a user's study file or observation
table. Its string form is a single line that names where the mistake is (file, line,
line, column, key), shows the bad value, states the rule and suggests a fix, so the
command line can print it as it is and exit with code 2.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from os import PathLike

__all__ = ["InputError", "InterruptedWhenComplete", "NotConvergedWarning", "OutputConflict",
           "PosteriorWarning", "WriteError", "suggest"]


class InputError(ValueError):
    """A mistake in user input (study file, observation table or API argument).

    Parameters
    ----------
    message : str
        What is wrong and how to fix it, e.g. ``"value -0.3 must be > 0"``.
    file : str or path-like, optional
        The file the mistake is in.
    row : int, optional
        Line number in a table file as a user sees it in an editor (header = line 1);
        printed as ``line N``, so a user looks for it in an editor, not by counting rows.
    column : str, optional
        Column name in a table file.
    key : str, optional
        Dotted key in the study file, e.g. ``"parameters.water.value"``.
    line : int, optional
        Line number in a study (TOML) file.

    Examples
    --------
    >>> err = InputError("value -0.3 must be > 0", file="crust.csv", row=4,
    ...                  column="thickness_sigma_km")
    >>> str(err)
    "crust.csv, line 4, column 'thickness_sigma_km': value -0.3 must be > 0"
    >>> str(InputError("unknown key 'wter'; did you mean 'water'?", key="parameters.wter"))
    "key 'parameters.wter': unknown key 'wter'; did you mean 'water'?"
    """

    def __init__(
        self,
        message: str,
        *,
        file: str | PathLike[str] | None = None,
        row: int | None = None,
        column: str | None = None,
        key: str | None = None,
        line: int | None = None,
    ) -> None:
        self.message = " ".join(str(message).split())  # always one line
        self.file = None if file is None else str(file)
        self.row = row
        self.column = column
        self.key = key
        self.line = line
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = []
        if self.file is not None:
            where.append(self.file)
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.row is not None:
            where.append(f"line {self.row}")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        if self.key is not None:
            where.append(f"key '{self.key}'")
        if not where:
            return self.message
        return f"{', '.join(where)}: {self.message}"

    def __reduce__(self):  # keep the keyword fields when pickled (e.g. across processes)
        return (
            _rebuild_input_error,
            (self.message, self.file, self.row, self.column, self.key, self.line),
        )


def _rebuild_input_error(message, file, row, column, key, line) -> InputError:
    return InputError(message, file=file, row=row, column=column, key=key, line=line)


class OutputConflict(InputError):
    """An existing result folder or checkpoint stands in the way of a run.

    The message says what is in the way and how to resolve it with the arguments of
    `fit`; `reason` lets a front end (the command line) word the remedy its own way.

    Parameters
    ----------
    problem : str
        What is in the way, e.g. ``"the result folder already exists"``.
    reason : {"exists", "checkpoint", "no-checkpoint", "changed"}
        ``"exists"``: the result folder exists (replace it with ``force=True``);
        ``"checkpoint"``: an interrupted run is stored (``resume=True`` or ``force=True``);
        ``"no-checkpoint"``: nothing to resume; ``"changed"``: the stored run cannot be
        continued (other inputs, or a damaged checkpoint; ``force=True`` starts over).
    file : str or path-like, optional
        The folder or file concerned.
    """

    REMEDIES = {
        "exists": "choose another folder or replace it with force=True",
        "checkpoint": "continue it with resume=True or start over with force=True",
        "no-checkpoint": "start a new run instead (resume=False)",
        "changed": "restore what changed, or start over with force=True",
    }

    def __init__(self, problem: str, *, reason: str, file=None) -> None:
        self.problem = " ".join(str(problem).split())
        self.reason = reason
        super().__init__(f"{self.problem}; {self.REMEDIES[reason]}", file=file)


class InterruptedWhenComplete(KeyboardInterrupt):
    """Ctrl-C or SIGTERM that arrived while a finished result folder was put in place.

    The signal was held until the folder was complete (and a fit's checkpoint removed),
    then delivered as this KeyboardInterrupt: the run stops, but nothing is left to
    resume.

    Parameters
    ----------
    folder : str or path-like
        The complete result folder.
    """

    def __init__(self, folder) -> None:
        self.folder = str(folder)
        super().__init__(f"interrupted after {self.folder} was complete")


class WriteError(OSError):
    """Writing a checkpoint or the results failed (a full disk, a lost mount).

    Its string form is one line naming the path, the cause and what was kept.

    Parameters
    ----------
    path : str or path-like
        The file or folder that could not be written.
    cause : OSError
        The underlying error.
    kept_steps : int
        Steps of the chain stored in the checkpoint, 0 if none.
    checkpoint : str or path-like, optional
        The checkpoint folder that holds them.
    """

    def __init__(self, path, cause: OSError, *, kept_steps: int = 0, checkpoint=None) -> None:
        super().__init__(cause.errno, cause.strerror or str(cause))
        self.path = str(path)
        self.cause = cause
        self.kept_steps = int(kept_steps)
        self.checkpoint = None if checkpoint is None else str(checkpoint)

    def __str__(self) -> str:
        text = f"cannot write {self.path} ({self.cause.strerror or self.cause})"
        if self.checkpoint is None:
            return text
        if self.kept_steps:
            return (f"{text}; the checkpoint up to step {self.kept_steps} is kept in "
                    f"{self.checkpoint}")
        return f"{text}; no step had been stored yet, so nothing was kept"


class NotConvergedWarning(UserWarning):
    """The sampler stopped at its step cap before the convergence criteria were met.

    Parameters
    ----------
    message : str
        What was not reached (chain length in autocorrelation times, effective samples).
    tau : array_like, optional
        Last estimate of the integrated autocorrelation time per free parameter, in steps.
    steps : int, optional
        Number of steps taken.
    """

    def __init__(self, message: str = "", *, tau=None, steps: int | None = None) -> None:
        super().__init__(message)
        self.tau = tau
        self.steps = steps


class PosteriorWarning(UserWarning):
    """The fit finished but its posterior needs care (one line: what and why).

    Issued by `fit` for each entry of ``Posterior.posterior_warnings``: a posterior piled
    against a prior bound or the edge of the model's range, samples whose melting starts
    at the model's base, no melt anywhere in the prior. (Low acceptance and a high split
    R-hat are part of the stopping rule: `NotConvergedWarning`.)
    """


def suggest(word: str, valid: Iterable[str], *, list_choices: bool = True) -> str:
    """Return a ``"; did you mean 'x'?"`` hint for a misspelt `word`, or a list of choices.

    Parameters
    ----------
    word : str
        The unrecognised word.
    valid : iterable of str
        The accepted words.
    list_choices : bool
        Without a close match, list `valid` as the choices (False: return ``""``, for
        words that are not choices, such as the columns a table happens to have).

    Returns
    -------
    str
        A hint starting with ``"; "``, ready to append to an error message.

    Examples
    --------
    >>> suggest("wter", ["water", "solidus_offset"])
    "; did you mean 'water'?"
    >>> suggest("melt", ["crustal_thickness", "melt_thickness"])
    "; did you mean 'melt_thickness'?"
    >>> suggest("zzz", ["top", "pooled"])
    "; valid choices: 'top', 'pooled'"
    >>> suggest("zzz", ["site", "notes"], list_choices=False)
    ''
    """
    valid = [str(v) for v in valid]
    word = str(word)
    close = difflib.get_close_matches(word, valid, n=1, cutoff=0.6)
    if not close and word:  # an abbreviation such as 'melt' for 'melt_thickness'
        close = [v for v in valid if v.lower().startswith(word.lower())][:1]
    if close:
        return f"; did you mean '{close[0]}'?"
    if not list_choices:
        return ""
    return "; valid choices: " + ", ".join(f"'{v}'" for v in valid)
