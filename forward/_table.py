"""Tabulated melting paths: the fast route behind ``melt_column``.

A path depends on the potential temperature, the solidus offset and the water
content; the lid only truncates it. Paths are integrated once on a grid of
``theta = Tp - (shift - dT0(water)) exp(-c P_base)`` (``dT0`` the unsaturated water
depression at F -> 0; see ``_coordinates``: the onset moves smoothly along theta, and
every path with theta above one value melts from the model base up, whatever its shift
and water), ``shift`` and water (uniform in ``water^0.75``, to which that depression is
proportional), each on a pressure grid uniform in ``sqrt(P)``. Queries interpolate multilinearly across paths and linearly in sqrt(P)
along them. The melt fraction is never interpolated: it is recomputed exactly from
the interpolated path state, so its kinks (onset, cpx exhaustion) stay sharp.

Each parameterization has at most two tables: a dry one (water 0 only) and one across
the whole water domain, 0-1000 ppm, which serves every call with any water, so no run
needs a table of its own. Its water nodes are set by the cpx-exhaustion kink: where
neighbouring paths pass it at different pressures, linear interpolation errs to first
order in the node spacing. Both tables are kept on disk (see ``_cache``); a file is used
only if it holds a whole table with this module's format, integration, axes and the
parameterization's constants (its key), else it is rebuilt and replaced.
"""

from __future__ import annotations

import dataclasses
import hashlib
import importlib
import itertools
import math
import sys
import zipfile
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from .._atomic import replacing
from . import _cache
from ._coordinates import WATER_EXPONENT as _WATER_EXPONENT
from ._coordinates import Axis as _Axis
from ._coordinates import GradedAxis
from ._coordinates import potential_temperature, theta_axis
from ._coordinates import theta as theta_of
from ._integrate import integrate_paths
from ._path_facts import PathFacts, path_facts, remember
from ._validation import PARAMETER_DOMAIN
from .progress import BuildClock
from .adiabat import MAX_PRESSURE, onset_state, solid_adiabat

__all__ = ["PathTable", "path_table", "table_for"]

_THETA_STEP = 5.0  # K, away from the model base (see _coordinates.theta_axis)
_SHIFT_STEP = 100.0  # K; the shift acts only through T/c_p at fixed theta: near-linear
_WATER_NODES = 65  # 0-1000 ppm: errors within 0.3 of a target of exact-water tables
_PRESSURE_NODES = 1001  # dry tables
_PRESSURE_NODES_ACROSS_WATER = 401  # keeps the table across water near 245 MB
_RK_STEPS = 2000  # Runge-Kutta steps from the model base to the surface, whatever is stored
_ONSET_GROUPS = 8  # paths integrated together, by onset depth, when building a table
_LANES_PER_GROUP = 1000  # fewer paths than this per group: numpy's call overhead dominates


def _pressure_axis(nodes):
    return _Axis(0.0, np.sqrt(MAX_PRESSURE) / (nodes - 1), nodes)


