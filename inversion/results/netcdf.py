"""posterior.nc: a fit's posterior as an ArviZ InferenceData file (NetCDF-4).

Scientists re-plot posteriors in their own style, combine them with other models and
archive them with a paper; ArviZ's InferenceData in NetCDF is the scientific-Python norm
for that. lidmelt writes the file with h5netcdf (a thin layer over h5py, which lidmelt
already needs) rather than ArviZ itself, whose import costs over a second; the file opens
with ``arviz.from_netcdf("posterior.nc")`` and with ``xarray.open_dataset(..., group=...)``.

Groups (walkers are ArviZ's chains; draws are the kept steps after burn-in, unthinned, so
the medians equal those of summary.csv):

``posterior``
    Every free parameter and every derived quantity, dims ``(chain, draw)``, with units.
``log_likelihood``
    One variable per observation block, dims ``(chain, draw, <block>_row)``: the
    pointwise log-likelihood of each row, the values PSIS-LOO uses; summed over rows and
    blocks they give the sampler's log-likelihood of each draw.
``observed_data``
    Each block's observed values and their 1-sigma errors, dims ``(<block>_row,)``.
``prior``
    Independent draws from each free parameter's prior, dims ``(chain, draw)``.

Root attributes: lidmelt version, study name and sha256, seed, parameterization,
melting region, what the crust rows were compared with, and the usual caution.
"""

from __future__ import annotations

import io
import re

import numpy as np

from ..fitting.log_posterior import DERIVED, UNITS

__all__ = ["NETCDF_FILE", "PRIOR_DRAWS", "inference_data_bytes", "pointwise_log_likelihood"]

NETCDF_FILE = "posterior.nc"
#: Draws from the prior written to the ``prior`` group.
PRIOR_DRAWS = 2000
#: The caution every NetCDF file lidmelt writes carries in its attributes.
CAUTION = ("Scientific estimates that depend on the chosen melting parameterization and "
           "assumptions (docs/model.md); no basis on their own for hazard or resource "
           "decisions.")
_CHUNK = 4096  # draws per pointwise log-likelihood evaluation (bounded memory)


def inference_data_bytes(posterior, *, version: str | None = None) -> bytes:
    """The bytes of posterior.nc for a fitted `Posterior` (see the module docstring).

    Parameters
    ----------
    posterior : inversion.Posterior
    version : str, optional
        lidmelt version recorded in the attributes.

    Returns
    -------
    bytes
        A NetCDF-4 (HDF5) file, to be written atomically by the caller.
    """
    def fill(nc) -> None:
        nc.attrs.update(_root_attributes(posterior, version))
        kept = _kept_draws(posterior)
        _posterior_group(nc, posterior, kept)
        _log_likelihood_group(nc, posterior, kept)
        _observed_group(nc, posterior)
        _prior_group(nc, posterior)

    return netcdf_bytes(fill)


def netcdf_bytes(fill) -> bytes:
    """The bytes of a NetCDF-4 file that ``fill(nc)`` writes into (an h5netcdf File)."""
    import h5netcdf  # noqa: PLC0415  (h5py underneath: loaded only when writing)

    buffer = io.BytesIO()
    with h5netcdf.File(buffer, "w") as nc:
        fill(nc)
    return buffer.getvalue()


def _kept_draws(posterior) -> np.ndarray:
    """Free-parameter values of every kept position, shape (walkers, steps, ndim)."""
    return np.swapaxes(posterior.chain[posterior.discard:], 0, 1)


def new_group(nc, name: str, dims: dict[str, int], attrs: dict | None = None):
    """A group with its dimensions, index coordinates for ``chain`` and ``draw``, attrs.

    No "created_at": the same run gives the same bytes (run.json holds the times).
    """
    group = nc.create_group(name)
    group.dimensions = dims
    for dim, size in dims.items():
        if dim in ("chain", "draw"):
            group.create_variable(dim, (dim,), data=np.arange(size, dtype=np.int64))
    group.attrs.update(attrs or {})
    return group


def _group(nc, name: str, dims: dict[str, int]):
    return new_group(nc, name, dims, {"inference_library": "emcee"})


def write_strings(group, name: str, dims: tuple, values) -> None:
    """A variable of text labels (site names, row labels)."""
    import h5py  # noqa: PLC0415

    group.create_variable(name, dims, dtype=h5py.string_dtype(),
                          data=np.asarray([str(v) for v in values], dtype=object))


