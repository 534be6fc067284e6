"""lidmelt forward model: decompression melting of peridotite beneath a lithospheric lid.

Results are scientific estimates that depend on the chosen melting parameterization.
"""

from ._validation import (
    EXCLUSIVE_LOWER_BOUND,
    PARAMETER_DOMAIN,
    PARAMETER_UNITS,
    DomainError,
    in_domain,
)
from .quantities import QUANTITIES, Quantity, quantity
from .adiabat import MAX_PRESSURE, depth_per_pressure, solid_adiabat
from .column import MELTING_REGIONS, MeltColumn, MeltingPath, melt_column
from .parameterizations import (
    PARAMETERIZATIONS,
    Katz2003,
    KatzConstants,
    McKenzieBickle1988,
    McKenzieBickleConstants,
    MeltFraction,
    Parameterization,
    ThermoConstants,
    get_parameterization,
)
from .trace import TraceElements, pooled_trace_elements

__all__ = [
    "EXCLUSIVE_LOWER_BOUND",
    "MELTING_REGIONS",
    "MAX_PRESSURE",
    "PARAMETERIZATIONS",
    "QUANTITIES",
    "PARAMETER_DOMAIN",
    "PARAMETER_UNITS",
    "DomainError",
    "Katz2003",
    "KatzConstants",
    "McKenzieBickle1988",
    "McKenzieBickleConstants",
    "MeltColumn",
    "MeltFraction",
    "MeltingPath",
    "Parameterization",
    "Quantity",
    "ThermoConstants",
    "TraceElements",
    "depth_per_pressure",
    "get_parameterization",
    "in_domain",
    "melt_column",
    "pooled_trace_elements",
    "quantity",
    "solid_adiabat",
]
