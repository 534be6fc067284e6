"""The sites table of a survey (SITES.csv): one row per site.

Columns: ``site`` (name), then the columns of each observation kind a survey reads
(`SURVEY_KINDS`), with the rules of that kind's own table
(`ObservationSet.site_columns`): ``thickness_km`` (0-60 km) and ``thickness_sigma_km``
(> 0), required; optional ``pressure_gpa`` with ``pressure_sigma_gpa``, ``temperature_c``
with ``temperature_sigma_c`` (only beside a pressure) and ``pt_correlation`` (only beside
a temperature); optional ``la_yb_cn`` with ``la_yb_sigma_cn`` and, beside them,
``sm_yb_cn``/``sm_yb_sigma_cn`` and ``dy_yb_cn``/``dy_yb_sigma_cn`` (chondrite-normalised
rare-earth ratios, kind ``rare_earths``, with the ``[survey]`` source and transition;
the kind fits Sm/Yb and Dy/Yb only beside La/Yb, so a header with them and no
``la_yb_cn`` is refused, and so is a row giving them without La/Yb); optional
``position_km`` (distance along the study area, for the profile
figure). Columns starting with ``note`` are remarks; any other column is refused. A line
whose first non-blank character is ``#`` is a comment and skipped, so a site name must not
start with ``#``; a name that CSV tools read as a missing value (``nan``, ``NA``, ...) is
refused. Uncertainties have a floor (0.001 km, 0.0001 GPa, 0.01 degC, in the kinds'
rules): smaller ones are no measurement errors and would make every likelihood underflow.

The file's structure (header, field counts, names) is checked first: a mistake there
stops the survey with an `InputError`. Each row's values are then checked on their own
with the same rules as the observation tables, so a bad value fails only its site, with a
message naming the file, the line and the column. In the optional column groups a row
may leave a whole group empty (that site has no such measurement), not part of it. The
checks run on whole columns at once (`_fast_values`); only rows they flag go through the
row-by-row rules that word the message, so checking grows linearly with the rows.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..observations import CrustalThickness, MeltingPressure, RareEarthRatios
from ..observations.tables import (
    ColumnRule,
    check_row,
    header_rules,
    read_rows,
    validate_frame,
)

__all__ = ["SURVEY_KINDS", "Site", "SiteTable", "read_sites", "site_observations"]

#: The observation kinds a sites file holds, in column order; every site needs the first.
SURVEY_KINDS = (CrustalThickness, MeltingPressure, RareEarthRatios)
_NAME = ColumnRule("site", numeric=False)
_POSITION = (ColumnRule("position_km", unit="km"),)
_KIND_GROUPS = tuple(kind.site_columns() for kind in SURVEY_KINDS)
_REQUIRED = (_NAME, *_KIND_GROUPS[0][0])
_GROUPS = (_POSITION, *_KIND_GROUPS[0][1:], *(g for groups in _KIND_GROUPS[1:]
                                                for g in groups))
#: Site names that CSV readers take for a missing value (pandas' default list, exact case).
_MISSING_NAMES = frozenset({"-1.#IND", "1.#QNAN", "1.#IND", "-1.#QNAN", "#N/A N/A", "#N/A",
                            "N/A", "n/a", "NA", "<NA>", "#NA", "NULL", "null", "NaN",
                            "-NaN", "nan", "-nan", "None"})
#: Rows from which reading shows a progress bar (on standard error).
PROGRESS_ROWS = 50_000


@dataclass(frozen=True)
class Site:
    """One row of the sites table (units in the field names; None = not measured).

    Attributes
    ----------
    index : int
        Position in the table (0-based), which fixes the site's seed.
    name : str
    line : int
        Line of the row in the file.
    error : str or None
        Why the row's values cannot be used (the site then fails alone).
    file : pathlib.Path or None
        The sites file, named with `line` in messages about the site's values.
    """

    index: int
    name: str
    line: int
    thickness_km: float | None = None
    thickness_sigma_km: float | None = None
    position_km: float | None = None
    pressure_gpa: float | None = None
    pressure_sigma_gpa: float | None = None
    temperature_c: float | None = None
    temperature_sigma_c: float | None = None
    pt_correlation: float | None = None
    la_yb_cn: float | None = None
    la_yb_sigma_cn: float | None = None
    sm_yb_cn: float | None = None
    sm_yb_sigma_cn: float | None = None
    dy_yb_cn: float | None = None
    dy_yb_sigma_cn: float | None = None
    error: str | None = None
    file: Path | None = None

    @property
    def has_pressure(self) -> bool:
        return self.pressure_gpa is not None

    @property
    def records_melt(self) -> bool:
        """Whether the site's data say that melt formed (crust or a melt pressure)."""
        return bool(self.has_pressure or (self.thickness_km or 0.0) > 0.0)


