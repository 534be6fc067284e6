"""A study: model settings, priors, fixed values, observation sets and sampler settings.

A study is read from a TOML file (`Study.from_file`); every path in it is relative to the
file. Everything is validated here, at the boundary, before any sampling starts: each
mistake raises an `InputError` whose one-line message names the file, the key (and the
line where it can be found), the bad value and the rule, with the nearest valid key for a
misspelt one. The objects only store what they were given; nothing is computed.

Parameter names are the keyword names of ``forward.melt_column``, in the canonical order
of `PARAMETERS`. Tp and lid thickness must be given; the others default to fixed values
(`DEFAULT_FIXED`: water 0 ppm, active upwelling 1, solidus offset 0 degC).
"""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import math
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from numbers import Real
from os import PathLike
from pathlib import Path

from ... import forward

from ..errors import InputError, suggest
from ..observations import KINDS, ObservationSet
from .keys import check_keys, key_line, read_study_file
from .priors import Prior, TruncatedNormal, prior_from_spec
from .seeds import check_seed

__all__ = [
    "DEFAULT_FIXED",
    "PARAMETERS",
    "PARAMETER_UNITS",
    "BlockParameter",
    "ErrorParameter",
    "ModelSettings",
    "SamplerSettings",
    "Study",
]

#: Every numeric input of forward.melt_column a study can make free, in canonical order.
PARAMETERS: tuple[str, ...] = (
    "potential_temperature",
    "lithosphere_thickness",
    "water",
    "active_upwelling",
    "solidus_offset",
)
#: Unit of each parameter ("-" = dimensionless).
PARAMETER_UNITS: dict[str, str] = {name: forward.PARAMETER_UNITS[name] for name in PARAMETERS}
#: Fixed value of a parameter the study file does not mention.
DEFAULT_FIXED: dict[str, float] = {"water": 0.0, "active_upwelling": 1.0, "solidus_offset": 0.0}
_REQUIRED = ("potential_temperature", "lithosphere_thickness")

_TOP_KEYS = ("study", "model", "parameters", "observations", "sampler")
# Read by inversion.study.scenarios (`lidmelt compare`); a plain fit ignores them.
_COMPARISON_KEYS = ("scenarios", "comparison")
# Read by inversion.survey (`lidmelt survey`); kept on the study as `Study.survey`.
_SURVEY_KEY = "survey"
_STUDY_KEYS = ("name", "description")
_START = ("prior", "map")


@dataclass(frozen=True)
class ModelSettings:
    """Forward-model choices shared by every evaluation of a study.

    Parameters
    ----------
    parameterization : str
        Melting parameterization name: ``"katz2003"`` (hydrous, default) or
        ``"mckenzie-bickle1988"`` (dry).
    melting_region : str
        ``"column"`` (1-D upwelling column, default) or ``"triangle"`` (triangular melting
        region beneath a spreading ridge).
    crust_density, mantle_density : float
        kg/m^3 (defaults 2900 and 3300); used for the crust mass balance and the depth
        scale P = rho g z.
    """

    parameterization: str = "katz2003"
    melting_region: str = "column"
    crust_density: float = 2900.0
    mantle_density: float = 3300.0

    def __post_init__(self) -> None:
        _check_choice(self.parameterization, tuple(forward.PARAMETERIZATIONS),
                      "model.parameterization", None)
        _check_choice(self.melting_region, tuple(forward.MELTING_REGIONS), "model.melting_region", None)
        for name in ("crust_density", "mantle_density"):
            value = _number(getattr(self, name), f"model.{name}", None)
            _check_range(value, forward.PARAMETER_DOMAIN[name], f"model.{name}", None,
                         "kg/m^3")
            object.__setattr__(self, name, value)

    @property
    def supports_water(self) -> bool:
        """Whether the parameterization takes a water content (hydrous melting)."""
        return bool(forward.PARAMETERIZATIONS[self.parameterization].supports_water)


