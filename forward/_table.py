"""Tabulated melting paths: the fast route behind ``melt_column``.

A path depends on the potential temperature, the solidus offset and the water
content; the lid only truncates it. Paths are integrated once on a grid of
``theta = Tp - shift + dT0(water)`` (the potential temperature relative to the
shifted wet solidus at depth, ``dT0`` the unsaturated water depression at F -> 0,
so the onset moves smoothly along it), ``shift`` and water (uniform in
``water^0.75``, to which that depression is proportional), each on a pressure grid
uniform in ``sqrt(P)``. Queries interpolate multilinearly across paths and linearly in sqrt(P)
along them. The melt fraction is never interpolated: it is recomputed exactly from
the interpolated path state, so its kinks (onset, cpx exhaustion) stay sharp.
"""

from __future__ import annotations

import hashlib
import itertools
import os
import zipfile
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from .._atomic import replacing
from ._integrate import integrate_paths
from ._validation import PARAMETER_DOMAIN
from .adiabat import MAX_PRESSURE, onset_state, solid_adiabat

__all__ = ["PathTable", "path_table"]

_THETA_STEP = 5.0  # K
_SHIFT_STEP = 100.0  # K; the shift acts only through T/c_p at fixed theta: near-linear
_WATER_NODES = 25
_WATER_EXPONENT = 0.75  # Katz et al. (2003): dT = K X^0.75
_PRESSURE_NODES = 1001  # exact-water tables
_PRESSURE_NODES_ACROSS_WATER = 401  # keeps the 4-D table near 90 MB
_RK_STEPS = 2000  # Runge-Kutta steps from the model base to the surface, whatever is stored


def _pressure_axis(nodes):
    return _Axis(0.0, np.sqrt(MAX_PRESSURE) / (nodes - 1), nodes)


@dataclass(frozen=True)
class _Axis:
    """A uniform interpolation axis; a single node means "exact, no interpolation"."""

    start: float
    step: float
    size: int

    @property
    def nodes(self):
        return self.start + self.step * np.arange(self.size)

    def locate(self, x):
        """Lower node index and fraction (0..1) of ``x`` on this axis."""
        if self.size == 1:
            return np.zeros(np.shape(x), np.intp), np.zeros(np.shape(x))
        pos = np.clip((np.asarray(x, float) - self.start) / self.step, 0.0, self.size - 1.0)
        idx = np.minimum(pos.astype(np.intp), self.size - 2)
        return idx, pos - idx


@dataclass(frozen=True)
class PathTable:
    """Melting paths on a grid; see the module docstring for the axes.

    ``state`` has shape ``(n_theta, n_shift, n_water, n_pressure, 3)`` holding sigma
    (degC), I1 = int_P^P0 F dP and I2 = int_P^P0 P F dP (GPa, GPa^2); ``onset`` has
    shape ``(n_theta, n_shift, n_water)`` in GPa.
    """

    theta: _Axis
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


def deep_depression(param, water):
    """Water solidus depression (K) at F -> 0 where unsaturated (at the model base)."""
    return param.water_depression(0.0, MAX_PRESSURE, water)[0]


def _build(param, theta_axis, shift_axis, water_axis, u_axis):
    theta, shift, water_q = np.meshgrid(theta_axis.nodes, shift_axis.nodes, water_axis.nodes,
                                        indexing="ij")
    theta, shift = theta.ravel(), shift.ravel()
    water = water_q.ravel() ** (1.0 / _WATER_EXPONENT)
    tp = theta + shift - deep_depression(param, water)
    onset, sigma0, melts = onset_state(param, tp, water, shift)
    u = u_axis.nodes
    with np.errstate(all="ignore"):  # inactive (subsolidus) lanes are discarded
        paths = integrate_paths(param, u, onset, sigma0, melts, water, shift,
                                sub_steps=max(2, round(_RK_STEPS / (u_axis.size - 1))))
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


def _param_axes(param, water):
    tp_lo, tp_hi = PARAMETER_DOMAIN["potential_temperature"]
    s_lo, s_hi = PARAMETER_DOMAIN["solidus_offset"]
    depressions = deep_depression(param, np.asarray(water, float))
    lo, hi = tp_lo - s_hi + np.min(depressions), tp_hi - s_lo + np.max(depressions)
    lo, hi = np.floor(lo / _THETA_STEP) * _THETA_STEP, np.ceil(hi / _THETA_STEP) * _THETA_STEP
    theta = _Axis(lo, _THETA_STEP, int(round((hi - lo) / _THETA_STEP)) + 1)
    shift = _Axis(s_lo, _SHIFT_STEP, int(round((s_hi - s_lo) / _SHIFT_STEP)) + 1)
    return theta, shift


_FORMAT = 3  # bump when the table layout or the integration changes


def _cache_file(param, axes) -> Path | None:
    """Where a table is kept between runs; LIDMELT_CACHE="" switches caching off."""
    root = os.environ.get("LIDMELT_CACHE", str(Path.home() / ".cache" / "lidmelt"))
    if not root:
        return None
    key = repr((_FORMAT, _RK_STEPS, param, axes)).encode()
    return Path(root) / f"paths-{param.name}-{hashlib.sha256(key).hexdigest()[:16]}.npz"


def _load_or_build(param, theta, shift, water_axis, u_axis) -> PathTable:
    path = _cache_file(param, (theta, shift, water_axis, u_axis))
    stored = _read_cache(path)
    if stored is not None:
        return PathTable(theta, shift, water_axis, u_axis, *stored)
    table = _build(param, theta, shift, water_axis, u_axis)
    if path is not None:
        _write_cache(path, table)
    return table


def _read_cache(path):
    """``(state, onset)`` from a cache file, or None if absent or unreadable."""
    if path is None or not path.exists():
        return None
    try:
        with np.load(path) as stored:
            return np.ascontiguousarray(stored["state"]), stored["onset"]
    except (OSError, ValueError, KeyError, zipfile.BadZipFile):
        return None  # a damaged cache is rebuilt and overwritten


def _write_cache(path, table) -> None:
    """Atomic write; a cache is a convenience, so a read-only home must not stop the model."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with replacing(path) as tmp:
            np.savez(tmp, state=table.state, onset=table.onset)
    except OSError:
        pass  # `replacing` has removed its temporary file


@lru_cache(maxsize=8)
def path_table(param, water: float | None) -> PathTable:
    """The table for ``param`` at one exact water content, or (None) across water."""
    theta, shift = _param_axes(param, PARAMETER_DOMAIN["water"] if water is None else water)
    if water is not None:
        water_axis = _Axis(float(water) ** _WATER_EXPONENT, 1.0, 1)
        u_axis = _pressure_axis(_PRESSURE_NODES)
    else:
        top = PARAMETER_DOMAIN["water"][1] ** _WATER_EXPONENT
        water_axis = _Axis(0.0, top / (_WATER_NODES - 1), _WATER_NODES)
        u_axis = _pressure_axis(_PRESSURE_NODES_ACROSS_WATER)
    return _load_or_build(param, theta, shift, water_axis, u_axis)
