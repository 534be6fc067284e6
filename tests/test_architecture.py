"""The package's shape: no import cycles, and the layers import one way only.

Every import counts, including those inside functions (a lazy import still ties two
modules together). The layering is the contributor guide's architecture section.
"""

import ast
from functools import cache
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
_SKIP = {"tests", "benchmarks", "docs", "build", "dist", ".venv", ".pp", ".git"}


def _modules() -> dict[str, Path]:
    found = {}
    for path in ROOT.rglob("*.py"):
        rel = path.relative_to(ROOT)
        if rel.parts[0] in _SKIP or rel.as_posix() == "setup.py":
            continue
        parts = ["lidmelt", *rel.with_suffix("").parts]
        if parts[-1] == "__init__":
            parts = parts[:-1]
        found[".".join(parts)] = path
    return found


def _imports(name: str, path: Path, modules) -> set[str]:
    """The lidmelt modules `name` imports (a package import counts as its __init__)."""
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    out = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                target = ".".join([*base, *([node.module] if node.module else [])])
            else:
                target = node.module or ""
            for alias in node.names:  # `from . import x` may name a submodule
                sub = f"{target}.{alias.name}"
                out.add(sub if sub in modules else target)
        elif isinstance(node, ast.Import):
            out.update(a.name for a in node.names)
    return {m for m in out if m in modules and m != name}


@cache
def _graph():
    modules = _modules()
    return {name: _imports(name, path, modules) for name, path in modules.items()}


def _cycle(graph) -> list[str] | None:
    """One import cycle (as a list of modules), or None.

    A package whose ``__init__`` re-exports lazily (`lidmelt._lazy`) names its modules in
    strings, so those are no edges here: they load only when a name is used.
    """
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node):
        state[node] = 1
        stack.append(node)
        for nxt in sorted(graph[node]):
            if state.get(nxt) == 1:
                return stack[stack.index(nxt):] + [nxt]
            if nxt not in state and (found := visit(nxt)):
                return found
        state[node] = 2
        stack.pop()
        return None

    for node in sorted(graph):
        if node not in state and (found := visit(node)):
            return found
    return None


def test_the_module_scan_sees_the_package():
    graph = _graph()
    assert "lidmelt.forward.column" in graph
    assert "lidmelt.inversion.fitting.sampler" in graph["lidmelt.inversion.fitting.run"]


def test_no_import_cycle():
    assert _cycle(_graph()) is None


def test_the_cycle_finder_finds_a_cycle():
    # a check that cannot fail would prove nothing
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]


# lower layers never import higher ones (index = layer; same layer may import each other)
_LAYERS = [
    ("lidmelt._atomic", "lidmelt._lazy"),
    ("lidmelt.forward",),
    ("lidmelt.inversion.errors", "lidmelt.inversion.outputs"),
    ("lidmelt.inversion.study", "lidmelt.inversion.petrology",
     "lidmelt.inversion.observations"),
    ("lidmelt.inversion.fitting",),
    ("lidmelt.inversion.results",),
    ("lidmelt.inversion.comparison", "lidmelt.inversion.survey"),
    ("lidmelt.cli",),
]


def _layer(module: str) -> int | None:
    for i, prefixes in enumerate(_LAYERS):
        if any(module == p or module.startswith(p + ".") for p in prefixes):
            return i
    return None


@pytest.mark.parametrize("module", sorted(_graph()))
def test_layers_import_downward(module):
    mine = _layer(module)
    if mine is None:
        return
    upward = [m for m in _graph()[module]
              if (other := _layer(m)) is not None and other > mine
              and not (module == "lidmelt.inversion.fitting.run" and m.startswith(
                  "lidmelt.inversion.results"))]  # fit returns the Posterior it builds
    assert not upward, f"{module} imports a higher layer: {upward}"
