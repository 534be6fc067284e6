"""Reading and validating observation tables (comma-separated text files).

Format: UTF-8 text, comma-separated, one header line naming the columns, one row per
observation. Blank lines and lines starting with ``#`` (comments, e.g. data sources) are
skipped. Quoted fields may contain commas but not line breaks.

Column names
------------
* Every column must be one the table's kind reads, or a remark: a column whose name
  starts with ``note`` (``note``, ``notes``, ``note_source``, ``note_lat``...) is kept as
  text and never read. Any other column is refused with the nearest valid name, so a
  misspelt optional column (``pt_corr`` for ``pt_correlation``) cannot be dropped
  silently.
* A measured value is named ``<quantity>_<unit>`` and its 1-sigma uncertainty
  ``<quantity>_sigma_<unit>`` (`sigma_column`): ``thickness_km`` and
  ``thickness_sigma_km``, ``pressure_gpa`` and ``pressure_sigma_gpa``, ``temperature_c``
  and ``temperature_sigma_c``, in observation tables and survey sites files alike. The
  old names (`RENAMED_COLUMNS`) are refused with the new name.
* Numbers are plain decimals (`inversion.study.keys.parse_number`): ``1.5``, ``-2``,
  ``1e3``; not ``6_5``, ``nan`` or ``inf``.

Every check raises an `InputError` naming the file, the line (as a user sees it in an
editor; header = line 1 unless comments precede it), the column and the rule.
"""

from __future__ import annotations

import csv
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import pandas as pd

from ..errors import InputError, suggest
from ..study.keys import is_plain_number

__all__ = ["NOTE_PREFIX", "RENAMED_COLUMNS", "ColumnRule", "Table", "check_column_names",
           "check_row", "header_rules", "read_rows", "read_table", "sigma_column", "validate_frame"]

_LINE_END = re.compile(r"\r\n|\r|\n")
_CONTROL = re.compile("[\x00-\x08\x0b-\x1f\x7f\x85\u2028\u2029]")  # tab is allowed

#: A column whose name starts with this is a remark: kept as text, never read.
NOTE_PREFIX = "note"
#: Old column name -> new name (renamed in 0.1.0: one scheme for every uncertainty).
RENAMED_COLUMNS = {"sigma_km": "thickness_sigma_km", "sigma_gpa": "pressure_sigma_gpa",
                   "sigma_c": "temperature_sigma_c"}


def sigma_column(value_column: str) -> str:
    """The name of the 1-sigma column of a value column: ``<quantity>_sigma_<unit>``.

    Examples
    --------
    >>> sigma_column("pressure_gpa"), sigma_column("thickness_km")
    ('pressure_sigma_gpa', 'thickness_sigma_km')
    """
    quantity, _, unit = value_column.rpartition("_")
    if not quantity:
        raise ValueError(f"{value_column!r} is not named <quantity>_<unit>")
    return f"{quantity}_sigma_{unit}"


@dataclass(frozen=True)
class ColumnRule:
    """What a column must hold.

    Parameters
    ----------
    name : str
        Column name in the header.
    numeric : bool
        True: every cell is a finite number; False: every cell is a non-empty text.
    low, high : float, optional
        Allowed range of a numeric column.
    low_open, high_open : bool
        The value must be strictly greater than `low` (e.g. a standard deviation > 0) or
        strictly less than `high`.
    unit : str
        Unit shown in messages.
    why : str
        Short reason appended to a range message, e.g. ``"a thickness cannot be negative"``.
    requires : tuple of str
        Other columns this one is meaningful only with (checked on the header).
    """

    name: str
    numeric: bool = True
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    unit: str = ""
    why: str = ""
    high_open: bool = False
    requires: tuple[str, ...] = ()

    def rule_text(self) -> str:
        """The range rule in words, e.g. ``"must be > 0 GPa"``."""
        unit = f" {self.unit}" if self.unit else ""
        low = f"{'>' if self.low_open else '>='} {self.low:g}" if self.low is not None else ""
        high = f"{'<' if self.high_open else '<='} {self.high:g}" \
            if self.high is not None else ""
        if low and high and not (self.low_open or self.high_open):
            return f"must be between {self.low:g} and {self.high:g}{unit}"
        if low or high:
            return f"must be {' and '.join(part for part in (low, high) if part)}{unit}"
        return "must be a finite number"

    def broken(self, value: float) -> bool:
        """True if `value` breaks the range rule."""
        if self.low is not None and (value <= self.low if self.low_open else value < self.low):
            return True
        return self.high is not None and (value >= self.high if self.high_open
                                          else value > self.high)

    def unmet(self, columns) -> str | None:
        """A message if a column in `requires` is missing from `columns`, else None."""
        missing = [name for name in self.requires if name not in columns]
        if not missing:
            return None
        return (f"column '{self.name}' is allowed only together with "
                + ", ".join(self.requires) + " (missing: " + ", ".join(missing) + ")")


