"""Competing scenarios of one study: the ``[[scenarios]]`` tables of a study file.

Each scenario is the base study with some parameters and/or model settings replaced::

    [[scenarios]]
    name = "unthinned"                       # letters, digits, - and _ (a folder name)
    description = "The plate was never thinned: lid held at 100 km"
    prior_odds = 1.0                         # optional, > 0 (default 1)
    [scenarios.parameters]                   # optional: same syntax as [parameters]
    lithosphere_thickness = { value = 100.0 }
    [scenarios.model]                        # optional: same keys as [model]
    parameterization = "katz2003"

Every override is validated like the base study (`Study.with_overrides`), and every
mistake raises an `InputError` naming the file, the key (``scenarios[2].parameters...``)
and its line. A study without scenarios is one scenario, named ``base``. An optional
``[comparison]`` table sets the cost and precision of the evidence (`ComparisonSettings`).
A plain ``lidmelt fit`` of such a file fits the base study and ignores both tables.
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from numbers import Real
from os import PathLike
from pathlib import Path

from ..errors import InputError
from .file import Study
from .keys import check_keys, key_line, read_study_file

__all__ = [
    "BASE_NAME",
    "ComparisonSettings",
    "Scenario",
    "ScenarioSet",
    "read_scenarios",
    "scenarios_from_mapping",
]

#: Name of the single scenario of a study without ``[[scenarios]]``.
BASE_NAME = "base"
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]{0,63}$")
_SCENARIO_KEYS = ("name", "description", "prior_odds", "parameters", "model")


@dataclass(frozen=True)
class ComparisonSettings:
    """Cost and precision of the evidence of every scenario (``[comparison]`` table).

    Parameters
    ----------
    live_points : int
        Live points of the nested sampler (nautilus ``n_live``). Default 500; more
        points give a smaller evidence error and cost more time.
    effective_samples : int
        Effective sample size at which nested sampling stops (nautilus ``n_eff``).
        Default 3000; the evidence error falls roughly as its inverse square root.
    grid_points : int
        Size of the quadrature grid of the cross-check (scenarios with at most 3 free
        parameters). Default 125000 (50 nodes per axis in 3-D; at most 200 per axis).
    """

    live_points: int = 500
    effective_samples: int = 3000
    grid_points: int = 125_000

    def __post_init__(self) -> None:
        for name, low in (("live_points", 50), ("effective_samples", 100),
                          ("grid_points", 1000)):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < low:
                raise InputError(f"{value!r} must be a whole number >= {low}",
                                 key=f"comparison.{name}")


@dataclass(frozen=True)
class Scenario:
    """One competing scenario: a name, a description, prior odds and its study.

    Attributes
    ----------
    name : str
        File-safe name (letters, digits, ``-``, ``_``); the scenario's result folder.
    description : str
        One line in words.
    prior_odds : float
        Prior weight relative to the other scenarios (> 0; normalised over them).
    study : inversion.Study
        The base study with the overrides applied (validated).
    overrides : dict
        ``{"parameters": {...}, "model": {...}}`` as written in the study file.
    """

    name: str
    description: str
    prior_odds: float
    study: Study
    overrides: dict = field(default_factory=dict)

    @property
    def n_free(self) -> int:
        """Number of free parameters (free model errors included)."""
        return len(self.study.sampled_parameters)


@dataclass(frozen=True)
class ScenarioSet:
    """The scenarios of a study file, their base study and the comparison settings.

    Attributes
    ----------
    base : inversion.Study
    scenarios : tuple of Scenario
        In file order; names unique (ignoring case).
    settings : ComparisonSettings
    input_hashes : dict of str to str
        sha256 of the study file and of every observation table it reads (file name ->
        hex digest); a resumed comparison refuses to continue when any of them changed.
    """

    base: Study
    scenarios: tuple[Scenario, ...]
    settings: ComparisonSettings = field(default_factory=ComparisonSettings)
    input_hashes: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        object.__setattr__(self, "scenarios", tuple(self.scenarios))
        if not self.scenarios:
            raise InputError("a comparison needs at least one scenario", key="scenarios")
        check_names(self.names)

    @classmethod
    def from_study(cls, study: Study,
                   settings: ComparisonSettings | None = None) -> ScenarioSet:
        """The study as its only scenario (``base``), with default settings."""
        return cls(study, (_base_scenario(study),), settings or ComparisonSettings(),
                   input_hashes(study))

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(s.name for s in self.scenarios)


def read_scenarios(path: str | PathLike[str], base: Study | None = None) -> ScenarioSet:
    """Read a study file with its ``[[scenarios]]`` and ``[comparison]`` tables.

    Parameters
    ----------
    path : str or path-like
        The study file (TOML).
    base : Study, optional
        The study the scenarios modify (default: the study of the file). Pass one read
        from the same, unchanged file and then changed in code (e.g. simulated data).

    Returns
    -------
    ScenarioSet

    Raises
    ------
    InputError
        Anything `Study.from_file` refuses, and every broken scenario rule: a missing or
        duplicate name, a name that is not file-safe, prior odds <= 0, an unknown key,
        an override that is not a valid parameter or model setting.

    Examples
    --------
    >>> from lidmelt import demo_data
    >>> found = read_scenarios(demo_data.scenarios_path())
    >>> found.names
    ('lid-free', 'thinned', 'unthinned')
    >>> found.scenarios[2].study.fixed["lithosphere_thickness"]
    100.0
    """
    path = Path(path)
    base = Study.from_file(path) if base is None else base
    raw, text, config = read_study_file(path)
    if hashlib.sha256(raw).hexdigest() != base.file_hash:
        raise InputError("the study file changed after its study was read; read it again",
                         file=path)
    try:
        return scenarios_from_mapping(config, base)
    except InputError as err:
        raise InputError(err.message, file=path, key=err.key,
                         line=err.line or key_line(text, err.key)) from None


def scenarios_from_mapping(config: Mapping, base: Study) -> ScenarioSet:
    """Build the scenarios of an already-parsed study-file mapping on its base study.

    Parameters
    ----------
    config : mapping
        The whole study-file mapping; its ``scenarios`` list and ``comparison`` table are
        read (other tables are the base study's).
    base : inversion.Study
        The study built from the same mapping.
    """
    settings_tbl = config.get("comparison", {})
    if not isinstance(settings_tbl, dict):
        raise InputError(f"'comparison' must be a table written [comparison], got "
                         f"{settings_tbl!r}", key="comparison")
    check_keys(settings_tbl, tuple(f.name for f in dataclasses.fields(ComparisonSettings)),
                "comparison")
    settings = ComparisonSettings(**settings_tbl)
    blocks = config.get("scenarios")
    if blocks is None:
        return ScenarioSet(base, (_base_scenario(base),), settings, input_hashes(base))
    if not isinstance(blocks, list) or not blocks or not all(isinstance(b, dict)
                                                             for b in blocks):
        raise InputError("write each scenario as a [[scenarios]] table with name and "
                         "description", key="scenarios")
    scenarios, seen = [], {}
    for index, spec in enumerate(blocks, start=1):
        scenario = _parse_scenario(spec, f"scenarios[{index}]", base)
        folded = scenario.name.casefold()
        if folded in seen:
            raise InputError(f"scenario name '{scenario.name}' is used twice (also by "
                             f"scenarios[{seen[folded]}], ignoring case); names must be "
                             "unique", key=f"scenarios[{index}].name")
        seen[folded] = index
        scenarios.append(scenario)
    return ScenarioSet(base, tuple(scenarios), settings, input_hashes(base))


def input_hashes(study: Study) -> dict[str, str]:
    """sha256 of the study file and of each observation table (path -> hex digest)."""
    out = {}
    if study.source is not None:
        out[str(Path(study.source).resolve())] = study.file_hash or _sha256(study.source)
    for block in study.observations:
        if block.file is not None:
            out[str(Path(block.file).resolve())] = _sha256(block.file)
    return out


def _sha256(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _base_scenario(study: Study) -> Scenario:
    return Scenario(BASE_NAME, study.description or "the study as written", 1.0, study)


def _parse_scenario(spec: Mapping, where: str, base: Study) -> Scenario:
    check_keys(spec, _SCENARIO_KEYS, where)
    name = _scenario_name(spec.get("name"), f"{where}.name")
    description = spec.get("description")
    if not isinstance(description, str) or not description.strip():
        raise InputError(f"scenario '{name}' needs a description: one line of text in "
                         "quotes", key=f"{where}.description")
    odds = _prior_odds(spec.get("prior_odds", 1.0), f"{where}.prior_odds")
    parameters = _sub_table(spec, "parameters", where)
    model = _sub_table(spec, "model", where)
    try:
        study = base.with_overrides(parameters, **model)
    except InputError as err:
        raise _in_scenario(err, where, name) from None
    study = dataclasses.replace(study, name=f"{base.name}: scenario {name}",
                                description=description)
    return Scenario(name, description, odds, study,
                    {"parameters": dict(parameters), "model": dict(model)})


def _scenario_name(value, key: str) -> str:
    if not isinstance(value, str) or not value:
        raise InputError("every scenario needs a name = \"...\" (letters, digits, - and _)",
                         key=key)
    if not _NAME.match(value):
        raise InputError(f"scenario name {value!r} must start with a letter or digit and "
                         "hold only letters, digits, '-' and '_' (at most 64): it names "
                         "the scenario's result folder", key=key)
    return value


def _prior_odds(value, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, Real) or not math.isfinite(value):
        raise InputError(f"{value!r} must be a finite number", key=key)
    if value <= 0:
        raise InputError(f"prior odds {value:g} must be > 0 (1 = as likely as any other "
                         "scenario with odds 1)", key=key)
    return float(value)


def _sub_table(spec: Mapping, name: str, where: str) -> dict:
    value = spec.get(name, {})
    if not isinstance(value, dict):
        raise InputError(f"'{name}' must be a table written [{where.split('[')[0]}."
                         f"{name}], got {value!r}", key=f"{where}.{name}")
    return value


def _in_scenario(err: InputError, where: str, name: str) -> InputError:
    """Re-address an override error to the scenario's own keys."""
    key = err.key or ""
    if key.split(".")[0] in ("parameters", "model"):
        return InputError(err.message, key=f"{where}.{key}")
    return InputError(f"scenario '{name}': {err.message}", key=key or where)


def check_names(names: Sequence[str]) -> None:
    """Raise `InputError` unless `names` are file-safe and unique (ignoring case)."""
    seen = set()
    for name in names:
        _scenario_name(name, "scenarios.name")
        if name.casefold() in seen:
            raise InputError(f"scenario name '{name}' is used twice", key="scenarios.name")
        seen.add(name.casefold())
