"""Bundled demo study: an invented rift segment ("Orvanta Rift, Vantrebel segment").

The place names, sites, samples and numbers are invented for demonstration; they were
simulated from lidmelt's forward model (Katz 2003 hydrous melting, 1-D column) at a
potential temperature of 1400 degC, a 46 km lid, 150 ppm source water and a zero solidus
offset, with Gaussian noise of the listed uncertainties added. They describe no real place.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

__all__ = ["DEMO_STUDY", "DEMO_TRUTH", "SURVEY_DEMO", "SURVEY_TRUTH", "scenarios_path",
           "study_path", "survey_paths"]

#: Folder of the demo study inside this package.
DEMO_STUDY = "orvanta_rift"

#: Values the demo data were simulated at (for checks; a real study has no such thing).
DEMO_TRUTH = {
    "potential_temperature": 1400.0,
    "lithosphere_thickness": 46.0,
    "water": 150.0,
    "solidus_offset": 0.0,
}


#: Folder of the survey demo (an invented ridge, 24 sites).
SURVEY_DEMO = "kelvaro_ridge"

#: Shared value the survey demo was simulated at (each site's lid is in its README).
SURVEY_TRUTH = {"potential_temperature": 1380.0, "water": 150.0, "solidus_offset": 0.0}


def survey_paths() -> tuple[Path, Path]:
    """Paths of the survey demo's study file and sites table.

    Examples
    --------
    >>> [p.name for p in survey_paths()]
    ['study.toml', 'sites.csv']
    """
    folder = resources.files(__name__).joinpath(SURVEY_DEMO)
    return Path(str(folder.joinpath("study.toml"))), Path(str(folder.joinpath("sites.csv")))


def study_path() -> Path:
    """Path of the demo study file ``study.toml``.

    Returns
    -------
    pathlib.Path
        The study file; its observation tables sit beside it.

    Examples
    --------
    >>> study_path().name
    'study.toml'
    """
    return Path(str(resources.files(__name__).joinpath(DEMO_STUDY, "study.toml")))


def scenarios_path() -> Path:
    """Path of the demo scenario study ``scenarios.toml`` (lid free / thinned / unthinned).

    The same data and base study as `study_path`, with three ``[[scenarios]]`` for
    ``lidmelt compare``.

    Examples
    --------
    >>> scenarios_path().name
    'scenarios.toml'
    """
    return Path(str(resources.files(__name__).joinpath(DEMO_STUDY, "scenarios.toml")))
