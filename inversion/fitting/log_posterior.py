"""The vectorised log-posterior of a study, as emcee calls it.

A point in parameter space is a row of free-parameter values: the physical parameters
in the order of `Study.free_parameters`, then the sampled settings of the observation
blocks (`Study.block_parameters`: free model errors, a kind's correction choices); the
fixed parameters of the study are filled in, the
prior and the forward model's valid domain are checked (``-inf`` outside either), the
melting column is computed once for all valid rows, and the log-likelihoods of every
observation set are summed (each block given the values of its sampled settings):

    log p(theta | d) = sum_j log pi_j(theta_j) + sum_blocks log L_block(column(theta)) + const

The call returns an array of shape ``(n, 1 + k)``: column 0 is the log-posterior and
columns 1..k the derived quantities of `DERIVED` (emcee "blobs"; NaN where rejected).
"""

from __future__ import annotations

import numpy as np

from ... import forward

from ..study.file import PARAMETER_UNITS, PARAMETERS

__all__ = ["DERIVED", "PARAMETERS", "UNITS", "LogPosterior"]

#: Derived quantities reported with every posterior sample (attributes of the column).
DERIVED = ("onset_depth", "crustal_thickness", "mean_melt_fraction", "mean_melting_pressure")

#: Unit of every parameter and derived quantity ("-" = dimensionless).
UNITS = {**PARAMETER_UNITS, **{name: forward.QUANTITIES[name].unit for name in DERIVED}}

