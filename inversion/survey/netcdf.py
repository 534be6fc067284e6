"""survey.nc: every site's posterior in one NetCDF-4 dataset with a ``site`` dimension.

Written with h5netcdf (as the fit's posterior.nc, `inversion.results.netcdf`), so it opens
with ``arviz.from_netcdf("survey.nc")`` and ``xarray.open_dataset(path, group=...)``
without lidmelt importing ArviZ.

A site's posterior is a grid (quadrature) or an emcee chain of its own size, so each site
keeps a fixed number of draws, `job.SITE_DRAWS`, taken with the site's own seed on the
stream ``survey_site_draws`` (`inversion.study.seeds`): from a grid posterior a node by
its weight, then a uniform position within its cell (`GridPosterior.sample`); from a
chain, kept positions after burn-in chosen at random (without replacement when the chain
has enough). Their medians so agree with sites_summary.csv within the resampling error
(about 1.25 sd / sqrt(draws), the large-sample error of a median, common practice).

Groups:

``posterior``
    Every free parameter of a site (the same at every site), dims
    ``(chain, draw, site)`` with one chain; NaN for a site without a result.
``constant_data``
    Per site: position_km, site_seed, status, method, converged, line (the sites-file
    line).
``area_posterior`` (joint mode)
    The area-wide posterior on its grid: one coordinate per area parameter (the shared
    potential temperature; the area mean and ``tp_spread`` when hierarchical) and
    ``probability``, the posterior probability of each node (sums to 1).
"""

from __future__ import annotations

import numpy as np

from ..results.netcdf import (
    CAUTION,
    netcdf_bytes,
    new_group,
    write_strings,
    write_variable,
)
from .job import SITE_DRAWS

__all__ = ["SURVEY_NETCDF", "survey_dataset_bytes"]

#: File name of the dataset in a survey folder.
SURVEY_NETCDF = "survey.nc"
_RESAMPLING = (f"{SITE_DRAWS} draws per site from its own posterior, seeded by the "
               "site's seed on the stream 'survey_site_draws': grid posteriors by node "
               "weight with a uniform position within the cell, emcee chains by kept "
               "positions after burn-in chosen at random; medians agree with "
               "sites_summary.csv within about 1.25 sd / sqrt(draws)")


def survey_dataset_bytes(plan, folder, records: list[dict], area, units: dict) -> bytes:
    """The bytes of survey.nc (see the module docstring).

    Parameters
    ----------
    plan : run._Plan
        The survey's inputs (study, settings, sites, seeds, manifest).
    folder : SurveyFolder
        Where each site's ``draws.npz`` is read from.
    records : list of dict
        Final site records, in site order.
    area : joint.AreaPosterior or None
        Joint mode's area-wide posterior.
    units : dict of str to str
        Every free parameter of a site and its unit, in column order
        (`run.site_units`).

    Returns
    -------
    bytes
        A NetCDF-4 (HDF5) file, to be written atomically by the caller.
    """
    from ..outputs.identity import lidmelt_version

    def fill(nc) -> None:
        nc.attrs.update(_root_attributes(plan, lidmelt_version()))
        _posterior_group(nc, folder, records, units)
        _constant_group(nc, plan, records)
        if area is not None:
            _area_group(nc, area)

    return netcdf_bytes(fill)


def _posterior_group(nc, folder, records: list[dict], units: dict) -> None:
    n = len(records)
    group = new_group(nc, "posterior", {"chain": 1, "draw": SITE_DRAWS, "site": n}, {
        "inference_library": "lidmelt (grid quadrature or emcee per site)",
        "resampling": _RESAMPLING})
    write_strings(group, "site", ("site",), [r["site"] for r in records])
    values = {name: np.full((1, SITE_DRAWS, n), np.nan) for name in units}
    for k, record in enumerate(records):
        draws = None if record["status"].startswith("failed") else folder.read_draws(
            k, record["site"])
        for name, column in (draws or {}).items():
            if name in values and column.shape == (SITE_DRAWS,):
                values[name][0, :, k] = column
    for name, unit in units.items():
        write_variable(group, name, ("chain", "draw", "site"), values[name], unit)


def _constant_group(nc, plan, records: list[dict]) -> None:
    n = len(records)
    group = new_group(nc, "constant_data", {"site": n})
    write_strings(group, "site", ("site",), [r["site"] for r in records])
    position = [np.nan if r["position_km"] is None else float(r["position_km"])
                for r in records]
    write_variable(group, "position_km", ("site",), np.asarray(position, float), "km")
    group.create_variable("site_seed", ("site",),
                          data=np.asarray([r["seed"] for r in records], np.int64))
    group.create_variable("converged", ("site",),
                          data=np.asarray([bool(r["converged"]) for r in records], np.int8))
    group.create_variable("line", ("site",),
                          data=np.asarray([int(r["line"]) for r in records], np.int64))
    write_strings(group, "status", ("site",), [r["status"] for r in records])
    write_strings(group, "method", ("site",), [r["method"] or "" for r in records])


def _area_group(nc, area) -> None:
    post = area.posterior
    axes = post.grid.axes
    group = nc.create_group("area_posterior")
    group.dimensions = {axis.name: axis.size for axis in axes}
    for axis in axes:
        variable = group.create_variable(axis.name, (axis.name,),
                                         data=np.asarray(axis.values, float))
        variable.attrs["units"] = "degC"
    probability = group.create_variable("probability", tuple(a.name for a in axes),
                                        data=np.asarray(post.weights(), float))
    probability.attrs["meaning"] = "posterior probability of each grid node (sums to 1)"
    group.attrs.update({
        "method": "grid (product of site Tp likelihoods)",
        "hierarchical": int(area.hierarchical), "sites": int(area.sites)})


def _root_attributes(plan, version: str) -> dict:
    model = plan.study.model
    return {
        "lidmelt_version": version,
        "study_name": plan.study.name,
        "study_sha256": str(plan.manifest.get("study_sha256") or ""),
        "sites_sha256": str(plan.table.sha256),
        "seed": int(plan.seed),
        "mode": plan.mode,
        "parameterization": model.parameterization,
        "melting_region": model.melting_region,
        "thickness_of": plan.settings.thickness_of,
        "draws_per_site": SITE_DRAWS,
        "resampling": _RESAMPLING,
        "caution": CAUTION,
    }