@dataclass(frozen=True)
class PathTable:
    """Melting paths on a grid; see the module docstring for the axes.

    ``state`` has shape ``(n_theta, n_shift, n_water, n_pressure, 3)`` holding sigma
    (degC), I1 = int_P^P0 F dP and I2 = int_P^P0 P F dP (GPa, GPa^2); ``onset`` has
    shape ``(n_theta, n_shift, n_water)`` in GPa.
    """

    theta: _Axis | GradedAxis
    shift: _Axis
    water: _Axis  # in water**0.75 units
    sqrt_pressure: _Axis
    state: np.ndarray
    onset: np.ndarray

    def corners(self, theta, shift, water):
        """Flat path indices and weights of the interpolation corners, each ``(k, ...)``.

        Compute once per set of paths and pass to ``onset_pressure`` and ``lookup``.
        """
        theta, shift, water = np.broadcast_arrays(theta, shift, water)
        located = [ax.locate(x) for ax, x in ((self.theta, theta), (self.shift, shift),
                                               (self.water, water ** _WATER_EXPONENT))]
        sizes = (self.shift.size * self.water.size, self.water.size, 1)
        choices = [(0,) if ax.size == 1 else (0, 1) for ax in (self.theta, self.shift, self.water)]
        flats, weights = [], []
        for combo in itertools.product(*choices):
            flat, weight = 0, 1.0
            for (idx, frac), offset, size in zip(located, combo, sizes, strict=True):
                flat = flat + (idx + offset) * size
                weight = weight * (frac if offset else 1.0 - frac)
            flats.append(flat)
            weights.append(weight)
        return np.stack(flats), np.stack(weights)

    def onset_pressure(self, corners):
        """Interpolated onset pressure (GPa) of the paths at ``corners``."""
        flats, weights = corners
        return np.sum(self.onset.reshape(-1)[flats] * weights, axis=0)

    def lookup(self, corners, pressure):
        """Interpolated ``(sigma, I1, I2)`` at ``pressure`` (GPa) along the paths.

        ``pressure`` broadcasts against the corners' path shape.
        """
        flats, weights = corners
        u_idx, u_frac = self.sqrt_pressure.locate(np.sqrt(np.asarray(pressure, float)))
        rows = self.state.reshape(-1, 3)  # node (path, u) -> 3 values; u+1 is the next row
        index = flats * self.sqrt_pressure.size + u_idx[None]
        lower = np.take(rows, index, axis=0)
        upper = np.take(rows, index + 1, axis=0)
        blended = lower + u_frac[None, ..., None].astype(np.float32) * (upper - lower)
        weights = np.broadcast_to(weights, index.shape)
        values = np.einsum("k...v,k...->...v", blended.astype(float), weights)
        return values[..., 0], values[..., 1], values[..., 2]


def _build(param, theta_axis, shift_axis, water_axis, u_axis, *, clock=None):
    """Integrate every path of a table; ``clock(stage, done)`` hears the progress
    (`progress.BuildClock`)."""
    theta, shift, water_q = np.meshgrid(theta_axis.nodes, shift_axis.nodes, water_axis.nodes,
                                        indexing="ij")
    theta, shift = theta.ravel(), shift.ravel()
    water = water_q.ravel() ** (1.0 / _WATER_EXPONENT)
    tp = potential_temperature(param, theta, shift, water)
    onset, sigma0, melts = onset_state(param, tp, water, shift)
    u = u_axis.nodes
    paths = _integrate_by_onset(param, u, onset, sigma0, melts, water, shift,
                                sub_steps=max(2, round(_RK_STEPS / (u_axis.size - 1))),
                                clock=clock or (lambda stage, done=0.0: None))
    p = u[None, :] ** 2
    depression = param.water_depression(0.0, p, water[:, None])[0]
    sub_sigma = solid_adiabat(tp[:, None], p, param.thermo) + depression - shift[:, None]
    below_onset = ~melts[:, None] | (p > onset[:, None] + 1e-9)  # a capped path starts on a node
    paths[0] = np.where(below_onset, sub_sigma, paths[0])
    paths[1:] = np.where(below_onset[None], 0.0, paths[1:])
    shape = (theta_axis.size, shift_axis.size, water_axis.size)
    # C order: lookups reshape it to (nodes, 3) without copying
    state = np.ascontiguousarray(np.moveaxis(paths, 0, -1), dtype=np.float32).reshape(
        *shape, u_axis.size, 3)
    return PathTable(theta_axis, shift_axis, water_axis, u_axis, state, onset.reshape(shape))


