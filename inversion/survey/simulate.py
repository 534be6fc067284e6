"""Synthetic sites tables drawn from the forward model (demo data, checks, benchmarks)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..fitting.log_posterior import LogPosterior
from .sites import Site, site_observations

__all__ = ["simulate_sites"]


def simulate_sites(study, settings, truth: pd.DataFrame,
                   rng: np.random.Generator) -> pd.DataFrame:
    """A sites table whose values are drawn from the likelihood at known parameters.

    Parameters
    ----------
    study : inversion.Study
        Model settings and fixed parameters (its priors are not used).
    settings : SurveySettings
        Comparison choices (thickness_of, equilibration, model errors).
    truth : pandas.DataFrame
        One row per site: ``site``, ``thickness_sigma_km`` and every free parameter of `study`
        (e.g. ``potential_temperature`` degC, ``lithosphere_thickness`` km); optional
        value of a free model error, by its parameter name (default 0); optional
        ``position_km``; optional ``pressure_sigma_gpa`` (the site then has a pressure).
    rng : numpy.random.Generator

    Returns
    -------
    pandas.DataFrame
        Columns of a sites table (see `inversion.survey.sites`).
    """
    rows = []
    for k, spec in enumerate(truth.to_dict("records")):
        has_p = "pressure_sigma_gpa" in spec and np.isfinite(spec["pressure_sigma_gpa"])
        template = Site(k, str(spec["site"]), k + 2, thickness_km=1.0,
                        thickness_sigma_km=float(spec["thickness_sigma_km"]),
                        pressure_gpa=1.0 if has_p else None,
                        pressure_sigma_gpa=(float(spec["pressure_sigma_gpa"]) if has_p
                                            else None))
        blocks = site_observations(template, settings)
        logpost = LogPosterior(study.with_observations(blocks))
        column = logpost.column(np.array([[spec[n] for n in logpost.physical]], float))
        # a free model error takes its value from the truth (column named like the
        # site's parameter, e.g. crustal_thickness.model_error), else 0
        values = np.array([[float(spec.get(e.name, 0.0)) for e in logpost.errors]])
        errors = logpost.block_errors(np.hstack([np.zeros((1, len(logpost.physical))),
                                                 values]))
        drawn = [block.simulate(column, rng, errors=e or None)
                 for block, e in zip(blocks, errors, strict=True)]
        row = {"site": spec["site"]}
        if "position_km" in spec:
            row["position_km"] = spec["position_km"]
        row.update(thickness_km=round(max(float(drawn[0].values[0]), 0.0), 2),
                   thickness_sigma_km=spec["thickness_sigma_km"])
        if has_p:
            row.update(pressure_gpa=round(float(drawn[1].values[0]), 3),
                       pressure_sigma_gpa=spec["pressure_sigma_gpa"])
        rows.append(row)
    return pd.DataFrame(rows)