@dataclass(frozen=True)
class BlockParameter:
    """A setting of one observation block given a prior, sampled with the parameters.

    A free model error (``model_error``, ``temperature_model_error``) or a kind's own
    sampled setting (``olivine_fo``, ``fe3_fraction`` of ``basalt_analyses``); each kind
    lists them in ``parameter_options``.

    Attributes
    ----------
    name : str
        ``<block label>.<option>``, e.g. ``"basalts.model_error"``: the block label is its
        table's file stem (the kind for a block built in code), with any character other
        than letters, digits, ``_`` and ``-`` replaced by ``_``, and ``-<block number>``
        (1-based) appended when two blocks would share a label. Used in summary.csv,
        samples.csv and the figures; file-safe and unique within a study.
    block : int
        Index of the block in `Study.observations` (0-based).
    option : str
        The block's key, e.g. ``"model_error"`` or ``"olivine_fo"``.
    prior : Prior
    unit : str
        Unit of the setting (a model error has the unit of the data it is added to).
    """

    name: str
    block: int
    option: str
    prior: Prior
    unit: str


#: The earlier name of `BlockParameter` (free model errors were the only kind).
ErrorParameter = BlockParameter


def block_parameters(observations) -> tuple[BlockParameter, ...]:
    """The sampled settings of a sequence of observation blocks, in block order."""
    labels = [_block_label(block) for block in observations]
    labels = [f"{label}-{i + 1}" if labels.count(label) > 1 else label
              for i, label in enumerate(labels)]
    out = []
    for index, (block, label) in enumerate(zip(observations, labels, strict=True)):
        for option, prior in block.free_options.items():
            out.append(BlockParameter(f"{label}.{option}", index, option, prior,
                                      block.option_unit(option)))
    return tuple(out)


#: The earlier name of `block_parameters`.
error_parameters = block_parameters


def _block_label(block: ObservationSet) -> str:
    by_kind = block.file is None or getattr(block, "from_sites_file", False)
    stem = block.kind if by_kind else block.file.stem
    return re.sub(r"[^A-Za-z0-9_-]", "_", stem) or block.kind


@dataclass(frozen=True)
class SamplerSettings:
    """How the posterior is sampled (emcee ensemble; see `inversion.fitting.sampler`).

    Parameters
    ----------
    walkers : int
        Number of ensemble walkers (>= 2 x number of free parameters). Default 32.
    seed : int
        Seed of every random choice of the run (0 <= seed < 2**32). Default 1.
    ess_target : int
        Effective sample size per parameter required to stop. Default 2000.
    tau_multiple : float
        Required chain length in integrated autocorrelation times. Default 50.
    max_steps : int
        Step cap; stopping there flags the run "not converged". Default 20000.
    check_interval : int
        Steps between convergence checks and chain writes. Default 250.
    start : str
        ``"map"`` (default: a small ball around the maximum a posteriori point, found by
        several Nelder-Mead searches from separate good prior draws;
        `inversion.fitting.start.map_start`) or ``"prior"`` (walkers drawn from the
        prior; they can be stranded in a minor mode, which the stopping rule then
        reports).
    """

    walkers: int = 32
    seed: int = 1
    ess_target: int = 2000
    tau_multiple: float = 50.0
    max_steps: int = 20000
    check_interval: int = 250
    start: str = "map"

    def __post_init__(self) -> None:
        for name, low in (("walkers", 2), ("ess_target", 1), ("max_steps", 1),
                          ("check_interval", 1)):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < low:
                raise InputError(f"{value!r} must be a whole number >= {low}",
                                 key=f"sampler.{name}")
        object.__setattr__(self, "seed", check_seed(self.seed, where="sampler.seed"))
        tau = _number(self.tau_multiple, "sampler.tau_multiple", None)
        if tau <= 0:
            raise InputError(f"{tau:g} must be > 0", key="sampler.tau_multiple")
        object.__setattr__(self, "tau_multiple", tau)
        _check_choice(self.start, _START, "sampler.start", None)
        if self.check_interval > self.max_steps:
            raise InputError(
                f"check_interval {self.check_interval} is larger than max_steps "
                f"{self.max_steps}; lower it or raise max_steps", key="sampler.check_interval")