class LogPosterior:
    """Vectorised log-posterior of a study for ``emcee.EnsembleSampler(vectorize=True)``.

    Parameters
    ----------
    study : inversion.Study
        Priors, fixed values, model settings and observation sets.

    Attributes
    ----------
    names : tuple of str
        Free parameters, in the column order of `theta`: the physical ones
        (`physical`), then the sampled block settings (`block_parameters`).
    physical : tuple of str
        The free melt_column inputs, in the order of `Study.free_parameters`.
    block_parameters : tuple of BlockParameter
        The sampled settings of the observation blocks (free model errors, correction
        choices), in the order of `Study.block_parameters`.
    errors : tuple of BlockParameter
        The earlier name of `block_parameters`.
    units : dict of str to str
        Unit of every free parameter and derived quantity.
    ndim : int
        Number of free parameters.
    nblobs : int
        Number of derived quantities (``len(DERIVED)``).

    Examples
    --------
    The call maps an ``(n, ndim)`` array to ``(n, 1 + nblobs)``::

        logpost = LogPosterior(study)
        out = logpost(theta)          # out[:, 0] log-posterior, out[:, 1:] derived
    """

    def __init__(self, study) -> None:
        if not study.observations:  # e.g. a survey study file: its sites bring the data
            from ..errors import InputError

            raise InputError("the study has no observations to fit; add [[observations]] "
                             "blocks (a study for `lidmelt survey` gets its data from the "
                             "sites table: run that instead)", file=study.source,
                             key="observations")
        self.study = study
        self.physical = tuple(study.free_parameters)
        self.block_parameters = tuple(study.block_parameters)
        self.errors = self.block_parameters
        self.names = tuple(study.sampled_parameters)
        self.ndim = len(self.names)
        self.nblobs = len(DERIVED)
        self.units = {**{name: UNITS[name] for name in (*self.physical, *DERIVED)},
                      **{p.name: p.unit for p in self.block_parameters}}
        self._priors = [study.priors[name] for name in self.physical] + [
            p.prior for p in self.block_parameters]

    @property
    def priors(self) -> list:
        """The prior of each free parameter, in the order of `names`."""
        return list(self._priors)

    def __call__(self, theta: np.ndarray) -> np.ndarray:
        """Log-posterior and derived quantities, shape ``(n, 1 + nblobs)``."""
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        out = np.full((theta.shape[0], 1 + self.nblobs), np.nan)
        out[:, 0] = -np.inf
        log_prior = self.log_prior(theta)
        ok = np.isfinite(log_prior) & self.in_domain(theta)
        if np.any(ok):
            values = self.parameters(theta[ok])
            column = self._column(values)
            out[ok, 0] = log_prior[ok] + self._log_likelihood(column, values, theta[ok])
            out[ok, 1:] = derived_quantities(column)
        return out

    def log_prior(self, theta: np.ndarray) -> np.ndarray:
        """Sum of the log prior densities, shape ``(n,)`` (``-inf`` outside a support)."""
        theta = np.atleast_2d(theta)
        total = np.zeros(theta.shape[0])
        for j, prior in enumerate(self._priors):
            total += prior.logpdf(theta[:, j])
        return total

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """Sum of the observation log-likelihoods, shape ``(n,)``; ``-inf`` off-domain."""
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        out = np.full(theta.shape[0], -np.inf)
        ok = self.in_domain(theta)
        if np.any(ok):
            values = self.parameters(theta[ok])
            out[ok] = self._log_likelihood(self._column(values), values, theta[ok])
        return out

    @property
    def rows(self) -> list[tuple[str, str]]:
        """``(block name, row id)`` of every observation row, in pointwise order."""
        return [(block.name, row) for block in self.study.observations for row in block.ids]

    def pointwise_log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """Log-likelihood of every observation row, shape ``(n, len(rows))``.

        Blocks in study order, rows in table order (see `rows`); each row of the result
        sums to `log_likelihood`. Off-domain points get ``-inf`` in every row.
        """
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        out = np.full((theta.shape[0], len(self.rows)), -np.inf)
        ok = self.in_domain(theta)
        if np.any(ok):
            values = self.parameters(theta[ok])
            column = self._column(values)
            errors = self.block_values(theta[ok])
            out[ok] = np.concatenate(
                [block.pointwise_log_likelihood(column, parameters=values, errors=e)
                 for block, e in zip(self.study.observations, errors, strict=True)],
                axis=-1)
        return out

    def in_domain(self, theta: np.ndarray) -> np.ndarray:
        """True where every free value is valid, shape ``(n,)``.

        Physical parameters must lie in forward.PARAMETER_DOMAIN, block settings be >= 0
        (their priors keep them inside their own ranges).
        """
        theta = np.atleast_2d(theta)
        ok = np.all(np.isfinite(theta), axis=1)
        k = len(self.physical)
        ok &= np.all(theta[:, k:] >= 0.0, axis=1)
        values = {name: theta[:, j] for j, name in enumerate(self.physical)}
        return ok & forward.in_domain(**values) if values else ok

    def parameters(self, theta: np.ndarray) -> dict[str, np.ndarray]:
        """All five melt_column inputs for each row of `theta`, each shape ``(n,)``."""
        theta = np.atleast_2d(theta)
        n = theta.shape[0]
        values = {name: np.full(n, float(value)) for name, value in self.study.fixed.items()}
        for j, name in enumerate(self.physical):
            values[name] = theta[:, j]
        return values

    def block_values(self, theta: np.ndarray) -> list[dict[str, np.ndarray]]:
        """The sampled settings of each observation block for each row of `theta`.

        One dict per block (in study order), option name -> shape ``(n,)``; empty for a
        block whose settings are all fixed. Passed as ``errors=`` to the block.
        """
        theta = np.atleast_2d(theta)
        out = [{} for _ in self.study.observations]
        for j, setting in enumerate(self.block_parameters, start=len(self.physical)):
            out[setting.block][setting.option] = theta[:, j]
        return out

    def block_errors(self, theta: np.ndarray) -> list[dict[str, np.ndarray]]:
        """The earlier name of `block_values`."""
        return self.block_values(theta)

    def column(self, theta: np.ndarray):
        """The melting columns (forward.melt_column result) for each row of `theta`."""
        return self._column(self.parameters(theta))

    def _column(self, values: dict[str, np.ndarray]):
        model = self.study.model
        return forward.melt_column(
            values["potential_temperature"],
            values["lithosphere_thickness"],
            water=values["water"],
            active_upwelling=values["active_upwelling"],
            solidus_offset=values["solidus_offset"],
            parameterization=model.parameterization,
            melting_region=model.melting_region,
            crust_density=model.crust_density,
            mantle_density=model.mantle_density,
        )

    def _log_likelihood(self, column, values: dict[str, np.ndarray],
                        theta: np.ndarray) -> np.ndarray:
        # `parameters` lets the no-melt penalty slope toward melting (lid vs onset depth).
        total = np.zeros(np.shape(column.melt_thickness))
        for block, errors in zip(self.study.observations, self.block_values(theta),
                                 strict=True):
            total = total + block.log_likelihood(column, parameters=values, errors=errors)
        return total


def derived_quantities(column) -> np.ndarray:
    """Stack the `DERIVED` attributes of a melting column, shape ``(n, len(DERIVED))``."""
    return np.stack([np.asarray(getattr(column, name), dtype=float) for name in DERIVED],
                    axis=-1)