def write_variable(group, name: str, dims: tuple, data, unit: str | None = None) -> None:
    """A numeric variable, with its unit as the ``units`` attribute when it has one."""
    variable = group.create_variable(name, dims, data=np.asarray(data))
    if unit is not None:
        variable.attrs["units"] = unit


def _posterior_group(nc, posterior, kept: np.ndarray) -> None:
    chains, draws, _ = kept.shape
    group = _group(nc, "posterior", {"chain": chains, "draw": draws})
    units = posterior.logpost.units
    for j, name in enumerate(posterior.names):
        write_variable(group, name, ("chain", "draw"), kept[..., j], units.get(name))
    derived = np.swapaxes(posterior.derived_chain[posterior.discard:], 0, 1)
    for j, name in enumerate(DERIVED):
        write_variable(group, name, ("chain", "draw"), derived[..., j], UNITS.get(name))


def _row_dimension(block_name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_]", "_", block_name) + "_row"


def pointwise_log_likelihood(logpost, kept: np.ndarray) -> np.ndarray:
    """Pointwise log-likelihood of every kept draw, shape (chains, draws, rows).

    Each distinct position is evaluated once: a walker that rejects a proposal stays
    where it was, so an emcee chain repeats positions (about 2 in 3 at the demo's
    acceptance of 0.36), and their rows are copied, not recomputed.
    """
    chains, draws, ndim = kept.shape
    unique, inverse = np.unique(kept.reshape(-1, ndim), axis=0, return_inverse=True)
    rows = len(logpost.rows)
    out = np.empty((unique.shape[0], rows))
    for start in range(0, unique.shape[0], _CHUNK):
        out[start:start + _CHUNK] = logpost.pointwise_log_likelihood(
            unique[start:start + _CHUNK])
    return out[inverse.ravel()].reshape(chains, draws, rows)


def _log_likelihood_group(nc, posterior, kept: np.ndarray) -> None:
    chains, draws, _ = kept.shape
    pointwise = pointwise_log_likelihood(posterior.logpost, kept)
    blocks = posterior.study.observations
    dims = {"chain": chains, "draw": draws}
    dims.update({_row_dimension(b.name): len(b) for b in blocks})
    group = _group(nc, "log_likelihood", dims)
    start = 0
    for block in blocks:
        row_dim = _row_dimension(block.name)
        _row_labels(group, row_dim, block.ids)
        write_variable(group, block.name, ("chain", "draw", row_dim),
                  pointwise[..., start:start + len(block)])
        start += len(block)


def _row_labels(group, row_dim: str, ids) -> None:
    write_strings(group, row_dim, (row_dim,), ids)


def _observed_group(nc, posterior) -> None:
    blocks = posterior.study.observations
    group = _group(nc, "observed_data", {_row_dimension(b.name): len(b) for b in blocks})
    for block in blocks:
        row_dim = _row_dimension(block.name)
        _row_labels(group, row_dim, block.ids)
        for key, values in block.observed().items():
            name = block.name if key == "value" else f"{block.name}.{key}"
            unit = block.unit if key in ("value", "sigma") else None
            write_variable(group, name, (row_dim,), np.asarray(values, float), unit)


def _prior_group(nc, posterior) -> None:
    from ..study.seeds import generator  # noqa: PLC0415

    rng = generator(posterior.seed, "netcdf_prior_draws")  # a stream of its own
    group = _group(nc, "prior", {"chain": 1, "draw": PRIOR_DRAWS})
    units = posterior.logpost.units
    for name, prior in zip(posterior.names, posterior.logpost.priors, strict=True):
        write_variable(group, name, ("chain", "draw"),
                  prior.sample(rng, PRIOR_DRAWS)[None, :], units.get(name))


def _root_attributes(posterior, version: str | None) -> dict:
    study, model = posterior.study, posterior.study.model
    return {
        "lidmelt_version": version or "unknown",
        "study_name": study.name,
        "study_sha256": study.file_hash or "",
        "seed": int(posterior.seed),
        "parameterization": model.parameterization,
        "melting_region": model.melting_region,
        "converged": int(posterior.converged),
        "burn_in_steps": int(posterior.discard),
        "caution": CAUTION,
    }
