"""The sites table of a survey (SITES.csv): one row per site.

Columns: ``site`` (name), ``thickness_km`` (0 to 60) and ``sigma_km`` (>= 0.001, 1
sigma); optional ``position_km`` (distance along the study area, for the profile
figure); optional ``pressure_gpa`` with ``pressure_sigma_gpa``; optional
``temperature_c`` with ``temperature_sigma_c`` (only beside a pressure) and, beside
those, ``pt_correlation`` (correlation of the pressure and temperature errors,
-1 < rho < 1, as in an observation table). Other columns are ignored. A line whose first
non-blank character is ``#`` is a comment and skipped, so a site name must not start
with ``#``; a name that CSV tools read as a missing value (``nan``, ``NA``, ...) is
refused. Uncertainties have a floor (0.001 km, 0.0001 GPa, 0.01 degC): smaller ones are
no measurement errors and would make every likelihood underflow.

The file's structure (header, field counts, names) is checked first: a mistake there
stops the survey with an `InputError`. Each row's values are then checked on their own
with the same rules as the observation tables, so a bad value fails only its site, with a
message naming the file, the line and the column. In the optional column pairs a row may
leave both cells empty (that site has no such measurement), not one of them. The checks
run on whole columns at once (`_fast_values`); only rows they flag go through the
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
from ..observations import (
    PRESSURE_RANGE,
    TEMPERATURE_RANGE,
    CrustalThickness,
    MeltingPressure,
)
from ..observations.crust import MAX_THICKNESS
from ..observations.tables import ColumnRule, _read_rows, _rules_for, validate_frame

__all__ = ["Site", "SiteTable", "read_sites", "site_observations"]

_REQUIRED = (
    ColumnRule("site", numeric=False),
    ColumnRule("thickness_km", low=0.0, high=MAX_THICKNESS, unit="km",
               why="a thickness cannot be negative, and the thickest igneous crust, "
               "beneath Iceland and oceanic plateaus, is about 40 km"),
    ColumnRule("sigma_km", low=1e-3, unit="km",
               why="a 1-sigma uncertainty below 1 m is no measurement error"),
)
_POSITION = (ColumnRule("position_km", unit="km"),)
_PRESSURE = (
    ColumnRule("pressure_gpa", low=PRESSURE_RANGE[0], high=PRESSURE_RANGE[1], unit="GPa"),
    ColumnRule("pressure_sigma_gpa", low=1e-4, unit="GPa",
               why="a 1-sigma uncertainty below 0.0001 GPa is no measurement error"),
)
_TEMPERATURE = (
    ColumnRule("temperature_c", low=TEMPERATURE_RANGE[0], high=TEMPERATURE_RANGE[1],
               unit="degC", why="outside this range the unit is probably not degC"),
    ColumnRule("temperature_sigma_c", low=1e-2, unit="degC",
               why="a 1-sigma uncertainty below 0.01 degC is no measurement error"),
)
_CORRELATION = (ColumnRule("pt_correlation", low=-1.0, high=1.0, low_open=True,
                           high_open=True, requires=("temperature_c", "temperature_sigma_c"),
                           why="a correlation coefficient lies strictly between -1 and 1"),)
_GROUPS = (_POSITION, _PRESSURE, _TEMPERATURE, _CORRELATION)
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
    """

    index: int
    name: str
    line: int
    thickness_km: float | None = None
    sigma_km: float | None = None
    position_km: float | None = None
    pressure_gpa: float | None = None
    pressure_sigma_gpa: float | None = None
    temperature_c: float | None = None
    temperature_sigma_c: float | None = None
    pt_correlation: float | None = None
    error: str | None = None

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
        Missing file, bad header, a missing column (or half of a column pair), wrong
        field counts, an empty site name, a name used twice or read as a missing value.
    """
    path = Path(path)
    if not path.is_file():
        why = "is a folder, not a table" if path.is_dir() else "not found"
        raise InputError(f"sites file {why}; check the path", file=path)
    header, header_line, rows, lines = _read_rows(path)
    rules = _rules_for(header, header_line, _REQUIRED, _GROUPS, path)
    present = [group for group in _GROUPS if group[0] in rules]
    frame = pd.DataFrame(rows, columns=header, dtype=object)
    _check_names([str(name).strip() for name in frame["site"]], lines, path)
    names = validate_frame(frame[["site"]], _REQUIRED[:1], file=path, lines=lines).data["site"]
    names = [str(name).strip() for name in names]
    values, bad = _fast_values(frame, present)
    sites = []
    show = progress and len(rows) >= PROGRESS_ROWS
    from tqdm.auto import tqdm

    for k in tqdm(range(len(rows)), disable=not show, unit="row", desc="checking sites",
                  mininterval=0.5):
        if bad[k]:
            sites.append(_site(k, dict(zip(header, rows[k], strict=True)), lines[k],
                               present, path))
        else:
            sites.append(Site(k, names[k], lines[k],
                              **{key: column[k] for key, column in values.items()
                                 if column[k] is not None}))
    return SiteTable(path, tuple(sites), hashlib.sha256(path.read_bytes()).hexdigest(),
                     has_positions=_POSITION in present, has_pressures=_PRESSURE in present)


def _fast_values(frame: pd.DataFrame, groups) -> tuple[dict, np.ndarray]:
    """Every column's numbers (None where a group is blank) and a mask of the rows that
    need the row-by-row check: any cell that is not a finite number in range, a group
    only partly given, or a temperature without a pressure."""
    n = len(frame)
    bad = np.zeros(n, bool)
    values = {}
    given = {}
    for group in (_REQUIRED[1:], *groups):
        blank = np.column_stack([frame[r.name].str.strip().eq("").to_numpy()
                                 for r in group])
        present = ~blank.all(axis=1)
        if group is not _REQUIRED[1:]:
            bad |= present & blank.any(axis=1)
        else:
            present = np.ones(n, bool)
        given[group[0].name] = present
        for rule in group:
            number = pd.to_numeric(frame[rule.name].str.strip(), errors="coerce").to_numpy(
                float)
            with np.errstate(invalid="ignore"):
                ok = np.isfinite(number)
                if rule.low is not None:
                    ok &= number > rule.low if rule.low_open else number >= rule.low
                if rule.high is not None:
                    ok &= number < rule.high if rule.high_open else number <= rule.high
            bad |= present & ~ok
            values[rule.name] = [float(v) if p else None for v, p in zip(number, present)]
    if "temperature_c" in given:
        bad |= given["temperature_c"] & ~given.get("pressure_gpa", np.zeros(n, bool))
    if "pt_correlation" in given:
        bad |= given["pt_correlation"] & ~given["temperature_c"]
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
                    error=str(err))
    return Site(index, name, line, **values)


def _number_or_none(text) -> float | None:
    try:
        value = float(str(text).strip())
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _row_values(row: dict, line: int, groups, path: Path) -> dict:
    """The numbers of one row, checked by the table rules (raises `InputError`)."""
    rules = list(_REQUIRED[1:])
    for group in groups:
        blank = [rule for rule in group if not row[rule.name].strip()]
        if len(blank) == len(group):
            continue  # this site has no such measurement
        if blank:
            given = ", ".join(r.name for r in group if r not in blank)
            raise InputError(f"empty cell beside {given}; give both or leave both empty",
                             file=path, row=line, column=blank[0].name)
        rules.extend(group)
    names = {rule.name for rule in rules}
    if "temperature_c" in names and "pressure_gpa" not in names:
        raise InputError("a temperature needs the melting pressure it goes with; give "
                         "pressure_gpa and pressure_sigma_gpa too", file=path, row=line,
                         column="temperature_c")
    if "pt_correlation" in names and "temperature_c" not in names:
        raise InputError("a P-T error correlation needs the temperature it goes with; "
                         "give temperature_c and temperature_sigma_c too", file=path,
                         row=line, column="pt_correlation")
    frame = pd.DataFrame({rule.name: [row[rule.name]] for rule in rules})
    data = validate_frame(frame, rules, file=path, lines=[line]).data
    return {rule.name: float(data[rule.name].iloc[0]) for rule in rules}


def site_observations(site: Site, settings) -> list:
    """The observation sets of one site (crust, and melting pressure if measured).

    Parameters
    ----------
    site : Site
        A site without `Site.error`.
    settings : SurveySettings
        Comparison choices and model errors.
    """
    crust = CrustalThickness.from_frame(
        pd.DataFrame({"site": [site.name], "thickness_km": [site.thickness_km],
                      "sigma_km": [site.sigma_km]}),
        model_error=settings.crust_model_error, thickness_of=settings.thickness_of)
    if not site.has_pressure:
        return [crust]
    table = {"sample": [site.name], "pressure_gpa": [site.pressure_gpa],
             "sigma_gpa": [site.pressure_sigma_gpa]}
    if site.temperature_c is not None:
        table.update(temperature_c=[site.temperature_c], sigma_c=[site.temperature_sigma_c])
    if site.pt_correlation is not None:
        table.update(pt_correlation=[site.pt_correlation])
    pressure = MeltingPressure.from_frame(
        pd.DataFrame(table), model_error=settings.pressure_model_error,
        equilibration=settings.equilibration, path_points=settings.path_points,
        temperature_model_error=settings.temperature_model_error)
    return [crust, pressure]
