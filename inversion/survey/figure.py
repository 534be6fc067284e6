"""profile.png: site posteriors against position along the study area."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ...forward import get_parameterization
from ...forward.figure_output import DOUBLE_COLUMN
from .job import TP

__all__ = ["profile_figure"]

_LID = "lithosphere_thickness"
_BLUE, _RED, _GREY = "#2b6cb0", "#c0392b", "#7f7f7f"


def _positions(result, table) -> tuple[np.ndarray, str]:
    positions = np.array([np.nan if s.position_km is None else s.position_km
                          for s in table.sites], float)
    usable = np.array([s.error is None for s in table.sites])
    if table.has_positions and np.isfinite(positions[usable]).all():
        return positions, "position along the study area (km)"
    return np.arange(1, len(table) + 1, dtype=float), "site (order in the sites table)"


def _column(summary: pd.DataFrame, name: str, n: int) -> pd.DataFrame:
    rows = summary[summary["parameter"] == name]
    frame = rows[["median", "q2.5", "q16", "q84", "q97.5"]].astype(float)
    return frame.reset_index(drop=True).reindex(range(n))


def _bands(ax, x, frame: pd.DataFrame, color: str, label: str) -> None:
    order = np.argsort(x)
    x = x[order]
    f = frame.iloc[order]
    ok = np.isfinite(f["median"].to_numpy())
    ax.fill_between(x, f["q2.5"], f["q97.5"], where=ok, color=color, alpha=0.18, lw=0,
                    label=f"{label}: 95 % interval", interpolate=False)
    ax.fill_between(x, f["q16"], f["q84"], where=ok, color=color, alpha=0.38, lw=0,
                    label=f"{label}: 68 % interval", interpolate=False)
    median = np.where(ok, f["median"], np.nan)
    ax.plot(x, median, color=color, lw=1.2, marker="o" if len(x) <= 80 else None, ms=3,
            label=f"{label}: median")


def _area_band(ax, area: pd.DataFrame | None) -> None:
    if area is None:
        return
    row = area[area["parameter"] == TP].iloc[0]
    what = "area mean" if "tp_spread" in set(area["parameter"]) else "area-wide Tp"
    ax.axhspan(row["q2.5"], row["q97.5"], color=_RED, alpha=0.15, lw=0,
               label=f"{what}: 95 % interval")
    ax.axhspan(row["q16"], row["q84"], color=_RED, alpha=0.3, lw=0,
               label=f"{what}: 68 % interval")
    label = f"{what}: median {row['median']:.0f} °C"
    if "tp_spread" in set(area["parameter"]):
        spread = area[area["parameter"] == "tp_spread"].iloc[0]
        label += f" (site spread {spread['median']:.0f} °C)"
    ax.axhline(row["median"], color=_RED, lw=1.4, label=label)


def _alone(ax, x, records) -> None:
    """Each site's Tp on its own data (joint mode): median and 95 % interval."""
    rows = [r.get("tp_alone") for r in records]
    if not any(rows):
        return
    get = lambda key: np.array([np.nan if r is None else r[key] for r in rows])  # noqa: E731
    median = get("median")
    ax.errorbar(x, median, yerr=[median - get("q2.5"), get("q97.5") - median], fmt="o",
                ms=3, color=_GREY, lw=0.8, capsize=2,
                label="site on its own data: median, 95 %")


def _mark_pressure(ax, x, frame: pd.DataFrame, has_pressure: np.ndarray) -> None:
    if has_pressure.any():
        ax.plot(x[has_pressure], frame["median"].to_numpy()[has_pressure], "D", ms=5,
                mfc="white", mec=_BLUE, mew=1.3, ls="none",
                label="site with a melting pressure")


def _mark_failed(axes, x, failed: np.ndarray) -> None:
    for k, ax in enumerate(axes):
        for j, xv in enumerate(x[failed & np.isfinite(x)]):
            ax.axvline(xv, color=_GREY, ls=":", lw=1,
                       label="failed site (see report.md)" if k == 0 and j == 0 else None)


def profile_figure(result, plan):
    """Figure with three panels sharing the position axis: Tp, lid, crust.

    Parameters
    ----------
    result : SurveyResult
    plan : the survey's validated inputs (study, sites table, mode)

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    table = plan.table
    n = len(table)
    x, xlabel = _positions(result, table)
    failed = np.array([r["status"] != "ok" for r in result.records])
    fig, axes = plt.subplots(3, 1, figsize=(DOUBLE_COLUMN, 8.0), sharex=True, layout="constrained")
    has_pressure = np.array([s.has_pressure for s in table.sites])
    _area_band(axes[0], result.area)
    _alone(axes[0], x, result.records)
    if plan.mode == "independent" or plan.settings.hierarchical:
        # shared mode: every site's Tp is the area-wide one, drawn once as the red band
        _bands(axes[0], x, _column(result.summary, TP, n), _BLUE, "site")
        _mark_pressure(axes[0], x, _column(result.summary, TP, n), has_pressure)
    axes[0].set_ylabel("potential temperature (°C)")
    _bands(axes[1], x, _column(result.summary, _LID, n), _BLUE, "site")
    _mark_pressure(axes[1], x, _column(result.summary, _LID, n), has_pressure)
    axes[1].set_ylabel("lid thickness (km)")
    axes[1].invert_yaxis()  # thicker lid plotted deeper
    _bands(axes[2], x, _column(result.summary, plan.predicted, n), _BLUE, "model")
    observed = np.array([np.nan if s.thickness_km is None else s.thickness_km
                         for s in table.sites])
    sigma = np.array([np.nan if s.thickness_sigma_km is None else s.thickness_sigma_km for s in table.sites])
    axes[2].errorbar(x, observed, yerr=sigma, fmt="s", ms=3.5, color="black", capsize=2,
                     lw=0.9, label="observed ± 1σ")
    what = "igneous crust" if plan.settings.thickness_of == "crust" else "melt"
    axes[2].set_ylabel(f"{what} thickness (km)")
    axes[2].set_xlabel(xlabel)
    _mark_failed(axes, x, failed)
    for ax in axes:
        ax.grid(alpha=0.3)
        ax.legend(fontsize=7.5, loc="upper left", bbox_to_anchor=(1.01, 1.0),
                  frameon=False)
    mode = {"independent": "each site on its own",
            "joint": "hierarchical: site Tp around an area mean"
            if plan.settings.hierarchical else "joint: one Tp shared by every site"}
    melting = get_parameterization(plan.study.model.parameterization).title
    fig.suptitle(f"{plan.study.name} — {n} sites, {mode[plan.mode]}\n"
                 f"{melting} melting; scientific estimates that depend on the chosen "
                 "parameterization", fontsize=10)
    return fig