@dataclass(frozen=True)
class Table:
    """A validated table: the data and the file line number of each row."""

    data: pd.DataFrame
    lines: tuple[int, ...]


def read_table(
    path: str | PathLike[str],
    required: Sequence[ColumnRule],
    *,
    optional: Sequence[Sequence[ColumnRule]] = (),
    key: str | None = None,
) -> Table:
    """Read a comma-separated observation table and check every cell.

    Parameters
    ----------
    path : str or path-like
        The table file.
    required : sequence of ColumnRule
        Columns that must be present.
    optional : sequence of sequences of ColumnRule
        Groups of columns that are either all present or all absent (e.g. a value and its
        uncertainty).
    key : str, optional
        Study-file key that names this file, quoted when the file is missing.

    Returns
    -------
    Table
        Numeric columns as float64, text columns as str; rows in file order.

    Raises
    ------
    InputError
        Missing or unreadable file, missing column, empty file, wrong number of fields,
        non-numeric, empty, NaN or infinite cell, or a value outside its range.
    """
    path = Path(path)
    try:
        if not path.is_file():
            why = "is a folder, not a table" if path.is_dir() else "not found"
            raise InputError(f"observation file {why}; paths are relative to the study "
                             "file", file=path, key=key)
    except OSError as err:  # e.g. no permission to look into its folder
        raise _unreadable(path, err, key) from None
    header, header_line, rows, lines = read_rows(path, key=key)
    rules = header_rules(header, header_line, required, optional, path)
    return validate_frame(pd.DataFrame(rows, columns=header, dtype=object), rules,
                          file=path, lines=lines)


def _unreadable(path: Path, err: OSError, key: str | None) -> InputError:
    return InputError(f"the file cannot be read ({err.strerror}); check its permissions",
                      file=path, key=key)


def read_rows(path: Path, *, key: str | None = None,
              ) -> tuple[list[str], int, list[list[str]], list[int]]:
    """The header, its line, the data rows (lists of stripped cells) and their lines.

    Checks the structure only (encoding, control characters, an empty or repeated
    column name, field counts), not the column names or the cells.
    """
    try:
        data = path.read_bytes()
    except OSError as err:  # e.g. no read permission
        raise _unreadable(path, err, key) from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise InputError(f"not UTF-8 text (byte {err.start}); save the table as UTF-8 CSV",
                         file=path) from None
    header, header_line, rows, lines = None, 0, [], []
    # Lines end at \n, \r\n or \r only; str.splitlines would also split a row at a
    # form feed, U+2028 and other separators hidden inside a cell.
    for number, raw in enumerate(_LINE_END.split(text), start=1):
        if not raw.strip() or raw.lstrip().startswith("#"):
            continue
        _check_characters(raw, header, path, number)
        fields = [cell.strip() for cell in next(csv.reader([raw]))]
        if header is None:
            header, header_line = fields, number
            _check_header(header, path, number)
            continue
        if len(fields) != len(header):
            raise InputError(f"has {len(fields)} fields but the header (line {header_line}) "
                             f"has {len(header)}; check for missing or extra commas",
                             file=path, row=number)
        rows.append(fields)
        lines.append(number)
    if header is None:
        raise InputError("the file is empty; it needs a header line and data rows", file=path)
    if not rows:
        raise InputError("no data rows below the header", file=path, row=header_line)
    return header, header_line, rows, lines


