"""Surveys: many sites of a study area under one model, on local cores or a Dask cluster.

`survey` runs every site of a sites table (`read_sites`) under the model, priors and
sampler settings of a study file with a ``[survey]`` table (`load_survey_study`), either
independently or jointly with one area-wide potential temperature (optionally
hierarchical, with a spread of site temperatures). See `inversion.survey.run`.

Results are scientific estimates that depend on the chosen melting parameterization and
the other modelling assumptions; they are no basis on their own for hazard or resource
decisions.
"""

from .executors import DaskExecutor, LocalExecutor, make_executor
from .joint import AreaPosterior, combine_hierarchical, combine_shared, tp_axis
from .run import MODES, SurveyResult, survey
from .settings import SurveySettings, load_survey_study
from .sites import Site, SiteTable, read_sites

__all__ = [
    "MODES",
    "AreaPosterior",
    "DaskExecutor",
    "LocalExecutor",
    "Site",
    "SiteTable",
    "SurveyResult",
    "SurveySettings",
    "combine_hierarchical",
    "combine_shared",
    "load_survey_study",
    "make_executor",
    "read_sites",
    "survey",
    "tp_axis",
]
