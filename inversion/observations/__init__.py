"""Observation kinds: tables of measurements and their likelihoods.

`KINDS` maps the study-file ``kind`` of an ``[[observations]]`` block to its class.
Adding a kind: subclass `ObservationSet` in a new module, then register it here
(DEVELOPERS.md, "Adding an observation kind"); tests/test_kind_contract.py then runs it
through every part of the interface.
"""

from .basalt_analyses import BasaltAnalyses
from .base import NO_MELT_SLOPE, ObservationSet, Panel, PatternPanel, gaussian_logpdf, melting_distance
from .crust import THICKNESS_OF, CrustalThickness
from .pressure import (
    EQUILIBRATION,
    PRESSURE_RANGE,
    TEMPERATURE_RANGE,
    MeltingPressure,
)
from .rare_earths import RATIOS, RareEarthRatios
from .tables import ColumnRule, Table, read_table, validate_frame

__all__ = [
    "BasaltAnalyses",
    "THICKNESS_OF",
    "EQUILIBRATION",
    "KINDS",
    "NO_MELT_SLOPE",
    "PRESSURE_RANGE",
    "RATIOS",
    "RareEarthRatios",
    "TEMPERATURE_RANGE",
    "ColumnRule",
    "CrustalThickness",
    "MeltingPressure",
    "ObservationSet",
    "Panel",
    "PatternPanel",
    "Table",
    "gaussian_logpdf",
    "melting_distance",
    "read_table",
    "validate_frame",
]

#: Study-file ``kind`` -> observation class.
KINDS: dict[str, type[ObservationSet]] = {
    CrustalThickness.kind: CrustalThickness,
    MeltingPressure.kind: MeltingPressure,
    BasaltAnalyses.kind: BasaltAnalyses,
    RareEarthRatios.kind: RareEarthRatios,
}
