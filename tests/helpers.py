"""Small studies for the tests: the demo study with a cheaper sampler."""

from __future__ import annotations

import shutil
from pathlib import Path

from lidmelt import demo_data

DEMO = demo_data.study_path().parent

#: A sampler section that converges in a few hundred steps (statistics are not tested).
QUICK = ("walkers = 16\nseed = 4\nstart = \"map\"\ness_target = 300\ntau_multiple = 25\n"
         "check_interval = 50\n")


def small_study(folder: Path, *, sampler: str = "", basalts: str | None = None,
                parameters: str | None = None, extra: str = "", crust: str | None = None,
                ) -> Path:
    """A copy of the demo study in `folder` with a cheaper sampler (and optional edits)."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in (("crust.csv", crust), ("basalts.csv", basalts)):
        if text is None:
            shutil.copy(DEMO / name, folder / name)
        else:
            (folder / name).write_text(text)
    text = (DEMO / "study.toml").read_text()
    head, _ = text.split("[sampler]")
    if parameters is not None:
        before, rest = head.split("[parameters]")
        _, after = rest.split("[[observations]]", 1)
        head = f"{before}[parameters]\n{parameters}\n[[observations]]{after}"
    path = folder / "study.toml"
    path.write_text(head + extra + "[sampler]\n" + (sampler or QUICK))
    return path
