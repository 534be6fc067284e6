"""The command line starts without the heavy libraries; ``--version`` reports the install."""

import subprocess
import sys
from importlib import metadata

import pytest
from lidmelt.cli import main

# Loaded only by the command that needs them (sampler, HDF5, tables, plotting).
HEAVY = ("emcee", "h5py", "pandas", "scipy", "matplotlib", "corner", "tqdm")


def _loaded_after(statement: str) -> list[str]:
    code = (f"import sys; {statement}; "
            f"print(' '.join(m for m in {HEAVY!r} if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    return out.stdout.split()


@pytest.mark.parametrize("statement", [
    "import lidmelt.cli",
    "import lidmelt",
    "import lidmelt.inversion",
    "from lidmelt.cli import build_parser; build_parser().format_help()",
    # a table of melting columns needs only numpy
    "import contextlib, io; from lidmelt.cli import main; "
    "f = io.StringIO(); ctx = contextlib.redirect_stdout(f); ctx.__enter__(); "
    "main(['column']); ctx.__exit__(None, None, None)",
])
def test_start_up_imports_no_heavy_library(statement):
    assert _loaded_after(statement) == []


def test_lazy_names_still_resolve():
    # The lazy package namespace hands out the same objects as the defining modules.
    assert _loaded_after("import lidmelt; lidmelt.Study") != []  # Study needs pandas
    import lidmelt
    from lidmelt.inversion.study import Study
    assert lidmelt.Study is Study
    assert "fit" in dir(lidmelt)
    with pytest.raises(AttributeError, match="no attribute 'nonsense'"):
        lidmelt.nonsense  # noqa: B018


def test_every_public_name_of_the_lazy_packages_resolves():
    import lidmelt
    from lidmelt import forward, inversion

    for package in (lidmelt, inversion, forward):
        for name in package.__all__:
            assert getattr(package, name) is not None, (package.__name__, name)


def test_version_matches_the_installed_metadata(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0
    assert capsys.readouterr().out == f"lidmelt {metadata.version('lidmelt')}\n"
