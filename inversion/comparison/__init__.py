"""Comparing competing scenarios of a study: Bayesian evidence and PSIS-LOO.

`compare` takes a study file with ``[[scenarios]]`` (see `inversion.study.scenarios`) and, for
every scenario, estimates the evidence with an error bar (`evidence`: nested sampling,
cross-checked by quadrature where there are at most 3 free parameters), samples the
posterior as ``lidmelt fit`` does, and computes the leave-one-out predictive accuracy
(`loo`). The returned `Comparison` gives the table of evidence.csv, the posterior
probability of each scenario, the warnings, and writes the result folder.

The nested sampler (nautilus) and ArviZ are imported only when a comparison runs, so that
``import lidmelt`` stays light.
"""

from .checks import FitCheck, fit_check
from .evidence import DISAGREEMENT_SIGMAS, EvidenceEstimate, scenario_evidence
from .loo import PARETO_K_WARN, LooEstimate, elpd_differences, loo_fixed, loo_from_draws
from .nested import NestedResult, nested_evidence
from .quadrature import QuadratureResult, box_from_samples, quadrature_evidence
from .ranking import evidence_words, scenario_probabilities
from .result import EVIDENCE_COLUMNS, Comparison, ScenarioResult
from .run import ComparisonWarning, compare, evaluate_scenario

__all__ = [
    "DISAGREEMENT_SIGMAS",
    "EVIDENCE_COLUMNS",
    "PARETO_K_WARN",
    "Comparison",
    "ComparisonWarning",
    "EvidenceEstimate",
    "FitCheck",
    "LooEstimate",
    "NestedResult",
    "QuadratureResult",
    "ScenarioResult",
    "box_from_samples",
    "compare",
    "elpd_differences",
    "evaluate_scenario",
    "evidence_words",
    "fit_check",
    "loo_fixed",
    "loo_from_draws",
    "nested_evidence",
    "quadrature_evidence",
    "scenario_evidence",
    "scenario_probabilities",
]
