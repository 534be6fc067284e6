"""The figure format a command was asked for, checked once with a user's error message."""

from __future__ import annotations

from ...forward.figure_output import DEFAULT_FIGURE_FORMAT, check_figure_format
from ..errors import InputError

__all__ = ["DEFAULT_FIGURE_FORMAT", "checked_figure_format"]


def checked_figure_format(figure_format: str) -> str:
    """`figure_format` if lidmelt can write it; an `InputError` naming the key otherwise.

    Examples
    --------
    >>> checked_figure_format("svg")
    'svg'
    >>> checked_figure_format("jpg")
    Traceback (most recent call last):
    ...
    lidmelt.inversion.errors.InputError: key 'figure_format': figure format 'jpg' is not one of png, pdf, svg
    """
    try:
        return check_figure_format(figure_format)
    except ValueError as err:
        raise InputError(str(err), key="figure_format") from None
