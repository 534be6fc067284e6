"""A built wheel holds every module of the source tree, and each one imports from it.

The package list comes from discovery (setup.py), so a new subpackage cannot be left out;
this test would catch it if it were (an editable install would not show the gap).
"""

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
_NOT_INSTALLED = {"tests", "benchmarks", "docs", "build", "dist", ".venv", ".pp", ".git"}


def _source_modules() -> set[str]:
    tracked = subprocess.run(["git", "ls-files", "*.py"], cwd=ROOT, capture_output=True,
                             text=True, check=True).stdout.split()
    names = set()
    for rel in map(Path, tracked):
        if rel.parts[0] in _NOT_INSTALLED or rel.as_posix() == "setup.py":
            continue
        names.add("lidmelt/" + rel.as_posix())
    return names


def _copy_of_the_tree(target: Path) -> Path:
    """The repository's files (tracked or new, not ignored), without any old build/."""
    listed = subprocess.run(["git", "ls-files", "-co", "--exclude-standard"], cwd=ROOT,
                            capture_output=True, text=True, check=True).stdout.split()
    for rel in listed:
        if (ROOT / rel).is_file():
            (target / rel).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(ROOT / rel, target / rel)
    return target


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    source = _copy_of_the_tree(tmp_path_factory.mktemp("source"))
    subprocess.run([sys.executable, "-m", "pip", "wheel", str(source), "--no-deps",
                    "--no-build-isolation", "--quiet", "-w", str(out)], check=True,
                   capture_output=True)
    (built,) = out.glob("lidmelt-*.whl")
    return built


def test_the_wheel_holds_every_module_and_the_demo_data(wheel):
    held = set(zipfile.ZipFile(wheel).namelist())
    missing = sorted(_source_modules() - held)
    assert not missing, f"not in the wheel: {missing}"
    assert "lidmelt/demo_data/orvanta_rift/study.toml" in held
    assert not any(name.startswith(("lidmelt/tests/", "tests/")) for name in held)
    assert "lidmelt/setup.py" not in held  # the build script is not part of the package


def test_every_module_imports_from_the_wheel(wheel, tmp_path):
    site = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(site)
    modules = sorted(name[:-3].replace("/", ".").removesuffix(".__init__")
                     for name in _source_modules() if not name.endswith("__main__.py"))
    script = (
        "import importlib, sys\n"
        f"sys.path.insert(0, {str(site)!r})\n"
        f"for name in {modules!r}:\n"
        "    module = importlib.import_module(name)\n"
        f"    assert module.__file__.startswith({str(site)!r}), module.__file__\n"
    )
    run = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         cwd=tmp_path)
    assert run.returncode == 0, run.stderr[-2000:]
