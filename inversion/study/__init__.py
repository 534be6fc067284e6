"""The study: what a user asks lidmelt to fit.

- `file`: the study file (TOML) -> `Study` with its model, parameter and sampler settings;
- `priors`: the prior distributions a parameter may take;
- `scenarios`: competing scenarios of one study (``[[scenarios]]``, ``[comparison]``).

Names are imported on first use (see `lidmelt._lazy`).
"""

from ..._lazy import lazy_exports

__getattr__, __dir__ = lazy_exports(__name__, globals(), {
    **dict.fromkeys(("DEFAULT_FIXED", "PARAMETERS", "PARAMETER_UNITS", "BlockParameter",
                     "ErrorParameter", "ModelSettings", "SamplerSettings", "Study"), ".file"),
    **dict.fromkeys(("PRIOR_NAMES", "LogUniform", "Normal", "Prior", "TruncatedNormal",
                     "Uniform", "prior_from_spec"), ".priors"),
    **dict.fromkeys(("BASE_NAME", "ComparisonSettings", "Scenario", "ScenarioSet",
                     "read_scenarios", "scenarios_from_mapping"), ".scenarios"),
})

__all__ = ["BASE_NAME", "DEFAULT_FIXED", "PARAMETERS", "PARAMETER_UNITS", "PRIOR_NAMES",
           "BlockParameter", "ComparisonSettings", "ErrorParameter", "LogUniform", "ModelSettings", "Normal",
           "Prior", "SamplerSettings", "Scenario", "ScenarioSet", "Study", "TruncatedNormal",
           "Uniform", "prior_from_spec", "read_scenarios", "scenarios_from_mapping"]