_MODEL_KEYS = tuple(f.name for f in dataclasses.fields(ModelSettings))
_SAMPLER_KEYS = tuple(f.name for f in dataclasses.fields(SamplerSettings))


@dataclass(frozen=True)
class Study:
    """Everything one inversion needs, validated.

    Parameters
    ----------
    name : str
        Study name (``[study] name``; default: the file name without extension).
    source : pathlib.Path or None
        The study file it was read from (None when built in code).
    model : ModelSettings
    priors : dict of str to Prior
        Free parameters and their priors (a study file needs at least one; a scenario
        built with `with_overrides` may fix every parameter).
    fixed : dict of str to float
        Fixed parameters and their values. `priors` and `fixed` together hold each name of
        `PARAMETERS` exactly once.
    observations : tuple of ObservationSet
        One entry per ``[[observations]]`` block, in file order.
    sampler : SamplerSettings
    file_hash : str or None
        sha256 (hex) of the study file bytes, for provenance.
    description : str
        Free text from ``[study] description``.
    survey : dict or None
        The ``[survey]`` table as written (validated by `inversion.survey`), None when
        the file has none; `inversion.survey.survey` reads its settings from it.

    Examples
    --------
    >>> from lidmelt import demo_data
    >>> study = Study.from_file(demo_data.study_path())
    >>> study.free_parameters
    ('potential_temperature', 'lithosphere_thickness', 'solidus_offset')
    >>> hotter = study.with_overrides({"potential_temperature": 1450.0})
    >>> hotter.free_parameters, hotter.fixed["potential_temperature"]
    (('lithosphere_thickness', 'solidus_offset'), 1450.0)
    """

    name: str
    source: Path | None
    model: ModelSettings
    priors: dict[str, Prior]
    fixed: dict[str, float]
    observations: tuple[ObservationSet, ...]
    sampler: SamplerSettings = field(default_factory=SamplerSettings)
    file_hash: str | None = None
    description: str = ""
    survey: dict | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "priors", dict(self.priors))
        if self.survey is not None:
            object.__setattr__(self, "survey", copy.deepcopy(dict(self.survey)))
        object.__setattr__(self, "fixed", {k: float(v) for k, v in dict(self.fixed).items()})
        object.__setattr__(self, "observations", tuple(self.observations))
        file = self.source
        _check_parameter_sets(self.priors, self.fixed, file)
        if not self.model.supports_water and (
            "water" in self.priors or self.fixed.get("water", 0.0) != 0.0
        ):
            raise InputError(
                f"'{self.model.parameterization}' is a dry parameterization: fix "
                "water = { value = 0.0 } or choose parameterization = \"katz2003\"",
                file=file, key="parameters.water")
        for block in self.observations:
            if not isinstance(block, ObservationSet):
                raise TypeError(f"observations must be ObservationSet objects, got {block!r}")
        ndim = len(self.priors) + len(self.block_parameters)
        if self.sampler.walkers < 2 * ndim:
            raise InputError(
                f"walkers = {self.sampler.walkers} is too few for {ndim} free parameters; the "
                f"ensemble sampler needs at least {2 * ndim} (2 per free parameter)",
                file=file, key="sampler.walkers")

    # ---- reading -------------------------------------------------------------------

    @classmethod
    def from_file(cls, path: str | PathLike[str]) -> Study:
        """Read and validate a study file (TOML); paths inside are relative to it.

        Parameters
        ----------
        path : str or path-like
            The study file.

        Returns
        -------
        Study

        Raises
        ------
        InputError
            Missing or unreadable file, malformed TOML (with its line), or any broken rule
            of the schema (the message names the key and the line where it is).
        """
        path = Path(path)
        raw, text, config = read_study_file(path)
        try:
            return cls.from_mapping(config, base_dir=path.parent, source=path,
                                    file_hash=hashlib.sha256(raw).hexdigest())
        except InputError as err:
            if err.file is not None and err.file != str(path):
                raise  # a mistake inside an observation table names its own file
            raise InputError(err.message, file=path, key=err.key,
                             line=err.line or key_line(text, err.key)) from None

    @classmethod
    def from_mapping(
        cls,
        config: Mapping,
        *,
        base_dir: str | PathLike[str] = ".",
        source: str | PathLike[str] | None = None,
        file_hash: str | None = None,
    ) -> Study:
        """Build a study from an already-parsed study-file mapping (same schema as TOML).

        Parameters
        ----------
        config : mapping
            Tables ``study``, ``model``, ``parameters``, ``observations``, ``sampler``
            (and, read by other commands, ``scenarios``, ``comparison``, ``survey``).
        base_dir : str or path-like
            Folder that observation ``file`` paths are relative to.
        source : str or path-like, optional
            File the mapping came from, recorded in `Study.source`.
        file_hash : str, optional
            Recorded in `Study.file_hash`.
        """
        check_keys(config, _TOP_KEYS + _COMPARISON_KEYS + (_SURVEY_KEY,), "",
                   what="section")
        study_tbl = _table(config, "study")
        check_keys(study_tbl, _STUDY_KEYS, "study")
        source = None if source is None else Path(source)
        name = study_tbl.get("name", source.stem if source is not None else "study")
        description = study_tbl.get("description", "")
        for key, value in (("name", name), ("description", description)):
            if not isinstance(value, str) or (key == "name" and not value.strip()):
                raise InputError(f"{value!r} must be a non-empty text in quotes",
                                 key=f"study.{key}")
        model_tbl = _table(config, "model")
        check_keys(model_tbl, _MODEL_KEYS, "model")
        model = ModelSettings(**model_tbl)
        sampler_tbl = _table(config, "sampler")
        check_keys(sampler_tbl, _SAMPLER_KEYS, "sampler")
        sampler = SamplerSettings(**sampler_tbl)
        priors, fixed = _parse_parameters(config.get("parameters"))
        if not priors:  # a scenario may fix everything (inversion.study.scenarios), a study not
            raise InputError("every parameter is fixed; give at least one a prior to infer "
                             "it", key="parameters")
        survey = config.get(_SURVEY_KEY)
        blocks = config.get("observations")
        if blocks is None and survey is not None:
            blocks = []  # a survey's sites bring the data
        observations = _parse_observations(blocks, Path(base_dir))
        if survey is not None:
            from .survey_table import parse_survey_table  # a survey file only

            parse_survey_table(survey)  # a bad [survey] key is named here, with its line
        return cls(name=name, source=source, model=model, priors=priors, fixed=fixed,
                   observations=observations, sampler=sampler, file_hash=file_hash,
                   description=description, survey=survey)

    # ---- views and variants ------------------------------------------------------------

    @property
    def free_parameters(self) -> tuple[str, ...]:
        """Names of the free parameters, in the canonical order of `PARAMETERS`."""
        return tuple(name for name in PARAMETERS if name in self.priors)

    @property
    def sampled_parameters(self) -> tuple[str, ...]:
        """Every sampled name: `free_parameters`, then the `block_parameters` names.

        The column order of `inversion.LogPosterior` and of every chain.
        """
        return self.free_parameters + tuple(e.name for e in self.block_parameters)

    @property
    def block_parameters(self) -> tuple[BlockParameter, ...]:
        """The sampled settings of the observation blocks, in block order.

        Free model errors and a kind's own sampled settings (``olivine_fo``,
        ``fe3_fraction``); they are sampled after the physical `free_parameters` (see
        `BlockParameter`).
        """
        return block_parameters(self.observations)

    @property
    def error_parameters(self) -> tuple[BlockParameter, ...]:
        """The earlier name of `block_parameters`."""
        return self.block_parameters

    @property
    def fixed_parameters(self) -> tuple[str, ...]:
        """Names of the fixed parameters, in the canonical order of `PARAMETERS`."""
        return tuple(name for name in PARAMETERS if name in self.fixed)

    def with_overrides(self, parameters: Mapping | None = None, **model_settings) -> Study:
        """A copy with some parameters and/or model settings replaced (a scenario).

        Parameters
        ----------
        parameters : mapping, optional
            Parameter name -> a number (fixes it), a `Prior` (frees it), or a table as in
            the study file (``{"value": ...}`` or ``{"prior": ..., ...}``). Unnamed
            parameters keep their setting.
        **model_settings
            Fields of `ModelSettings` (parameterization, melting_region, crust_density,
            mantle_density).

        Returns
        -------
        Study
            Validated like a study file; raises `InputError` naming the override key.

        Examples
        --------
        >>> from lidmelt import demo_data
        >>> study = Study.from_file(demo_data.study_path())
        >>> dry = study.with_overrides({"water": 0.0}, parameterization="mckenzie-bickle1988")
        >>> dry.model.parameterization, dry.fixed["water"]
        ('mckenzie-bickle1988', 0.0)
        """
        check_keys(model_settings, _MODEL_KEYS, "model")
        model = dataclasses.replace(self.model, **model_settings)
        priors, fixed = dict(self.priors), dict(self.fixed)
        for name, spec in dict(parameters or {}).items():
            value = _override(name, spec)
            priors.pop(name, None)
            fixed.pop(name, None)
            (priors if isinstance(value, Prior) else fixed)[name] = value
        return dataclasses.replace(self, model=model, priors=priors, fixed=fixed)

    def with_observations(self, observations: Iterable[ObservationSet]) -> Study:
        """A copy with other observation sets (e.g. one site's data, or simulated data)."""
        return dataclasses.replace(self, observations=tuple(observations))

    def with_sampler(self, **settings) -> Study:
        """A copy with some `SamplerSettings` fields replaced (validated)."""
        check_keys(settings, _SAMPLER_KEYS, "sampler")
        return dataclasses.replace(self, sampler=dataclasses.replace(self.sampler, **settings))

    def describe(self) -> str:
        """Several lines in words: model, each parameter's prior or value, each data set."""
        model = self.model
        lines = [f"Study '{self.name}': {model.parameterization} melting, melting region "
                 f"{model.melting_region}, crust {model.crust_density:g} and mantle "
                 f"{model.mantle_density:g} kg/m^3."]
        for name in PARAMETERS:
            unit = "" if PARAMETER_UNITS[name] == "-" else PARAMETER_UNITS[name]
            if name in self.priors:
                lines.append(f"  {name}: free, {self.priors[name].describe(unit=unit)}")
            else:
                lines.append(f"  {name}: fixed at {self.fixed[name]:g} {unit}".rstrip())
        lines.extend(f"  data: {block.describe()}" for block in self.observations)
        lines.extend(f"  {error.name}: free, {error.prior.describe(unit=error.unit)}"
                     for error in self.block_parameters)
        return "\n".join(lines)


