"""Model errors: scatter beyond the stated uncertainties, fixed or free.

A block's ``model_error`` (and a melting-pressure block's ``temperature_model_error``) is
added to each row's stated sigma in quadrature, s = sqrt(sigma^2 + e^2): it stands for
what the forward model leaves out (docs/model.md, likelihood). It is either a number
(fixed) or a prior of the same families and syntax as ``[parameters]``, e.g.
``model_error = { prior = "log-uniform", min = 0.01, max = 0.5 }``; a free model error is
sampled with the physical parameters, and every likelihood call then gets its value per
parameter vector (``errors={"model_error": array of shape (n,)}``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from ..errors import InputError
from ..study.priors import Prior, prior_from_spec

__all__ = ["ERROR_DOMAIN", "combine_sigma", "parse_error_setting"]

#: Allowed range of a model error (unit of the data); a prior is cut to it.
ERROR_DOMAIN = (0.0, math.inf)


def parse_error_setting(value, key: str) -> float | Prior:
    """A model-error setting from a study file or code: a number >= 0 or a prior.

    Parameters
    ----------
    value : float, Prior or mapping
        A number, a `Prior`, or a table ``{ value = x }`` / ``{ prior = ..., ... }``.
    key : str
        Dotted study-file key, named in messages (e.g. ``"observations[2].model_error"``).

    Returns
    -------
    float or Prior
        The fixed value or the prior (normal priors cut to [0, inf)).

    Raises
    ------
    InputError
        Not a finite number >= 0, or a prior that breaks a rule of `prior_from_spec` or
        reaches below 0.
    """
    if isinstance(value, Prior):
        low, _ = value.bounds
        if not low >= 0.0:
            raise InputError(f"prior {value.describe()} reaches below 0; a model error is "
                             "a standard deviation", key=key)
        return value
    if isinstance(value, Mapping):
        name = key.rsplit(".", 1)[-1]
        return prior_from_spec(name, dict(value), where=key, domain=ERROR_DOMAIN)
    if isinstance(value, bool) or not isinstance(value, int | float) or \
            not math.isfinite(value):
        raise InputError(f"{value!r} must be a finite number or a prior such as "
                         "{ prior = \"log-uniform\", min = 0.01, max = 0.5 }", key=key)
    if value < 0:
        raise InputError(f"{value:g} must be >= 0 (it is added to sigma in quadrature)",
                         key=key)
    return float(value)


def combine_sigma(stated: np.ndarray, setting: float | Prior, option: str,
                  errors: Mapping | None) -> np.ndarray:
    """Total 1-sigma, sqrt(stated^2 + error^2), for a fixed or a free model error.

    Parameters
    ----------
    stated : numpy.ndarray
        Stated uncertainties, shape (rows,).
    setting : float or Prior
        The block's setting of this model error.
    option : str
        Its name (``"model_error"`` or ``"temperature_model_error"``), the key in `errors`.
    errors : mapping or None
        Values of the free model errors, each a number or shape (n,).

    Returns
    -------
    numpy.ndarray
        Shape (rows,) for a fixed error or a scalar value; (n, rows) for values per
        parameter vector.

    Raises
    ------
    ValueError
        The error is free and `errors` gives no value for it.
    """
    if not isinstance(setting, Prior):
        return np.hypot(stated, setting)
    if errors is None or option not in errors:
        raise ValueError(f"{option} is free ({setting.describe()}); pass its value in "
                         f"errors={{'{option}': ...}}")
    value = np.asarray(errors[option], float)
    return np.hypot(stated, value[..., None] if value.ndim else value)