def _check_characters(raw: str, header, path: Path, line: int) -> None:
    """Refuse control characters (NUL, line and paragraph separators) inside a row."""
    bad = _CONTROL.search(raw)
    if bad is None:
        return
    index = max(len(next(csv.reader([raw[: bad.start()]]))) - 1, 0)  # the cell it is in
    column = header[index] if header is not None and index < len(header) else None
    raise InputError(f"a cell holds the control character U+{ord(bad.group()):04X}; a cell "
                     "must be plain text on one line", file=path, row=line, column=column)


def _check_header(header: list[str], path: Path, line: int) -> None:
    seen = set()
    for name in header:
        if not name:
            raise InputError("empty column name in the header", file=path, row=line)
        if name in seen:
            raise InputError(f"column '{name}' appears twice in the header", file=path,
                             row=line, column=name)
        seen.add(name)


def check_column_names(columns, valid, *, file=None, line: int | None = None) -> None:
    """Refuse a column that is neither one of `valid` nor a remark (`NOTE_PREFIX`).

    An old name (`RENAMED_COLUMNS`) is refused with its new name; any other unknown
    column with the nearest valid name, or the list of valid names.
    """
    valid = list(valid)
    for name in columns:
        name = str(name)
        if name in valid or name.lower().startswith(NOTE_PREFIX):
            continue
        if RENAMED_COLUMNS.get(name) in valid:
            raise InputError(f"column '{name}' is now called '{RENAMED_COLUMNS[name]}' "
                             "(lidmelt 0.1.0 names every uncertainty <quantity>_sigma_<unit>"
                             "); rename it in the header", file=file, row=line, column=name)
        hint = suggest(name, valid, list_choices=False) or \
            "; this table reads " + ", ".join(valid)
        raise InputError(f"unknown column '{name}'{hint} (a column starting with "
                         f"'{NOTE_PREFIX}' is kept as a remark)", file=file, row=line,
                         column=name)


def header_rules(header, header_line, required, optional, path) -> list[ColumnRule]:
    """The rules of the columns present in `header`, after checking the header.

    Refuses an unknown column (`check_column_names`), a missing required column, half of
    an all-or-none `optional` group and a column whose `ColumnRule.requires` are absent.
    """
    def missing(rule: ColumnRule, extra: str = "") -> InputError:
        hint = ""
        if len(header) == 1 and any(sep in header[0] for sep in ";\t|"):
            hint = "; the header has one column only: is the file comma-separated?"
        return InputError(f"missing column '{rule.name}'{extra} (found: "
                          + ", ".join(header) + ")" + hint, file=path, row=header_line,
                          column=rule.name)

    if not (len(header) == 1 and any(sep in header[0] for sep in ";\t|")):
        valid = [r.name for r in required] + [r.name for g in optional for r in g]
        check_column_names(header, valid, file=path, line=header_line)
    rules = []
    for rule in required:
        if rule.name not in header:
            raise missing(rule)
        rules.append(rule)
    for group in optional:
        present = [rule.name in header for rule in group]
        if any(present) and not all(present):
            absent = next(rule for rule, here in zip(group, present, strict=True) if not here)
            others = ", ".join(r.name for r in group if r is not absent)
            raise missing(absent, f", needed together with {others}")
        if all(present):
            rules.extend(group)
    for rule in rules:
        if (problem := rule.unmet(header)) is not None:
            raise InputError(problem, file=path, row=header_line, column=rule.name)
    return rules