# ---- parsing helpers -------------------------------------------------------------------

def _table(config: Mapping, name: str) -> dict:
    value = config.get(name, {})
    if not isinstance(value, dict):
        raise InputError(f"'{name}' must be a table written [{name}], got {value!r}", key=name)
    return value


def _check_choice(value, valid: tuple[str, ...], key: str, file) -> None:
    if not isinstance(value, str) or value not in valid:
        raise InputError(f"unknown value {value!r}" + suggest(str(value), valid),
                         file=file, key=key)


def _number(value, key: str, file) -> float:
    if isinstance(value, bool) or not isinstance(value, Real) or not math.isfinite(value):
        raise InputError(f"{value!r} must be a finite number", file=file, key=key)
    return float(value)


def _check_range(value: float, domain, key: str, file, unit: str) -> None:
    low, high = domain
    if not low <= value <= high:
        raise InputError(f"{value:g} {unit} is outside the physical range [{low:g}, {high:g}] "
                         f"{unit}", file=file, key=key)


def _parse_parameters(table) -> tuple[dict[str, Prior], dict[str, float]]:
    if table is None:
        raise InputError("missing [parameters] table; give at least potential_temperature "
                         "and lithosphere_thickness", key="parameters")
    if not isinstance(table, dict):
        raise InputError(f"'parameters' must be a table, got {table!r}", key="parameters")
    check_keys(table, PARAMETERS, "parameters", what="parameter")
    priors, fixed = {}, {}
    for name in PARAMETERS:
        if name in table:
            value = _prior_or_value(name, table[name], f"parameters.{name}")
        elif name in DEFAULT_FIXED:
            value = DEFAULT_FIXED[name]
        else:
            raise InputError(
                f"'{name}' must be given, e.g. {name} = {{ prior = \"uniform\", min = ..., "
                "max = ... } or { value = ... }", key=f"parameters.{name}")
        (priors if isinstance(value, Prior) else fixed)[name] = value
    return priors, fixed


