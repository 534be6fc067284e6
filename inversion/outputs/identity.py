"""Where a run came from: the fingerprint a resume must match, and the versions it ran with.

A fingerprint is a mapping label -> value (a hash or a short value), the labels read as
the subject of a sentence ("the table crust.csv"). Every resumable command stores one
(fit in its checkpoint, compare in comparison.json, survey in survey.json) and
`check_same_run` compares it with the new run's, naming every entry that differs. Each
fingerprint ends with the lidmelt version (`package_version`, the one version look-up of
the package).

A fit's fingerprint (`run_fingerprint`) names every input that decides the chain: the
bytes of the study file, the study's settings as built (a scenario made in code has no
file of its own), the content of every observation table as read and the seed.
"""

from __future__ import annotations

import hashlib
import platform
import sys
from collections.abc import Mapping
from importlib import metadata
from os import PathLike
from pathlib import Path

from ..errors import OutputConflict

__all__ = ["LIDMELT_VERSION", "check_same_run", "digest", "files_fingerprint",
           "lidmelt_version", "package_version", "run_fingerprint", "run_record", "study_inputs",
           "with_version"]

#: The fingerprint label of the lidmelt version.
LIDMELT_VERSION = "the lidmelt version"

_PACKAGES = ("lidmelt", "numpy", "scipy", "pandas", "emcee", "h5py", "matplotlib", "corner",
             "tqdm")


def digest(data: str | bytes) -> str:
    """sha256 hex digest of bytes, or of text as UTF-8."""
    return hashlib.sha256(data.encode("utf-8") if isinstance(data, str) else data).hexdigest()



def package_version(name: str) -> str | None:
    """The installed version of the distribution `name`, or None (e.g. a source tree)."""
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return None


def with_version(fingerprint: Mapping[str, str]) -> dict[str, str]:
    """`fingerprint` with the lidmelt version added as its last entry."""
    return {**fingerprint, LIDMELT_VERSION: str(package_version("lidmelt"))}


def files_fingerprint(hashes: Mapping[str, str], *,
                      study_file: str | PathLike[str] | None = None) -> dict[str, str]:
    """Fingerprint entries of input files (path -> sha256), labelled by file name.

    The study file is "the study file NAME", the others "the table NAME"; two inputs of
    the same name are labelled by their full paths.
    """
    names = [Path(path).name for path in hashes]
    study = None if study_file is None else Path(study_file).resolve()
    entries = {}
    for path, sha in sorted(hashes.items()):
        shown = Path(path).name if names.count(Path(path).name) == 1 else str(path)
        what = "the study file" if Path(path).resolve() == study else "the table"
        entries[f"{what} {shown}"] = str(sha)
    return entries


def check_same_run(stored: Mapping | None, current: Mapping[str, str], *, since: str,
                   file: str | PathLike[str]) -> None:
    """Refuse a resume unless the stored fingerprint equals `current`.

    Parameters
    ----------
    stored, current : mapping of str to str
        Fingerprints (`stored` None or not a mapping: an unreadable record).
    since : str
        Ends the message, e.g. ``"the interrupted comparison was started"``.
    file : path-like
        The stored run's folder.

    Raises
    ------
    OutputConflict
        Naming every entry that differs (reason ``"changed"``).
    """
    if not isinstance(stored, Mapping):
        raise OutputConflict("cannot resume: the stored run has no readable fingerprint",
                             reason="changed", file=file)
    changed = [label for label, value in current.items() if stored.get(label) != value]
    changed += [label for label in stored if label not in current]
    if changed:
        listed = changed[0] if len(changed) == 1 else (
            ", ".join(changed[:-1]) + " and " + changed[-1])
        raise OutputConflict(f"cannot resume: {listed} changed since {since}",
                             reason="changed", file=file)


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
    fingerprint["the study settings"] = digest(repr(settings))
    names = [block.name for block in study.observations]
    for index, block in enumerate(study.observations, start=1):
        label = f"the table {block.name}"
        if names.count(block.name) > 1:
            label += f" (observations[{index}])"
        content = block.data.to_csv(index=False, lineterminator="\n")
        fingerprint[label] = digest(f"{block.kind}\n{block.describe()}\n{content}")
    fingerprint["the seed"] = str(int(seed))
    return with_version(fingerprint)


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
        "versions": {name: package_version(name) for name in _PACKAGES},
    }


def lidmelt_version() -> str:
    """The installed lidmelt version, or ``"0+unknown"`` when run from a source tree."""
    return package_version("lidmelt") or "0+unknown"