@dataclass(frozen=True)
class SiteTable:
    """The sites of a survey, in file order, and the file's identity."""

    path: Path
    sites: tuple[Site, ...]
    sha256: str
    has_positions: bool
    has_pressures: bool

    def __len__(self) -> int:
        return len(self.sites)


def read_sites(path: str | PathLike[str], *, progress: bool = True) -> SiteTable:
    """Read and check a sites table (see the module docstring).

    Parameters
    ----------
    path : str or path-like
    progress : bool
        Show a progress bar on standard error for tables of `PROGRESS_ROWS` rows or more.

    Raises
    ------
    InputError
        Missing file, bad header, a missing column (or half of a column pair, or a
        kind's extra columns without its main measurement's columns), wrong field counts, an empty site name, a name used twice or read as a missing value.
    """
    path = Path(path)
    if not path.is_file():
        why = "is a folder, not a table" if path.is_dir() else "not found"
        raise InputError(f"sites file {why}; check the path", file=path)
    header, header_line, rows, lines = read_rows(path)
    rules = header_rules(header, header_line, _REQUIRED, _GROUPS, path)
    _check_kind_headers(header, header_line, path)
    present = [group for group in _GROUPS if group[0] in rules]
    frame = pd.DataFrame(rows, columns=header, dtype=object)
    _check_names([str(name).strip() for name in frame["site"]], lines, path)
    names = validate_frame(frame[["site"]], _REQUIRED[:1], file=path, lines=lines).data["site"]
    names = [str(name).strip() for name in names]
    values, bad = _fast_values(frame, present)
    from tqdm.auto import tqdm

    sites = []
    show = progress and len(rows) >= PROGRESS_ROWS
    for k in tqdm(range(len(rows)), disable=not show, unit="row", desc="checking sites",
                  mininterval=0.5):
        if bad[k]:
            sites.append(_site(k, dict(zip(header, rows[k], strict=True)), lines[k],
                               present, path))
        else:
            sites.append(Site(k, names[k], lines[k], file=path,
                              **{key: column[k] for key, column in values.items()
                                 if column[k] is not None}))
    return SiteTable(path, tuple(sites), hashlib.sha256(path.read_bytes()).hexdigest(),
                     has_positions=_POSITION in present,
                     has_pressures=_KIND_GROUPS[1][0] in present)


def _check_kind_headers(header, line: int, path: Path) -> None:
    """Refuse a kind's extra columns in a header without that kind's main measurement.

    A kind reads its extras only beside its main measurement in the same row
    (`ObservationSet.site_columns`), so such a file could never give that kind a row.
    """
    for kind, groups in zip(SURVEY_KINDS, _KIND_GROUPS, strict=True):
        main = [rule.name for rule in groups[0]]
        missing = [name for name in main if name not in header]
        extra = next((rule.name for group in groups[1:] for rule in group
                      if rule.name in header), None)
        if missing and extra is not None:
            raise InputError(f"'{extra}' is read only beside the main measurement of kind "
                             f"{kind.kind}; add columns " + " and ".join(missing)
                             + " (left blank where a site has none) or remove " + extra,
                             file=path, row=line, column=extra)


