"""``melt_column``: melting beneath a lithospheric lid, and its result objects."""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from ._aligned import blended_sigma, corner_states
from ._integrate import column_temperature
from ._path_facts import path_facts
from ._pooling import pool
from ._coordinates import theta as table_theta
from ._table import PathTable, table_for
from ._validation import check_inputs
from .adiabat import depth_per_pressure, margin_trust, refine_onset, solid_adiabat
from .adiabat import solidus_margin as adiabat_margin
from .parameterizations import Parameterization, get_parameterization

__all__ = ["MELTING_REGIONS", "MeltColumn", "MeltingPath", "melt_column"]

MELTING_REGIONS = ("column", "triangle")


@dataclass(frozen=True)
class MeltingPath:
    """Pressure-temperature-melt fraction path; every array has shape ``(..., num)``.

    ``weight`` is the share of the pooled melt made in each interval: the increase of
    the melt fraction across it (decreases, where melt refreezes, count as none), for
    the triangle times the width of the melting region there, which grows from the
    apex at the top of melting, ``P - P_top`` (docs/model.md, "Melting regions"). It
    sums to 1 along the last axis, and is 0 everywhere where no melt forms.
    """

    pressure: np.ndarray  # GPa
    depth: np.ndarray  # km
    temperature: np.ndarray  # degC
    melt_fraction: np.ndarray
    weight: np.ndarray


@dataclass(frozen=True)
class _Query:
    """What is needed to evaluate more of the path later (kept off the repr)."""

    param: Parameterization
    table: PathTable
    theta: np.ndarray
    shift: np.ndarray
    water: np.ndarray
    melting_region: str
    km_per_gpa: np.ndarray
    potential_temperature: np.ndarray
    corners: tuple


