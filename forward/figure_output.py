"""The one way lidmelt turns a figure into a file: PNG, PDF or SVG, atomically.

Every figure of every command goes through `figure_bytes` (figures built in memory for a
result folder) or `save_figure` (a figure written straight to a path). Both fix what a
journal's production office checks:

* **Fonts embedded.** PDF text is written with TrueType (Type 42) fonts, embedded in the
  file (``pdf.fonttype = 42``; matplotlib's default, Type 3, is refused by some journals
  and cannot be edited). SVG text is written as paths (``svg.fonttype = "path"``): SVG
  cannot carry a font, and text left as text would be drawn in whatever font the
  reader's machine substitutes. Who needs editable labels takes the PDF.
* **Reproducible bytes.** No creation date or software stamp, and a fixed salt for SVG
  element ids, so the same figure gives the same file.
* **Journal sizes.** `SINGLE_COLUMN` and `DOUBLE_COLUMN` are the widths (inches) the
  figures are drawn at, so that their 7-10 pt text prints at its size (docs/figures.md
  says which figure uses which).

matplotlib is imported inside the functions: the command line loads this module at
start for `FIGURE_FORMATS`.
"""

from __future__ import annotations

import io
from os import PathLike

from .._atomic import PNG_MARK, write_bytes

__all__ = ["DEFAULT_FIGURE_FORMAT", "DOUBLE_COLUMN", "FIGURE_FORMATS", "SINGLE_COLUMN",
           "check_figure_format", "figure_bytes", "figure_name", "save_figure"]

#: The file formats a figure can be written in (the ``figure_format`` of every command).
FIGURE_FORMATS = ("png", "pdf", "svg")
DEFAULT_FIGURE_FORMAT = "png"
#: Width of a single journal column, inches (88 mm; journals ask for 84-90 mm).
SINGLE_COLUMN = 88 / 25.4
#: Width of a double (full-page) journal column, inches (178 mm; journals ask 174-180 mm).
DOUBLE_COLUMN = 178 / 25.4

_RC = {"pdf.fonttype": 42, "ps.fonttype": 42, "svg.fonttype": "path",
       "svg.hashsalt": "lidmelt"}
# PNGs carry lidmelt's mark (`--force` may replace only those); no dates, so the same
# figure gives the same bytes.
_METADATA = {"png": {"Software": PNG_MARK},
             "pdf": {"Creator": None, "Producer": None, "CreationDate": None},
             "svg": {"Creator": None, "Date": None}}


def check_figure_format(figure_format: str) -> str:
    """`figure_format` if it is one of `FIGURE_FORMATS`.

    Raises
    ------
    ValueError
        Any other value (the message lists the formats).

    Examples
    --------
    >>> check_figure_format("pdf")
    'pdf'
    >>> check_figure_format("eps")
    Traceback (most recent call last):
    ...
    ValueError: figure format 'eps' is not one of png, pdf, svg
    """
    if figure_format not in FIGURE_FORMATS:
        raise ValueError(f"figure format {figure_format!r} is not one of "
                         f"{', '.join(FIGURE_FORMATS)}")
    return figure_format


def figure_name(stem: str, figure_format: str) -> str:
    """File name of figure `stem` in `figure_format`.

    Examples
    --------
    >>> figure_name("corner", "svg")
    'corner.svg'
    """
    return f"{stem}.{check_figure_format(figure_format)}"


def figure_bytes(fig, figure_format: str = DEFAULT_FIGURE_FORMAT, *, dpi: float = 150) -> bytes:
    """The bytes of `fig` as a PNG, PDF or SVG file (fonts embedded, no time stamp).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    figure_format : {"png", "pdf", "svg"}
    dpi : float
        Resolution of a PNG, and of any raster part (images) of a PDF or SVG.

    Returns
    -------
    bytes
    """
    from matplotlib import rc_context  # noqa: PLC0415  (heavy; see the module docstring)

    check_figure_format(figure_format)
    buffer = io.BytesIO()
    with rc_context(_RC):
        fig.savefig(buffer, format=figure_format, dpi=dpi,
                    metadata=_METADATA[figure_format])
    return buffer.getvalue()


def save_figure(fig, path: str | PathLike[str], figure_format: str = DEFAULT_FIGURE_FORMAT,
                *, dpi: float = 150) -> None:
    """Write `fig` to `path` atomically (`lidmelt._atomic.write_bytes`) in `figure_format`."""
    write_bytes(path, figure_bytes(fig, figure_format, dpi=dpi))
