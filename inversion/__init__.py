"""lidmelt inversion: posteriors of mantle potential temperature and lid thickness.

A study (TOML file: model settings, priors, observation tables, sampler settings) is read
with `Study.from_file`, fitted with `fit`, and the returned `Posterior` gives the
summary tables, samples, diagnostics and a result folder (`Posterior.save`).

Results are scientific estimates that depend on the chosen melting parameterization and
on the other modelling assumptions; they are no basis on their own for hazard or resource
decisions.

Examples
--------
::

    import lidmelt
    study = lidmelt.Study.from_file("demo_data/orvanta_rift/study.toml")
    posterior = lidmelt.fit(study, seed=1)
    posterior.summary()            # DataFrame, one row per free parameter
    posterior.save("results")      # every output file, written atomically
"""

from ._errors import InputError, NotConvergedWarning
from ._outputs import OUTPUT_FILES
from .model import DERIVED, PARAMETERS, UNITS, LogPosterior
from .observations import KINDS, ObservationSet
from .posterior import SUMMARY_COLUMNS, Posterior, fit
from .priors import LogUniform, Normal, Prior, TruncatedNormal, Uniform, prior_from_spec
from .sampler import ChainResult, assess_chain, read_chain, run_chain
from .study import ErrorParameter, ModelSettings, SamplerSettings, Study

__all__ = [
    "DERIVED",
    "KINDS",
    "OUTPUT_FILES",
    "PARAMETERS",
    "SUMMARY_COLUMNS",
    "UNITS",
    "ChainResult",
    "ErrorParameter",
    "InputError",
    "LogPosterior",
    "LogUniform",
    "ModelSettings",
    "Normal",
    "NotConvergedWarning",
    "ObservationSet",
    "Posterior",
    "Prior",
    "SamplerSettings",
    "Study",
    "TruncatedNormal",
    "Uniform",
    "assess_chain",
    "fit",
    "prior_from_spec",
    "read_chain",
    "run_chain",
]
