"""The names lidmelt no longer uses never come back: CLI help, study keys, CSV headers,
figure text and docs are scanned for them."""

from __future__ import annotations

import argparse
import re
import subprocess
import tomllib
from pathlib import Path

import pytest
from lidmelt import demo_data, inversion
from lidmelt.inversion.results import figures
from lidmelt.cli import build_parser, main
from lidmelt.inversion.study.file import _MODEL_KEYS, _SAMPLER_KEYS, _STUDY_KEYS, _TOP_KEYS
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.text import Text

ROOT = Path(__file__).resolve().parents[1]

# Old parameter names, switches and values (whitespace may break a phrase across lines).
OLD = re.compile(r"upwelling[\s_]+ratio|solidus[\s_]+shift|compare_to|\bgeometry\b"
                 r"|[\"']ridge[\"']|melting[-_]region[\s=]+ridge", re.IGNORECASE)


def _assert_clean(text: str, where: str) -> None:
    found = OLD.search(text)
    assert found is None, f"old name {found.group(0)!r} in {where}"


def _subparsers(parser: argparse.ArgumentParser):
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            yield from action.choices.items()


def test_cli_help_of_every_subcommand():
    parser = build_parser()
    _assert_clean(parser.format_help(), "lidmelt --help")
    for name, sub in _subparsers(parser):
        _assert_clean(sub.format_help(), f"lidmelt {name} --help")


def test_study_file_keys_and_demo_study():
    keys = " ".join([*_TOP_KEYS, *_STUDY_KEYS, *_MODEL_KEYS, *_SAMPLER_KEYS,
                     *inversion.PARAMETERS])
    for kind in inversion.KINDS.values():
        keys += " " + " ".join(kind.option_keys)
    _assert_clean(keys, "study-file keys")
    study = tomllib.loads(demo_data.study_path().read_text(encoding="utf-8"))
    _assert_clean(repr(study), "the demo study")


def test_csv_headers_of_column_and_fit_outputs(capsys, tmp_path):
    assert main(["column", "--format", "csv"]) == 0
    _assert_clean(capsys.readouterr().out.splitlines()[0], "lidmelt column CSV header")
    study = inversion.Study.from_file(demo_data.study_path())
    quick = inversion.fit(study.with_sampler(walkers=16, ess_target=200, tau_multiple=15,
                                             check_interval=50), quiet=True)
    headers = [",".join(quick.samples.columns), ",".join(quick.summary()["parameter"]),
               ",".join(quick.derived_summary()["parameter"])]
    _assert_clean("\n".join(headers), "summary/derived/samples CSV")
    for make in (figures.corner_figure, figures.fit_figure, figures.pt_figure):
        fig = make(quick)
        FigureCanvasAgg(fig).draw()
        texts = [t.get_text() for t in fig.findobj(Text)]
        _assert_clean("\n".join(texts), f"{make.__name__} text")


def _tracked_text_files() -> list[Path]:
    out = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True)
    if out.returncode != 0:
        pytest.skip("not a git checkout")
    keep = (".md", ".py", ".toml", ".csv", ".txt", "")
    here = Path(__file__).resolve()
    return [ROOT / p for p in out.stdout.split() if Path(p).suffix in keep
            and (ROOT / p).is_file() and (ROOT / p).resolve() != here]


def test_docs_code_and_data_of_the_repository():
    files = _tracked_text_files()
    assert any(p.name == "README.md" for p in files)
    for path in files:
        _assert_clean(path.read_text(encoding="utf-8", errors="replace"), str(path))


def test_no_merge_conflict_markers_in_tracked_files():
    # a marker left by a merge is neither code nor prose (common practice: git's markers)
    marker = re.compile(r"^(<{7} |>{7} |={7}$)", re.M)
    for path in _tracked_text_files():
        text = path.read_text(encoding="utf-8", errors="replace")
        assert not marker.search(text), f"{path}: merge conflict marker"
