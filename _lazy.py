"""Lazy re-exports: a package's public names are imported on first use.

``import lidmelt`` (and ``lidmelt --help``) stay quick: the sampler, the HDF5 library,
pandas and the plotting stack load only when a name that needs them is first used.
"""

from __future__ import annotations

import importlib

__all__ = ["lazy_exports"]


def lazy_exports(package: str, namespace: dict, where: dict[str, str]):
    """Module ``__getattr__`` and ``__dir__`` serving names from submodules of `package`.

    Parameters
    ----------
    package : str
        Dotted name of the package (its ``__name__``).
    namespace : dict
        The package's ``globals()``; a name is stored there once imported.
    where : dict of str to str
        Public name -> relative submodule that defines it (e.g. ``".column"``).

    Returns
    -------
    tuple of callables
        ``(__getattr__, __dir__)`` to assign in the package's ``__init__``.
    """

    def __getattr__(name: str):
        try:
            module = where[name]
        except KeyError:
            raise AttributeError(f"module {package!r} has no attribute {name!r}") from None
        value = getattr(importlib.import_module(module, package), name)
        namespace[name] = value  # later look-ups no longer come here
        return value

    def __dir__() -> list[str]:
        return sorted(set(namespace) | set(where))

    return __getattr__, __dir__
