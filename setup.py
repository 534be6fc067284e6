"""Package discovery for lidmelt (all metadata is in pyproject.toml).

The repository root is the package `lidmelt`; every folder below it holding an
``__init__.py`` is a subpackage, found here so that a new one can never be missing from a
built wheel (tests/test_packaging.py builds one and imports every module from it). This
file sits in the package's folder but is not part of the package: `_BuildPy` leaves it out.
"""

from setuptools import find_packages, setup
from setuptools.command.build_py import build_py

_NOT_INSTALLED = ["tests", "tests.*", "benchmarks", "benchmarks.*", "docs", "docs.*",
                  "build", "build.*", "dist", "dist.*"]


class _BuildPy(build_py):
    def find_package_modules(self, package, package_dir):
        modules = super().find_package_modules(package, package_dir)
        return [m for m in modules if not (package == "lidmelt" and m[1] == "setup")]


setup(
    packages=["lidmelt", *(f"lidmelt.{name}" for name in
                           find_packages(".", exclude=_NOT_INSTALLED))],
    cmdclass={"build_py": _BuildPy},
)
