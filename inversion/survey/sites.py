"""The sites table of a survey (SITES.csv): one row per site.

Columns: ``site`` (name), ``thickness_km`` (>= 0) and ``sigma_km`` (> 0, 1 sigma);
optional ``position_km`` (distance along the study area, for the profile figure);
optional ``pressure_gpa`` with ``pressure_sigma_gpa``; optional ``temperature_c`` with
``temperature_sigma_c`` (only beside a pressure). Other columns are kept as text.

The file's structure (header, field counts, names) is checked first: a mistake there
stops the survey with an `InputError`. Each row's values are then checked on their own
with the same rules as the observation tables, so a bad value fails only its site, with a
message naming the file, the line and the column. In the optional column pairs a row may
leave both cells empty (that site has no such measurement), not one of them.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import pandas as pd

from ..errors import InputError
from ..observations import (
    PRESSURE_RANGE,
    TEMPERATURE_RANGE,
    CrustalThickness,
    MeltingPressure,
)
from ..observations.tables import ColumnRule, _read_rows, _rules_for, validate_frame

__all__ = ["Site", "SiteTable", "read_sites", "site_observations"]

_REQUIRED = (
    ColumnRule("site", numeric=False),
    ColumnRule("thickness_km", low=0.0, unit="km", why="a thickness cannot be negative"),
    ColumnRule("sigma_km", low=0.0, low_open=True, unit="km",
               why="a 1-sigma uncertainty must be positive"),
)
_POSITION = (ColumnRule("position_km", unit="km"),)
_PRESSURE = (
    ColumnRule("pressure_gpa", low=PRESSURE_RANGE[0], high=PRESSURE_RANGE[1], unit="GPa"),
    ColumnRule("pressure_sigma_gpa", low=0.0, low_open=True, unit="GPa",
               why="a 1-sigma uncertainty must be positive"),
)
_TEMPERATURE = (
    ColumnRule("temperature_c", low=TEMPERATURE_RANGE[0], high=TEMPERATURE_RANGE[1],
               unit="degC", why="outside this range the unit is probably not degC"),
    ColumnRule("temperature_sigma_c", low=0.0, low_open=True, unit="degC",
               why="a 1-sigma uncertainty must be positive"),
)
_GROUPS = (_POSITION, _PRESSURE, _TEMPERATURE)


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


def read_sites(path: str | PathLike[str]) -> SiteTable:
    """Read and check a sites table (see the module docstring).

    Raises
    ------
    InputError
        Missing file, bad header, a missing column (or half of a column pair), wrong
        field counts, an empty site name or a name used twice.
    """
    path = Path(path)
    if not path.is_file():
        why = "is a folder, not a table" if path.is_dir() else "not found"
        raise InputError(f"sites file {why}; check the path", file=path)
    header, header_line, rows, lines = _read_rows(path)
    rules = _rules_for(header, header_line, _REQUIRED, _GROUPS, path)
    present = [group for group in _GROUPS if group[0] in rules]
    names = validate_frame(pd.DataFrame({"site": [r[header.index("site")] for r in rows]}),
                           _REQUIRED[:1], file=path, lines=lines).data["site"]
    _check_unique(list(names), lines, path)
    sites = tuple(_site(k, dict(zip(header, row, strict=True)), line, present, path)
                  for k, (row, line) in enumerate(zip(rows, lines, strict=True)))
    return SiteTable(path, sites, hashlib.sha256(path.read_bytes()).hexdigest(),
                     has_positions=_POSITION in present, has_pressures=_PRESSURE in present)


def _check_unique(names: list[str], lines, path: Path) -> None:
    first: dict[str, int] = {}
    for name, line in zip(names, lines, strict=True):
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
    pressure = MeltingPressure.from_frame(
        pd.DataFrame(table), model_error=settings.pressure_model_error,
        equilibration=settings.equilibration, path_points=settings.path_points,
        temperature_model_error=settings.temperature_model_error)
    return [crust, pressure]
