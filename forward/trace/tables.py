"""The packaged data tables of the rare-earth model (``data/*.csv``), read once.

Every number in the CSV files has its source beside it (docs/model.md, "Rare-earth
elements along the melting path"). The files ship with the package; a malformed file is a
packaging fault and raises ``ValueError`` naming the file, line and column.
"""

from __future__ import annotations

import csv
from functools import cache
from importlib import resources

import numpy as np

__all__ = ["ELEMENTS", "MINERALS", "chondrite", "mineralogy", "partition_coefficients",
           "source_composition", "SOURCES"]

ELEMENTS = ("La", "Ce", "Nd", "Sm", "Eu", "Gd", "Dy", "Er", "Yb", "Lu")
MINERALS = ("ol", "opx", "cpx", "sp", "gt")
SOURCES = ("workman_hart_2005", "salters_stracke_2004")
FACIES = ("spinel", "garnet")


def _rows(name: str) -> list[tuple[int, dict]]:
    text = resources.files(__package__).joinpath("data", name).read_text(encoding="utf-8")
    reader = csv.DictReader(text.splitlines())
    return [(i + 2, row) for i, row in enumerate(reader)]  # line 1 is the header


def _number(name, line, row, column) -> float:
    try:
        value = float(row[column])
    except (TypeError, ValueError):
        raise ValueError(f"{name}, line {line}, column {column!r}: not a number "
                         f"({row.get(column)!r})") from None
    if not np.isfinite(value):
        raise ValueError(f"{name}, line {line}, column {column!r}: not finite")
    return value


def _filled(name, table, keys) -> np.ndarray:
    missing = [k for k in keys if k not in table]
    if missing:
        raise ValueError(f"{name}: no row for {missing[0]}")
    return np.array([table[k] for k in keys])


@cache
def partition_coefficients() -> np.ndarray:
    """Mineral/melt partition coefficients, shape (5 minerals, 10 elements), MINERALS order."""
    name, table = "partition_coefficients.csv", {}
    for line, row in _rows(name):
        value = _number(name, line, row, "coefficient")
        if value <= 0.0:
            raise ValueError(f"{name}, line {line}, column 'coefficient': must be > 0")
        table[(row["mineral"], row["element"])] = value
    keys = [(m, e) for m in MINERALS for e in ELEMENTS]
    return _filled(name, table, keys).reshape(len(MINERALS), len(ELEMENTS))


@cache
def mineralogy() -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """``{facies: (mode, reaction)}``, each shape (5,) in MINERALS order.

    Modes are normalised to sum to 1 (the published garnet-lherzolite mode sums to 1.010)
    and so are the reaction coefficients (mass of each mineral entering unit mass of melt;
    negative: the mineral crystallises).
    """
    name, table = "mineralogy.csv", {}
    for line, row in _rows(name):
        table[(row["facies"], row["quantity"], row["mineral"])] = _number(name, line, row,
                                                                          "value")
    out = {}
    for facies in FACIES:
        mode = _filled(name, table, [(facies, "mode", m) for m in MINERALS])
        reaction = _filled(name, table, [(facies, "reaction", m) for m in MINERALS])
        if np.any(mode < 0.0) or mode.sum() <= 0.0 or reaction.sum() <= 0.0:
            raise ValueError(f"{name}: {facies} mode must be >= 0 and the mode and the "
                             "reaction must sum to more than 0")
        out[facies] = (mode / mode.sum(), reaction / reaction.sum())
    return out


@cache
def _compositions(name: str, key: str) -> dict[str, np.ndarray]:
    tables: dict[str, dict] = {}
    for line, row in _rows(name):
        value = _number(name, line, row, "ppm")
        if value <= 0.0:
            raise ValueError(f"{name}, line {line}, column 'ppm': must be > 0")
        tables.setdefault(row.get(key, ""), {})[row["element"]] = value
    return {k: _filled(name, v, ELEMENTS) for k, v in tables.items()}


def source_composition(name: str) -> np.ndarray:
    """A tabulated mantle source (ppm), shape (10,), ELEMENTS order; names in ``SOURCES``."""
    table = _compositions("sources.csv", "name")
    if name not in table:
        raise ValueError(f"unknown source {name!r}; choose one of {', '.join(SOURCES)} "
                         "or give 10 concentrations (ppm)")
    return table[name].copy()


def chondrite() -> np.ndarray:
    """CI chondrite (Sun & McDonough 1989), ppm, shape (10,), ELEMENTS order."""
    return _compositions("chondrite.csv", "")[""].copy()
