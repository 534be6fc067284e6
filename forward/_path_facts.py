"""Facts about each tabulated melting path, derived once per table from its stored states.

They are computed when a table is built and kept in its cache file beside it (see
``_table``, which imports this module, never the reverse); without a disk cache, on
first use in a process (a few seconds for the table across water contents), and
remembered.

``turn``
    Pressure (GPa) of the path's largest melt fraction (the shallowest node holding it):
    0 where F rises all the way to the surface. Where the melt is water-saturated the wet
    solidus rises steeply toward low pressure (Katz et al. 2003, water saturation) and F
    falls again above some pressure: for a lid shallower than that, the largest F of the
    melting interval lies at ``turn``, not at the top.
``low``
    Where a path that starts partly molten at the model base first refreezes on its way
    up (F falling from the base before it rises again; very hot mantle, and the
    McKenzie & Bickle 1988 solidus above about 7.5 GPa): the pressure of its smallest F
    below ``turn``. Elsewhere the onset.
``margin``
    The solidus margin (K) of the path's mantle: the largest excess of the solid
    adiabat over the wet, shifted solidus (negative: too cold to melt at any depth).
``onset_cell``, ``inverse_onset``
    Index of the pressure cell holding the onset of a path that melts and starts above
    the model base (else -1), and 1 / onset (0 where the onset is at the surface).
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

import numpy as np

from ._coordinates import WATER_EXPONENT, potential_temperature
from .adiabat import MAX_PRESSURE, solidus_margin

__all__ = ["PathFacts", "path_facts", "remember"]

_CHUNK = 2048  # paths per block: bounds the temporary arrays of the melt fraction


@dataclass(frozen=True)
class PathFacts:
    """Per-path facts, flat arrays over a table's paths (see the module docstring)."""

    turn: np.ndarray
    low: np.ndarray
    margin: np.ndarray
    onset_cell: np.ndarray
    inverse_onset: np.ndarray


_MEMO: dict[int, tuple[weakref.ref, PathFacts]] = {}


def path_facts(param, table) -> PathFacts:
    """The ``PathFacts`` of ``table`` (computed on first use, then remembered)."""
    hit = _MEMO.get(id(table))
    if hit is not None and hit[0]() is table:
        return hit[1]
    facts = _compute(param, table)
    remember(table, facts)
    return facts


def remember(table, facts: PathFacts) -> None:
    """Use ``facts`` for ``table`` from now on (the table cache keeps them in its file)."""
    key = id(table)
    _MEMO[key] = (weakref.ref(table, lambda _: _MEMO.pop(key, None)), facts)


def _compute(param, table) -> PathFacts:
    axis = table.sqrt_pressure
    state = table.state.reshape(-1, axis.size, 3)
    onset = table.onset.reshape(-1)
    melts = state[:, 0, 1] > 0.0  # some melt by the surface
    turn, low = _extrema(param, axis.nodes ** 2, state[:, :, 0], onset, melts)
    cell = axis.locate(np.sqrt(onset))[0]
    inside = melts & (onset < MAX_PRESSURE)
    inverse = np.where(onset > 0.0, 1.0 / np.where(onset > 0.0, onset, 1.0), 0.0)
    return PathFacts(turn, low, _margins(param, table), np.where(inside, cell, -1), inverse)


def _extrema(param, pressure, sigma, onset, melts):
    """``turn`` and ``low`` of every path (GPa)."""
    turn, low = np.array(onset, float), np.array(onset, float)
    capped = melts & (onset >= MAX_PRESSURE)
    for start in range(0, onset.size, _CHUNK):
        block = slice(start, start + _CHUNK)
        frac = param.dry_melt_fraction(sigma[block].astype(float), pressure).fraction
        inside = pressure[None, :] <= onset[block, None]
        best = np.argmax(np.where(inside, frac, -1.0), axis=1)  # shallowest of equal maxima
        turn[block] = np.where(melts[block], pressure[best], onset[block])
        below = inside & (pressure[None, :] >= turn[block, None])
        flipped = np.where(below, frac, np.inf)[:, ::-1]  # deepest of equal minima first
        least = pressure.size - 1 - np.argmin(flipped, axis=1)
        low[block] = np.where(capped[block], pressure[least], onset[block])
    return turn, low


def _margins(param, table):
    """Solidus margin (K) of every path's mantle."""
    theta, shift, water_q = np.meshgrid(table.theta.nodes, table.shift.nodes,
                                        table.water.nodes, indexing="ij")
    water = water_q.ravel() ** (1.0 / WATER_EXPONENT)
    tp = potential_temperature(param, theta.ravel(), shift.ravel(), water)
    return solidus_margin(param, tp, water, shift.ravel())[0]
