"""Synthetic survey inputs shared by the survey tests (invented sites, known truth)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from lidmelt.inversion.survey import load_survey_study
from lidmelt.inversion.survey.simulate import simulate_sites

STUDY = """\
[study]
name = "synthetic survey"

[model]
parameterization = "katz2003"

[parameters]
potential_temperature = {{ prior = "uniform", min = 1250.0, max = 1600.0 }}
lithosphere_thickness = {{ prior = "uniform", min = 5.0, max = 100.0 }}
water = {{ value = 100.0 }}
{extra_parameters}
[survey]
equilibration = "top"
{extra_survey}
[sampler]
seed = 11
{extra_sampler}
"""


def write_study(folder: Path, *, extra_parameters: str = "", extra_survey: str = "",
                extra_sampler: str = "") -> Path:
    path = Path(folder) / "study.toml"
    path.write_text(STUDY.format(extra_parameters=extra_parameters,
                                 extra_survey=extra_survey, extra_sampler=extra_sampler),
                    encoding="utf-8")
    return path


def write_sites(folder: Path, study_path: Path, truth: pd.DataFrame, seed: int) -> Path:
    study, settings = load_survey_study(study_path)
    table = simulate_sites(study, settings, truth, np.random.default_rng(seed))
    for column in ("pressure_gpa", "pressure_sigma_gpa"):
        if column in table:
            table[column] = table[column].map(lambda v: "" if pd.isna(v) else repr(v))
    path = Path(folder) / "sites.csv"
    table.to_csv(path, index=False, lineterminator="\n")
    return path


def truth_table(tp, lids, *, pressure_every: int = 2, sigma: float = 0.4) -> pd.DataFrame:
    lids = np.asarray(lids, float)
    tp = np.broadcast_to(np.asarray(tp, float), lids.shape)
    pressure = np.full(lids.size, np.nan)
    pressure[::pressure_every] = 0.1
    return pd.DataFrame({"site": [f"S{k + 1:02d}" for k in range(lids.size)],
                         "position_km": 10.0 * np.arange(lids.size),
                         "potential_temperature": tp, "lithosphere_thickness": lids,
                         "thickness_sigma_km": sigma, "pressure_sigma_gpa": pressure})


def median_agrees(draws: np.ndarray, median: float) -> bool:
    # the large-sample standard error of a sample median is sqrt(pi/2) sd / sqrt(n)
    # (common practice); 4 of them make a false failure about 1 in 16 000
    n = draws.size
    return abs(float(np.median(draws)) - median) <= 4 * 1.2533 * np.std(draws) / np.sqrt(n)


def check_survey_nc(folder: Path, result) -> None:
    """survey.nc has a site dimension and per-site medians agree with the summary."""
    import xarray as xr

    from lidmelt.inversion.survey.job import SITE_DRAWS

    with xr.open_dataset(folder / "survey.nc", group="posterior") as post:
        assert post.sizes["site"] == len(result.records) and post.sizes["draw"] == SITE_DRAWS
        assert list(post["site"].values) == [r["site"] for r in result.records]
        assert post["potential_temperature"].attrs["units"] == "degC"
        assert "survey_site_draws" in post.attrs["resampling"]
        summary = result.summary.set_index(["site", "parameter"])
        names = [n for n in post.data_vars]
        assert "potential_temperature" in names and "lithosphere_thickness" in names
        for site in post["site"].values:
            for name in names:
                draws = post[name].sel(site=site).values.ravel()
                assert median_agrees(draws, summary.loc[(site, name), "median"]), name
