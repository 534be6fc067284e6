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

    comparison = lidmelt.compare("scenarios.toml", seed=1)   # [[scenarios]] of a study
    comparison.table()             # evidence, probability and LOO of each scenario
    comparison.save("comparison")
"""

from .._lazy import lazy_exports

# Imported on first use: the sampler (emcee, h5py) and pandas load only when needed.
_WHERE = {
    "InputError": "._errors", "NotConvergedWarning": "._errors",
    "OutputConflict": "._errors", "PosteriorWarning": "._errors", "WriteError": "._errors",
    "OUTPUT_FILES": "._outputs",
    "DERIVED": ".model", "PARAMETERS": ".model", "UNITS": ".model", "LogPosterior": ".model",
    "KINDS": ".observations", "ObservationSet": ".observations",
    "SUMMARY_COLUMNS": ".posterior", "Posterior": ".posterior", "fit": ".posterior",
    "LogUniform": ".priors", "Normal": ".priors", "Prior": ".priors",
    "TruncatedNormal": ".priors", "Uniform": ".priors", "prior_from_spec": ".priors",
    "ChainResult": ".sampler", "assess_chain": ".sampler", "read_chain": ".sampler",
    "run_chain": ".sampler",
    "ErrorParameter": ".study", "ModelSettings": ".study", "SamplerSettings": ".study",
    "Study": ".study",
    "ComparisonSettings": ".scenarios", "Scenario": ".scenarios",
    "ScenarioSet": ".scenarios", "read_scenarios": ".scenarios",
    "Comparison": ".comparison", "compare": ".comparison",
}
__getattr__, __dir__ = lazy_exports(__name__, globals(), _WHERE)

__all__ = [
    "DERIVED",
    "KINDS",
    "OUTPUT_FILES",
    "PARAMETERS",
    "SUMMARY_COLUMNS",
    "UNITS",
    "ChainResult",
    "Comparison",
    "ComparisonSettings",
    "ErrorParameter",
    "InputError",
    "LogPosterior",
    "LogUniform",
    "ModelSettings",
    "Normal",
    "NotConvergedWarning",
    "ObservationSet",
    "OutputConflict",
    "Posterior",
    "PosteriorWarning",
    "Prior",
    "SamplerSettings",
    "Scenario",
    "ScenarioSet",
    "Study",
    "TruncatedNormal",
    "Uniform",
    "WriteError",
    "assess_chain",
    "compare",
    "fit",
    "prior_from_spec",
    "read_chain",
    "read_scenarios",
    "run_chain",
]
