"""Run the docstring examples of every installed lidmelt module.

The examples are collected from the installed package (not from the source folders), so
they run under the module names users import: ``lidmelt.forward.column`` and so on.
"""

import doctest
import importlib
import pkgutil

import pytest

import lidmelt


def _module_names() -> list[str]:
    names = ["lidmelt"]
    for info in pkgutil.walk_packages(lidmelt.__path__, prefix="lidmelt."):
        # __main__ runs the command line; setup.py is the build script, not installed
        if not info.name.endswith("__main__") and info.name != "lidmelt.setup":
            names.append(info.name)
    return sorted(names)


@pytest.mark.parametrize("name", _module_names())
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0, f"{result.failed} docstring example(s) failed in {name}"