def validate_frame(
    frame: pd.DataFrame,
    rules: Sequence[ColumnRule],
    *,
    file: str | PathLike[str] | None = None,
    lines: Sequence[int] | None = None,
) -> Table:
    """Check and convert the columns of a table held in memory (text or numbers).

    Parameters
    ----------
    frame : pandas.DataFrame
        One row per observation; must contain every column of `rules`.
    rules : sequence of ColumnRule
    file : str or path-like, optional
        Named in messages.
    lines : sequence of int, optional
        File line number of each row; default ``2, 3, ...`` (header on line 1).

    Returns
    -------
    Table
    """
    lines = tuple(range(2, 2 + len(frame))) if lines is None else tuple(lines)
    if len(frame) == 0:
        raise InputError("no data rows", file=file)
    out = frame.copy()
    for rule in rules:
        if rule.name not in out.columns:
            raise InputError(f"missing column '{rule.name}'", file=file, column=rule.name)
        if (problem := rule.unmet(out.columns)) is not None:
            raise InputError(problem, file=file, column=rule.name)
        values = [_cell(v, rule, file, line) for v, line in zip(out[rule.name], lines,
                                                               strict=True)]
        out[rule.name] = pd.Series(values, index=out.index,
                                   dtype=float if rule.numeric else object)
    return Table(out.reset_index(drop=True), lines)


def _cell(value, rule: ColumnRule, file, line: int):
    def fail(message: str) -> InputError:
        return InputError(message, file=file, row=line, column=rule.name)

    text = "" if value is None else str(value).strip()
    if not rule.numeric:
        if not text or text.lower() == "nan":
            raise fail("empty cell; every row needs a name here")
        return text
    if not text:
        raise fail("empty cell; every row needs a number here")
    if not is_plain_number(text):  # float() also reads 6_5 as 65, and other digits
        raise fail(f"'{text}' is not a number; write a plain decimal such as 1.5")
    number = float(text)
    if math.isnan(number):
        raise fail(f"value '{text}' (NaN) is not allowed; remove the row or give a number")
    if math.isinf(number):
        raise fail(f"value '{text}' is not a finite number")
    if rule.broken(number):
        why = f" ({rule.why})" if rule.why else ""
        raise fail(f"value {number:g} {rule.rule_text()}{why}")
    return number


def check_row(row, groups: Sequence[Sequence[ColumnRule]], *, file=None, line: int,
              required: bool = False) -> dict[str, float]:
    """The numbers one row of a survey sites file gives for one kind's column groups.

    Parameters
    ----------
    row : mapping of str to str
        Column -> cell text of the row (columns absent from the file are absent here).
    groups : sequence of sequences of ColumnRule
        The kind's `ObservationSet.site_columns`: the main measurement first, then
        optional extras.
    file : path-like, optional
    line : int
        The row's line in the file; both are named in every message.
    required : bool
        Every row must fill the first group (else a row may leave a whole group empty:
        that site has no such measurement).

    Returns
    -------
    dict of str to float
        The filled columns and their values (empty if the row gives none).

    Raises
    ------
    InputError
        Half of a group filled, an extra without the first group (or without a column
        its rules require), or a value breaking its rule.
    """
    chosen: list[ColumnRule] = []
    for k, group in enumerate(groups):
        if not all(rule.name in row for rule in group):
            continue
        blank = [rule for rule in group if not str(row[rule.name] or "").strip()]
        if len(blank) == len(group) and not (required and k == 0):
            continue  # this site has no such measurement
        if blank and len(blank) < len(group):
            given = ", ".join(r.name for r in group if r not in blank)
            raise InputError(f"empty cell beside {given}; give both or leave both empty",
                             file=file, row=line, column=blank[0].name)
        chosen.extend(group)
    names = {rule.name for rule in chosen}
    main = [rule.name for rule in groups[0]]
    for rule in chosen:
        needs = [n for n in (main if rule.name not in main else []) + list(rule.requires)
                 if n not in names]
        if needs:
            raise InputError(f"'{rule.name}' needs the measurement it goes with; give "
                             + " and ".join(needs) + " too", file=file, row=line,
                             column=rule.name)
    if not chosen:
        return {}
    frame = pd.DataFrame({rule.name: [row[rule.name]] for rule in chosen})
    data = validate_frame(frame, chosen, file=file, lines=[line]).data
    return {rule.name: float(data[rule.name].iloc[0]) for rule in chosen if rule.numeric}