def _fast_values(frame: pd.DataFrame, groups) -> tuple[dict, np.ndarray]:
    """Every column's numbers (None where a group is blank) and a mask of the rows that
    need the row-by-row check: a cell that is not a finite number in range, a group only
    partly given, a column given without one it `requires`, or a kind's extra group
    without that kind's main measurement."""
    n = len(frame)
    bad = np.zeros(n, bool)
    values, given = {}, {}
    main = _KIND_GROUPS[0][0]
    for group in (main, *groups):
        blank = np.column_stack([frame[r.name].astype(str).str.strip().eq("").to_numpy()
                                 for r in group])
        filled = np.ones(n, bool) if group is main else ~blank.all(axis=1)
        bad |= filled & blank.any(axis=1)
        for rule in group:
            given[rule.name] = filled
            number = pd.to_numeric(frame[rule.name].astype(str).str.strip(),
                                   errors="coerce").to_numpy(float)
            with np.errstate(invalid="ignore"):
                ok = np.isfinite(number)
                if rule.low is not None:
                    ok &= number > rule.low if rule.low_open else number >= rule.low
                if rule.high is not None:
                    ok &= number < rule.high if rule.high_open else number <= rule.high
            bad |= filled & ~ok
            values[rule.name] = [float(v) if f else None for v, f in zip(number, filled)]
    none = np.zeros(n, bool)
    for group in groups:
        for rule in group:
            for needed in rule.requires:
                bad |= given[rule.name] & ~given.get(needed, none)
    for kind_groups in _KIND_GROUPS:
        first = kind_groups[0][0].name
        for extra in kind_groups[1:]:
            if extra[0].name in given:
                bad |= given[extra[0].name] & ~given.get(first, none)
    return values, bad


def _check_names(names: list[str], lines, path: Path) -> None:
    first: dict[str, int] = {}
    for name, line in zip(names, lines, strict=True):
        if not name:
            continue  # validate_frame words this one
        if name in _MISSING_NAMES:
            raise InputError(f"site name '{name}' reads as a missing value in CSV tools "
                             "(and in sites_summary.csv); give the site another name",
                             file=path, row=line, column="site")
        if name in first:
            raise InputError(f"site '{name}' appears twice (also on line {first[name]}); "
                             "give every site its own name", file=path, row=line,
                             column="site")
        first[name] = line


def _site(index: int, row: dict, line: int, groups, path: Path) -> Site:
    name = row["site"].strip()
    try:
        values = _row_values(row, line, groups, path)
    except InputError as err:  # keep the position, if it is readable, for the figure
        return Site(index, name, line, position_km=_number_or_none(row.get("position_km")),
                    error=str(err), file=path)
    return Site(index, name, line, **values, file=path)


def _number_or_none(text) -> float | None:
    try:
        value = float(str(text).strip())
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _row_values(row: dict, line: int, groups, path: Path) -> dict:
    """The numbers of one row, checked by each kind's rules (raises `InputError`)."""
    values = check_row(row, (_POSITION,), file=path, line=line)
    for k, kind_groups in enumerate(_KIND_GROUPS):
        values |= check_row(row, kind_groups, file=path, line=line, required=k == 0)
    return values


def site_observations(site: Site, settings) -> list:
    """The observation sets of one site: one per kind of `SURVEY_KINDS` it measured.

    Parameters
    ----------
    site : Site
        A site without `Site.error`.
    settings : SurveySettings
        Comparison choices and model errors.
    """
    options = {CrustalThickness: dict(model_error=settings.crust_model_error,
                                      thickness_of=settings.thickness_of),
               MeltingPressure: dict(model_error=settings.pressure_model_error,
                                     equilibration=settings.equilibration,
                                     path_points=settings.path_points,
                                     temperature_model_error=settings.temperature_model_error),
               RareEarthRatios: dict(model_error=settings.rare_earth_model_error,
                                     source=settings.rare_earth_source,
                                     transition=settings.rare_earth_transition)}
    sets = []
    for kind, groups in zip(SURVEY_KINDS, _KIND_GROUPS, strict=True):
        values = {rule.name: getattr(site, rule.name) for group in groups for rule in group
                  if getattr(site, rule.name) is not None}
        if values:
            sets.append(kind.from_site(site.name, values, file=site.file, line=site.line,
                                       **options[kind]))
    return sets
