"""The ``[survey]`` table of a study file: its keys, checks and settings.

Kept in the study layer because `Study.from_file` checks the table it keeps
(`Study.survey`); `inversion.survey.settings` loads a study for a survey.

A survey study file is an ordinary study file (model, priors, sampler) plus a
``[survey]`` table; its own ``[[observations]]`` blocks are not used, because every
site's data come from the sites table. Keys of ``[survey]``:

``equilibration``
    ``"top"``, ``"pooled"`` or ``"path"``: where the sites' melting pressures are
    compared with the model (see ``inversion.observations.pressure``). Required when the
    sites table has pressures.
``tp_spread``
    Optional prior table, e.g. ``{ prior = "uniform", min = 0, max = 150 }`` (degC).
    With it, ``--mode joint`` is hierarchical: each site's potential temperature is drawn
    from a normal distribution around the area mean with this spread.
``thickness_of``
    ``"crust"`` (default) or ``"melt"``: what the sites' thickness is compared with.
``crust_model_error``, ``pressure_model_error``, ``temperature_model_error``,
``rare_earth_model_error``
    Added in quadrature to every site's sigma (km, GPa, degC, and for the rare-earth
    ratios a relative error in log units, 0.1 = 10 %; default 0). Each is a
    number or, as in a study's observation blocks, a prior such as
    ``{ prior = "log-uniform", min = 0.05, max = 2.0 }``: then it is a free parameter of
    every site (its own value per site), sampled or integrated with the site's other
    parameters and reported in its rows.
``rare_earth_source``, ``rare_earth_transition``
    The source and the spinel-garnet transition of every site's rare-earth ratios, as the
    ``source`` and ``transition`` of a ``rare_earths`` block (default
    ``"workman_hart_2005"`` and ``[2.5, 3.0]`` GPa).
``path_points``
    Path intervals for ``"path"`` and ``"pooled"`` temperatures (default 64).
``grid_points``
    Size of each site's posterior grid (default 40 000 nodes, 200 per axis in 2-D); a
    site whose ln Z error exceeds 0.05 nats on it is computed again with the nodes per
    axis doubled, at most twice.
``tp_nodes``
    Nodes of the potential-temperature axis shared by all sites in joint mode
    (default 351, equally spaced over the prior).
"""

from __future__ import annotations

from dataclasses import dataclass

from ..errors import InputError, suggest
from ..observations import EQUILIBRATION, THICKNESS_OF
from ...forward.trace import DEFAULT_TRANSITION
from ..observations.model_error import parse_error_setting
from ..observations.rare_earths import parse_source, parse_transition
from .priors import Prior, prior_from_spec

__all__ = ["SPREAD", "SurveySettings", "parse_survey_table"]

#: Name of the hierarchical spread of site potential temperatures (degC).
SPREAD = "tp_spread"
_SPREAD_DOMAIN = (0.0, 1000.0)  # degC; a spread beyond the whole melting range is no model
_KEYS = ("equilibration", "tp_spread", "thickness_of", "crust_model_error",
         "pressure_model_error", "temperature_model_error", "rare_earth_model_error",
         "rare_earth_source", "rare_earth_transition", "path_points", "grid_points",
         "tp_nodes")


@dataclass(frozen=True)
class SurveySettings:
    """Validated content of ``[survey]`` (see the module docstring for each key)."""

    equilibration: str | None = None
    tp_spread: Prior | None = None
    thickness_of: str = "crust"
    crust_model_error: float | Prior = 0.0
    pressure_model_error: float | Prior = 0.0
    temperature_model_error: float | Prior = 0.0
    rare_earth_model_error: float | Prior = 0.0
    rare_earth_source: str | dict = "workman_hart_2005"
    rare_earth_transition: tuple[float, float] = DEFAULT_TRANSITION
    path_points: int = 64
    grid_points: int = 40_000
    tp_nodes: int = 351

    @property
    def hierarchical(self) -> bool:
        """Whether joint mode draws site temperatures around the area mean."""
        return self.tp_spread is not None

    def record(self) -> dict:
        """Plain-value form for the run manifest (and its settings hash)."""
        out = {}
        for key in _KEYS:
            value = getattr(self, key)
            out[key] = value.describe() if isinstance(value, Prior) else value
        return out


def parse_survey_table(table) -> SurveySettings:
    """Validate the ``[survey]`` mapping; every `InputError` names its ``survey.*`` key."""
    if not isinstance(table, dict):
        raise InputError(f"'survey' must be a table written [survey], got {table!r}",
                         key="survey")
    for key in table:
        if key not in _KEYS:
            raise InputError(f"unknown key '{key}'" + suggest(str(key), _KEYS),
                             key=f"survey.{key}")
    values = {}
    choices = (("equilibration", EQUILIBRATION), ("thickness_of", tuple(THICKNESS_OF)))
    for key, valid in choices:
        if key in table:
            if table[key] not in valid:
                raise InputError(f"unknown value {table[key]!r}" + suggest(str(table[key]),
                                 valid), key=f"survey.{key}")
            values[key] = table[key]
    for key in ("crust_model_error", "pressure_model_error", "temperature_model_error",
                "rare_earth_model_error"):
        if key in table:
            values[key] = parse_error_setting(table[key], f"survey.{key}")
    for key, low, high in (("path_points", 8, 1024), ("grid_points", 1_000, 4_000_000),
                           ("tp_nodes", 41, 4_001)):
        if key in table:
            values[key] = _whole(table[key], low, high, f"survey.{key}")
    if "rare_earth_source" in table:
        values["rare_earth_source"] = parse_source(table["rare_earth_source"],
                                                   "survey.rare_earth_source")
    if "rare_earth_transition" in table:
        values["rare_earth_transition"] = parse_transition(table["rare_earth_transition"],
                                                           "survey.rare_earth_transition")
    if SPREAD in table:
        values[SPREAD] = _spread_prior(table[SPREAD])
    return SurveySettings(**values)


def _spread_prior(spec) -> Prior:
    prior = prior_from_spec(SPREAD, spec, where=f"survey.{SPREAD}", domain=_SPREAD_DOMAIN)
    if not isinstance(prior, Prior):
        raise InputError("the spread must be free: give a prior, not a value (for no "
                         "spread leave tp_spread out)", key=f"survey.{SPREAD}")
    return prior


def _whole(value, low: int, high: int, key: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise InputError(f"{value!r} must be a whole number from {low} to {high}", key=key)
    return int(value)