def _prior_or_value(name: str, spec, where: str) -> Prior | float:
    return prior_from_spec(name, spec, where=where, domain=forward.PARAMETER_DOMAIN[name],
                           exclusive_low=name in forward.EXCLUSIVE_LOWER_BOUND)


def _override(name: str, spec) -> Prior | float:
    where = f"parameters.{name}"
    if name not in PARAMETERS:
        raise InputError(f"unknown parameter '{name}'" + suggest(name, PARAMETERS), key=where)
    if isinstance(spec, Prior):
        low, high = forward.PARAMETER_DOMAIN[name]
        p_low, p_high = spec.bounds
        if (math.isfinite(p_low) and p_low < low) or (math.isfinite(p_high) and p_high > high):
            raise InputError(f"prior {spec.describe()} reaches outside the physical range "
                             f"[{low:g}, {high:g}] of '{name}'", key=where)
        if math.isinf(p_low) or math.isinf(p_high):  # cut open tails to the domain
            mean, sd = getattr(spec, "mean", None), getattr(spec, "sd", None)
            if mean is None or not low <= mean <= high:
                raise InputError(f"prior {spec.describe()} must lie inside the physical "
                                 f"range [{low:g}, {high:g}] of '{name}'", key=where)
            return TruncatedNormal(mean, sd, max(p_low, low), min(p_high, high))
        return spec
    if isinstance(spec, Real) and not isinstance(spec, bool):
        spec = {"value": spec}
    return _prior_or_value(name, spec, where)


