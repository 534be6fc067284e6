"""Melting parameterizations behind one interface, and their registry."""

from .base import MeltFraction, Parameterization, ThermoConstants
from .katz2003 import Katz2003, KatzConstants
from .mckenzie_bickle1988 import McKenzieBickle1988, McKenzieBickleConstants

__all__ = [
    "PARAMETERIZATIONS",
    "Katz2003",
    "KatzConstants",
    "McKenzieBickle1988",
    "McKenzieBickleConstants",
    "MeltFraction",
    "Parameterization",
    "ThermoConstants",
    "get_parameterization",
]

PARAMETERIZATIONS = {"katz2003": Katz2003, "mckenzie-bickle1988": McKenzieBickle1988}


def get_parameterization(spec=None) -> Parameterization:
    """Return a parameterization from a name, an instance, or None (Katz 2003).

    Examples
    --------
    >>> get_parameterization("mckenzie-bickle1988").title
    'McKenzie & Bickle (1988)'
    """
    if spec is None:
        return Katz2003()
    if isinstance(spec, Parameterization):
        return spec
    try:
        return PARAMETERIZATIONS[str(spec).lower()]()
    except KeyError:
        names = ", ".join(sorted(PARAMETERIZATIONS))
        raise ValueError(f"unknown parameterization {spec!r}; choose one of: {names}") from None
