"""Where a fit came from: the fingerprint a resume must match, and the content of run.json.

The fingerprint names every input that decides the chain: the bytes of the study file,
the study's settings as built (a scenario made in code has no file of its own), the
content of every observation table as read, the seed and the lidmelt version. A resume
is refused when any entry differs, and the message names the entries.
"""

from __future__ import annotations

import hashlib
import platform
import sys
from importlib import metadata
from pathlib import Path

__all__ = ["lidmelt_version", "run_fingerprint", "run_record", "study_inputs"]

_PACKAGES = ("lidmelt", "numpy", "scipy", "pandas", "emcee", "h5py", "matplotlib", "corner",
             "tqdm")


def _sha(data: str | bytes) -> str:
    return hashlib.sha256(data.encode("utf-8") if isinstance(data, str) else data).hexdigest()


def run_fingerprint(study, seed: int) -> dict[str, str]:
    """What a resumed run must share with the stored one: label -> hash or value.

    Parameters
    ----------
    study : inversion.Study
    seed : int
        The master seed of the run.

    Returns
    -------
    dict of str to str
        Labels read as the subject of a sentence ("the table crust.csv").
    """
    fingerprint = {}
    if study.source is not None:
        fingerprint[f"the study file {Path(study.source).name}"] = str(study.file_hash)
    settings = (study.model, sorted(study.priors.items()), sorted(study.fixed.items()),
                study.sampler)
    fingerprint["the study settings"] = _sha(repr(settings))
    names = [block.name for block in study.observations]
    for index, block in enumerate(study.observations, start=1):
        label = f"the table {block.name}"
        if names.count(block.name) > 1:
            label += f" (observations[{index}])"
        content = block.data.to_csv(index=False, lineterminator="\n")
        fingerprint[label] = _sha(f"{block.kind}\n{block.describe()}\n{content}")
    fingerprint["the seed"] = str(int(seed))
    fingerprint["the lidmelt version"] = str(_version("lidmelt"))
    return fingerprint


def study_inputs(study) -> list[Path]:
    """The files a study was read from: its study file and observation tables."""
    files = [] if study.source is None else [Path(study.source)]
    return files + [block.file for block in study.observations if block.file is not None]


def run_record(posterior) -> dict:
    """Provenance of the run (the content of run.json)."""
    study = posterior.study
    return {
        "study_name": study.name,
        "study_file": None if study.source is None else str(Path(study.source).resolve()),
        "study_sha256": study.file_hash,
        "seed": posterior.seed,
        "free_parameters": list(posterior.names),
        "fixed_parameters": {k: float(v) for k, v in study.fixed.items()},
        "parameterization": study.model.parameterization,
        "melting_region": study.model.melting_region,
        **posterior.run_info,
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "versions": {name: _version(name) for name in _PACKAGES},
    }


def lidmelt_version() -> str:
    """The installed lidmelt version, or ``"0+unknown"`` when run from a source tree."""
    return _version("lidmelt") or "0+unknown"


def _version(name: str) -> str | None:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:  # e.g. run from a source tree, not installed
        return None