def _check_parameter_sets(priors: dict, fixed: dict, file) -> None:
    for name in (*priors, *fixed):
        if name not in PARAMETERS:
            raise InputError(f"unknown parameter '{name}'" + suggest(name, PARAMETERS),
                             file=file, key=f"parameters.{name}")
    for name in PARAMETERS:
        if name in priors and name in fixed:
            raise InputError(f"'{name}' is both free and fixed; give it a prior or a value",
                             file=file, key=f"parameters.{name}")
        if name not in priors and name not in fixed:
            raise InputError(f"'{name}' has neither a prior nor a fixed value",
                             file=file, key=f"parameters.{name}")


def _parse_observations(blocks, base_dir: Path) -> tuple[ObservationSet, ...]:
    if blocks is None:
        raise InputError("no observations; add at least one [[observations]] block with "
                         "kind and file", key="observations")
    if not isinstance(blocks, list) or not all(isinstance(b, dict) for b in blocks):
        raise InputError("write each observation block as an [[observations]] table",
                         key="observations")
    sets = []
    for index, spec in enumerate(blocks, start=1):
        where = f"observations[{index}]"
        if "kind" not in spec:
            raise InputError("missing 'kind'; choose one of " + ", ".join(
                f"'{k}'" for k in KINDS), key=f"{where}.kind")
        kind = spec["kind"]
        if kind not in KINDS:
            raise InputError(f"unknown kind {kind!r}" + suggest(str(kind), tuple(KINDS)),
                             key=f"{where}.kind")
        sets.append(KINDS[kind].from_spec(spec, base_dir=base_dir, where=where))
    return tuple(sets)
