"""Rare-earth elements of melts pooled along lidmelt's melting paths.

Incremental non-modal fractional melting (Shaw 1970) of spinel and garnet lherzolite;
equations, tables and assumptions in docs/model.md, "Rare-earth elements along the
melting path". Results are scientific estimates that depend on the chosen coefficients.
"""

from .melting import (
    DEFAULT_INTERVALS,
    DEFAULT_TRANSITION,
    TraceElements,
    melt_along_path,
    pooled_trace_elements,
)
from .fast import fast_trace_elements
from .tables import ELEMENTS, MINERALS, SOURCES, chondrite, source_composition

__all__ = [
    "DEFAULT_INTERVALS",
    "DEFAULT_TRANSITION",
    "ELEMENTS",
    "MINERALS",
    "SOURCES",
    "TraceElements",
    "chondrite",
    "fast_trace_elements",
    "melt_along_path",
    "pooled_trace_elements",
    "source_composition",
]
