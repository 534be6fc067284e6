"""docs/worked_example.md runs: its ```python blocks, in order, in one namespace.

Like the docstring examples (tests/test_doctests.py), the worked example is executed so
that it cannot drift from the code. It runs in a temporary working folder.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

PAGE = Path(__file__).resolve().parents[1] / "docs" / "worked_example.md"
_BLOCK = re.compile(r"^```python\n(.*?)^```", re.MULTILINE | re.DOTALL)


def blocks(text: str) -> list[str]:
    """The ```python code blocks of a Markdown text, in order."""
    return _BLOCK.findall(text)


def test_blocks_are_found():
    found = blocks("text\n```python\nx = 1\n```\n```bash\nls\n```\n```python\ny = 2\n```\n")
    assert found == ["x = 1\n", "y = 2\n"]


@pytest.mark.slow  # about 45 s of CPU (fit, three nested-sampling runs, a survey)
def test_worked_example_runs(tmp_path, monkeypatch):
    pytest.importorskip("arviz")
    pytest.importorskip("nautilus")
    monkeypatch.chdir(tmp_path)
    code = blocks(PAGE.read_text(encoding="utf-8"))
    assert len(code) >= 6  # study, fit, ArviZ, compare, survey, tidy-up
    namespace = {"__name__": "worked_example"}
    for number, block in enumerate(code, start=1):
        try:
            exec(compile(block, f"{PAGE.name}, block {number}", "exec"), namespace)
        except Exception as err:  # name the block that failed
            raise AssertionError(f"{PAGE.name}, block {number} failed: {err!r}") from err