def _integrate_by_onset(param, u, onset, sigma0, melts, water, shift, sub_steps, clock):
    """``integrate_paths`` for groups of paths with similar onsets, each group from its
    deepest onset up: the same numbers for less work, since a path idles below its onset
    and a path that never melts needs no integration at all.

    ``clock("building", done)`` hears the fraction of the work done (paths x node
    intervals, which is what the time goes into) after every node interval.
    """
    paths = np.zeros((3, onset.size, u.size))
    lanes = np.flatnonzero(melts)
    lanes = lanes[np.argsort(onset[lanes], kind="stable")]
    groups = [g for g in np.array_split(lanes, max(1, min(_ONSET_GROUPS,
                                                          lanes.size // _LANES_PER_GROUP)))
              if g.size]
    deepest = [int(min(np.searchsorted(u, np.sqrt(onset[g].max())), u.size - 1))
               for g in groups]
    total = max(1, sum(g.size * d for g, d in zip(groups, deepest, strict=True)))
    finished = 0
    clock("building", 0.0)
    for group, top in zip(groups, deepest, strict=True):
        def on_node(k, before=finished, size=group.size):
            clock("building", (before + size * k) / total)

        with np.errstate(all="ignore"):  # idle lanes are computed, then discarded
            paths[:, group, : top + 1] = integrate_paths(
                param, u[: top + 1], onset[group], sigma0[group], melts[group],
                water[group], shift[group], sub_steps=sub_steps, on_node=on_node)
        finished += group.size * top
    return paths  # below each onset the caller fills in the solid adiabat


def _param_axes(param, water):
    tp_lo, tp_hi = PARAMETER_DOMAIN["potential_temperature"]
    s_lo, s_hi = PARAMETER_DOMAIN["solidus_offset"]
    # theta is monotonic in each input: its extremes lie at corners of the input box
    box = [theta_of(param, tp, s, w) for tp in (tp_lo, tp_hi) for s in (s_lo, s_hi)
           for w in (min(water), max(water))]
    theta = theta_axis(param, float(np.min(box)), float(np.max(box)), _THETA_STEP)
    shift = _Axis(s_lo, _SHIFT_STEP, int(round((s_hi - s_lo) / _SHIFT_STEP)) + 1)
    return theta, shift


_FORMAT = 5  # bump when the table layout, its file or the integration changes
_HEADER_ROOM = 4096  # bytes of .npy header allowed beyond an array's data in a cache file
_FACT = "facts_"  # file members holding the path facts (see _path_facts)
#: Modules whose code decides a table's numbers or its path facts: a lidmelt whose code
#: differs there gets tables of its own, even if nobody bumped `_FORMAT`.
_TABLE_CODE = ("._integrate", "._table", "._coordinates", ".adiabat", "._path_facts",
               ".parameterizations.base")


@lru_cache(maxsize=8)
def _code_digest(param_module: str) -> str:
    """Digest of the source of `_TABLE_CODE` and of the parameterization's module."""
    digest = hashlib.sha256()
    names = [importlib.import_module(m, __package__).__name__ for m in _TABLE_CODE]
    for name in (*names, param_module):
        source = getattr(sys.modules[name], "__file__", None)
        digest.update(Path(source).read_bytes() if source else name.encode())
    return digest.hexdigest()[:16]


def _table_key(param, axes) -> str:
    """Everything a table depends on: format, integration, code, the constants, the axes."""
    return repr((_FORMAT, _RK_STEPS, _code_digest(type(param).__module__), param, axes))


def _load_or_build(param, label, theta, shift, water_axis, u_axis) -> PathTable:
    """The table from the disk cache if a valid copy is there, else built (and cached).

    Processes that need the same missing table (a survey's workers) build it once: the
    others wait for the builder and then load its file.
    """
    axes = (theta, shift, water_axis, u_axis)
    key = _table_key(param, axes)
    folder = _cache.cache_folder()
    name = f"{param.name}-{label}"
    if folder is None:
        clock = BuildClock(name, None)
        table = _build(param, *axes, clock=clock)
        clock("done", 1.0)
        return table
    digest = hashlib.sha256(key.encode()).hexdigest()
    path = folder / _cache.table_name(name, digest)
    stored = _read_cache(path, key, axes)
    if stored is None:
        waited = BuildClock(name, path, interval=1.0)
        with _cache.building(path, waiting=waited):
            stored = _read_cache(path, key, axes)  # another process may have built it
            if stored is not None and waited.reported:
                waited("done", 1.0)
            if stored is None:
                clock = BuildClock(name, path)
                table = _build(param, *axes, clock=clock)
                clock("saving", 1.0)
                if _write_cache(path, table, key, path_facts(param, table)):
                    _cache.prune(folder, keep=path)
                clock("done", 1.0)
                return table
    _cache.mark_used(path)
    state, onset, facts = stored
    table = PathTable(*axes, state, onset)
    remember(table, facts)
    return table


def _read_cache(path, key, axes):
    """``(state, onset, path facts)`` from a cache file, or None unless it is a whole,
    valid table for ``key``.

    Anything else (absent, empty, truncated, another format, other code, constants or
    axes, wrong shapes or dtypes, non-finite values) is rejected, to be rebuilt.
    """
    if not path.is_file():
        return None
    shape = (*(axis.size for axis in axes), 3)
    members = _members(shape)
    try:
        if not _sizes_match(path, members):
            return None
        with np.load(path, allow_pickle=False) as stored:
            arrays = {name: stored[name] for name in ("key", *members)}
    except (OSError, EOFError, ValueError, KeyError, zipfile.BadZipFile):
        return None
    stored_key, state, onset = arrays["key"], arrays["state"], arrays["onset"]
    if stored_key.shape != () or stored_key.dtype.kind != "U" or str(stored_key) != key:
        return None
    if state.dtype != np.float32 or state.shape != shape:
        return None
    if onset.dtype != np.float64 or onset.shape != shape[:3]:
        return None
    if not (np.isfinite(state).all() and np.all((onset >= 0.0) & (onset <= MAX_PRESSURE))):
        return None  # the comparisons are False for NaN, so NaN onsets fail too
    facts = _checked_facts(arrays, math.prod(shape[:3]))
    return None if facts is None else (np.ascontiguousarray(state), onset, facts)


def _members(shape) -> dict[str, int]:
    """Cache-file array name -> bytes of its data (besides the key)."""
    paths = math.prod(shape[:3])
    members = {"state": 4 * math.prod(shape), "onset": 8 * paths}
    members.update({_FACT + f.name: 8 * paths for f in dataclasses.fields(PathFacts)})
    return members


def _checked_facts(arrays, paths):
    """The stored path facts, or None unless each is ``paths`` finite 8-byte numbers."""
    facts = {}
    for field in dataclasses.fields(PathFacts):
        value = arrays[_FACT + field.name]
        if (value.shape != (paths,) or value.dtype.kind not in "fi"
                or value.dtype.itemsize != 8 or not np.isfinite(value).all()):
            return None
        facts[field.name] = value
    return PathFacts(**facts)


def _sizes_match(path, members) -> bool:
    """The file is an archive of exactly our arrays, each about its expected size.

    Checked before loading, so a damaged header cannot make numpy allocate a huge array.
    """
    with zipfile.ZipFile(path) as archive:
        sizes = {info.filename: info.file_size for info in archive.infolist()}
    data = {f"{name}.npy": n for name, n in members.items()}
    if set(sizes) != {"key.npy", *data} or sizes["key.npy"] > 64 * _HEADER_ROOM:
        return False
    return all(n <= sizes[name] <= n + _HEADER_ROOM for name, n in data.items())


def _write_cache(path, table, key, facts) -> bool:
    """Write a table and its path facts atomically; False if the folder cannot be written.

    A cache is a convenience: a full disk or a read-only home must not stop the model.
    """
    arrays = {_FACT + f.name: getattr(facts, f.name) for f in dataclasses.fields(facts)}
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with replacing(path) as tmp:
            np.savez(tmp, key=np.array(key), state=table.state, onset=table.onset, **arrays)
    except OSError:
        return False  # `replacing` has removed its temporary file
    return True


def table_for(param, water) -> PathTable:
    """The table covering every value of ``water`` (ppm): the dry one where all are 0,
    otherwise the one across water, so that no run needs a table of its own."""
    return path_table(param, bool(np.any(water)))


@lru_cache(maxsize=4)
def path_table(param, across_water: bool) -> PathTable:
    """The dry table of ``param`` or (``across_water``) the one for 0-1000 ppm."""
    water_domain = PARAMETER_DOMAIN["water"] if across_water else (0.0,)
    theta, shift = _param_axes(param, water_domain)
    if not across_water:
        return _load_or_build(param, "dry", theta, shift, _Axis(0.0, 1.0, 1),
                              _pressure_axis(_PRESSURE_NODES))
    top = PARAMETER_DOMAIN["water"][1] ** _WATER_EXPONENT
    water_axis = _Axis(0.0, top / (_WATER_NODES - 1), _WATER_NODES)
    return _load_or_build(param, "wet", theta, shift, water_axis,
                          _pressure_axis(_PRESSURE_NODES_ACROSS_WATER))
