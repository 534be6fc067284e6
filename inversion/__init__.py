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
    "InputError": ".errors", "NotConvergedWarning": ".errors",
    "OutputConflict": ".errors", "PosteriorWarning": ".errors", "WriteError": ".errors",
    "OUTPUT_FILES": ".results.writers",
    "DERIVED": ".fitting.log_posterior", "PARAMETERS": ".fitting.log_posterior",
    "UNITS": ".fitting.log_posterior", "LogPosterior": ".fitting.log_posterior",
    "KINDS": ".observations", "ObservationSet": ".observations",
    "SUMMARY_COLUMNS": ".results.posterior", "Posterior": ".results.posterior",
    "fit": ".fitting.run",
    "LogUniform": ".study.priors", "Normal": ".study.priors", "Prior": ".study.priors",
    "TruncatedNormal": ".study.priors", "Uniform": ".study.priors",
    "prior_from_spec": ".study.priors",
    "ChainResult": ".fitting.sampler", "assess_chain": ".fitting.sampler",
    "read_chain": ".fitting.sampler", "run_chain": ".fitting.sampler",
    "BlockParameter": ".study.file", "ErrorParameter": ".study.file", "ModelSettings": ".study.file",
    "SamplerSettings": ".study.file", "Study": ".study.file",
    "ComparisonSettings": ".study.scenarios", "Scenario": ".study.scenarios",
    "ScenarioSet": ".study.scenarios", "read_scenarios": ".study.scenarios",
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
    "BlockParameter",
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