@dataclass(frozen=True)
class MeltColumn:
    """Result of :func:`melt_column`; arrays in the broadcast shape of the inputs.

    Attributes
    ----------
    melt_thickness : km, active_upwelling x the integral of F over depth.
    crustal_thickness : km, melt_thickness x mantle_density / crust_density.
    onset_depth, onset_pressure : km, GPa; the deepest crossing of the solid adiabat
        and the solidus. Where the adiabat never meets the solidus: where it comes
        closest (0 for a dry source), so the onset is continuous across the edge.
    top_depth, top_pressure : km, GPa; top of melting, min(lid base, onset).
    max_melt_fraction : the largest melt fraction in the melting interval.
    top_melt_fraction : the melt fraction at the top of melting (below the largest
        where water-saturated melt refreezes near the surface).
    mean_melt_fraction : of the pooled melt; column: the largest F (every parcel has
        been melted that far when it leaves the melting interval); triangle: the
        Plank & Langmuir (1992) mean, integral of F dz / (z0 - zf).
    mean_melting_pressure : GPa, the mean pressure at which the melt was made,
        weighted by melt production (triangle: also by the width of the melting region,
        P - P_top); where no melt forms, the onset pressure (see docs/model.md).
    produces_melt : bool, melt_thickness > 0.
    potential_temperature, lithosphere_thickness, water, solidus_offset : the inputs,
        broadcast (degC, km, ppm, degC).
    solidus_margin : K (computed on first access); the largest excess of the solid
        adiabat over the wet, shifted solidus over 0-10 GPa: negative, a smooth distance
        from melting, where the mantle is too cold to melt at any depth.
    """

    melt_thickness: np.ndarray
    crustal_thickness: np.ndarray
    onset_depth: np.ndarray
    onset_pressure: np.ndarray
    top_depth: np.ndarray
    top_pressure: np.ndarray
    max_melt_fraction: np.ndarray
    top_melt_fraction: np.ndarray
    mean_melt_fraction: np.ndarray
    mean_melting_pressure: np.ndarray
    produces_melt: np.ndarray
    potential_temperature: np.ndarray
    lithosphere_thickness: np.ndarray
    water: np.ndarray
    solidus_offset: np.ndarray
    _query: _Query = field(repr=False, compare=False)

    @cached_property
    def solidus_margin(self):
        shape = np.shape(self.potential_temperature)
        margin, _ = adiabat_margin(self._query.param, np.ravel(self.potential_temperature),
                                   np.ravel(self.water), np.ravel(self.solidus_offset))
        return margin.reshape(shape)

    def profile(self, pressure):
        """Temperature (degC) and melt fraction along the whole adiabat at ``pressure``.

        ``pressure`` (GPa) broadcasts against the result shape with one trailing axis,
        e.g. shape ``(m,)`` gives arrays ``(..., m)``. Below the onset this is the solid
        adiabat; the lid is ignored (it only truncates melting).
        """
        q = self._query
        flats, weights = q.corners
        onset = self.onset_pressure[..., None]
        pressure = np.asarray(pressure, float)
        above = np.minimum(pressure, onset)
        c = corner_states(q.param, q.table, (flats[..., None], weights[..., None]), onset,
                          above)
        temp, _ = column_temperature(q.param, blended_sigma(q.param, c, above), above,
                                     q.water[..., None], q.shift[..., None])
        trust = margin_trust(_margin(q))[..., None]
        frac = trust * np.einsum("k...,k...->...", c.weights,
                                 q.param.dry_fraction(c.sigma, c.pressure))
        solid = solid_adiabat(q.potential_temperature[..., None], pressure, q.param.thermo)
        deeper = pressure > onset
        return np.where(deeper, solid, temp), np.where(deeper, 0.0, frac)

    def path(self, num: int = 64) -> MeltingPath:
        """The melting path between top and onset, in ``num`` intervals of equal pressure.

        Nodes are interval midpoints; see :class:`MeltingPath` for the weights.
        """
        top = self.top_pressure[..., None]
        bottom = np.maximum(self.onset_pressure, self.top_pressure)[..., None]
        edges = top + (bottom - top) * np.linspace(0.0, 1.0, num + 1)
        mids = 0.5 * (edges[..., 1:] + edges[..., :-1])
        temp_edges, frac_edges = self.profile(edges)
        # midpoint values by averaging: interval widths are far below the path's curvature
        temp = 0.5 * (temp_edges[..., 1:] + temp_edges[..., :-1])
        frac = 0.5 * (frac_edges[..., 1:] + frac_edges[..., :-1])
        frac_edges[..., -1] = 0.0  # melt present at the onset counts as made there
        made = np.maximum(frac_edges[..., :-1] - frac_edges[..., 1:], 0.0)
        if self._query.melting_region == "triangle":
            made = made * (mids - top)  # width of the triangle: 0 at its apex, the top
        total = made.sum(axis=-1, keepdims=True)
        weight = np.where(total > 0.0, made / np.where(total > 0.0, total, 1.0), 0.0)
        depth = mids * self._query.km_per_gpa[..., None]
        return MeltingPath(mids, depth, temp, frac, weight)


def melt_column(
    potential_temperature,
    lithosphere_thickness,
    *,
    water=0.0,
    parameterization=None,
    melting_region: str = "column",
    active_upwelling=1.0,
    solidus_offset=0.0,
    crust_density=2900.0,
    mantle_density=3300.0,
) -> MeltColumn:
    """Decompression melting of peridotite beneath a lithospheric lid.

    The solid adiabat (T = Tp exp(alpha P / rho c_p)) meets the solidus at the onset;
    above it the mantle follows the isentropic melting path of Katz et al. (2003,
    eq. 22 in substance) up to the lid base, where melting stops. Array arguments
    broadcast by numpy rules; the work is vectorised over all points. Every output is
    continuous in every input. Equations, constants and the pooling of the melt in the
    two melting regions: docs/model.md.

    Parameters
    ----------
    potential_temperature : array_like, degC, within 1000-1800.
    lithosphere_thickness : array_like, km, >= 0 (depth of the lid base).
    water : array_like, ppm H2O by weight of the bulk source (0-1000).
    parameterization : None (Katz 2003), a name, or a ``Parameterization``.
    melting_region : "column" (1-D upwelling column) or "triangle" (triangular melting
        region beneath a spreading ridge; Plank & Langmuir 1992).
    active_upwelling : array_like, > 0; 1 is passive upwelling, > 1 active.
    solidus_offset : array_like, degC; moves solidus, lherzolite-out and liquidus together.
    crust_density, mantle_density : array_like, kg/m^3. The mantle density sets the
        depth scale (P = rho g z, 30.89 km/GPa at 3300) and the crust mass balance.

    Returns
    -------
    MeltColumn

    Raises
    ------
    DomainError
        An input is outside ``PARAMETER_DOMAIN`` (the message names it).
    ValueError
        Unknown melting_region or parameterization, or water with a dry parameterization.

    Examples
    --------
    Onset depth (km) and melt thickness (km) of dry mantle at Tp 1350 degC with no lid;
    values computed from the published equations (docs/model.md, "Worked values"):

    >>> res = melt_column(1350.0, 0.0, parameterization="katz2003")
    >>> round(float(res.onset_depth), 1), round(float(res.melt_thickness), 2)
    (82.2, 8.85)
    """
    param = get_parameterization(parameterization)
    if melting_region not in MELTING_REGIONS:
        raise ValueError(f"unknown melting_region {melting_region!r}; choose 'column' or 'triangle'")
    v = check_inputs(
        potential_temperature=potential_temperature, lithosphere_thickness=lithosphere_thickness,
        water=water, active_upwelling=active_upwelling, solidus_offset=solidus_offset,
        crust_density=crust_density, mantle_density=mantle_density,
    )
    if not param.supports_water and np.any(v["water"] > 0.0):
        raise ValueError(f"{param.title} is a dry parameterization: water must be 0 ppm")
    b = dict(zip(v, np.broadcast_arrays(*v.values()), strict=True))
    table = table_for(param, b["water"])
    km_per_gpa = depth_per_pressure(b["mantle_density"])
    theta = table_theta(param, b["potential_temperature"], b["solidus_offset"], b["water"])
    corners = _live(table.corners(theta, b["solidus_offset"], b["water"]))
    query = _Query(param, table, theta, b["solidus_offset"], b["water"], melting_region,
                   km_per_gpa, b["potential_temperature"], corners)
    return _column_outputs(query, b, km_per_gpa)


def _column_outputs(query: _Query, b: dict, km_per_gpa) -> MeltColumn:
    guess = query.table.onset_pressure(query.corners)
    margin = _margin(query)
    onset = refine_onset(query.param, guess, query.potential_temperature, query.water,
                         query.shift, margin)
    top = np.minimum(b["lithosphere_thickness"] / km_per_gpa, onset)
    trust = margin_trust(margin)  # 0 where even the neighbouring paths barely melt
    pooled = pool(query.param, query.table, query.corners, onset, top, query.melting_region,
                  trust)
    melt = b["active_upwelling"] * pooled.int_f * km_per_gpa
    return MeltColumn(
        melt_thickness=melt,
        crustal_thickness=melt * b["mantle_density"] / b["crust_density"],
        onset_depth=onset * km_per_gpa,
        onset_pressure=onset,
        top_depth=top * km_per_gpa,
        top_pressure=top,
        max_melt_fraction=pooled.max_fraction,
        top_melt_fraction=pooled.top_fraction,
        mean_melt_fraction=pooled.mean_fraction,
        mean_melting_pressure=pooled.mean_pressure,
        produces_melt=melt > 0.0,
        potential_temperature=b["potential_temperature"],
        lithosphere_thickness=b["lithosphere_thickness"],
        water=b["water"],
        solidus_offset=b["solidus_offset"],
        _query=query,
    )


def _margin(query: _Query):
    """Solidus margin (K) interpolated from the neighbouring paths' margins."""
    flats, weights = query.corners
    return np.sum(weights * path_facts(query.param, query.table).margin[flats], axis=0)


def _live(corners):
    """Drop interpolation corners that carry no weight anywhere (e.g. a shift on a node)."""
    flats, weights = corners
    keep = np.any(weights != 0.0, axis=tuple(range(1, weights.ndim)))
    return (flats[keep], weights[keep]) if 0 < keep.sum() < keep.size else corners
