"""The work done for one site, on whichever process or cluster worker runs it.

Three kinds of task (`SiteTask.kind`):

``"posterior"`` (independent mode)
    The site's own posterior: by grid quadrature (`inversion.fitting.grid`) when it has at most
    `GRID_MAX_FREE` free parameters, otherwise by emcee (`inversion.fit`).
``"likelihood"`` (joint mode, first pass)
    The site's marginal likelihood of the potential temperature on the axis shared by
    every site, L_i(Tp) = integral of L_i(Tp, phi) pi(phi) d phi, its own parameters phi
    (lid, ...) integrated out by the midpoint rule over their whole prior.
``"conditional"`` (joint mode, second pass)
    The site's posterior given the area-wide answer: its likelihood times a tabulated
    factor on Tp that carries what the other sites say (see `inversion.survey.joint`).

A task never raises for a problem of its site (bad data, no melt possible, a forward
model error): it returns a record with ``status`` saying why. Records hold only plain
values (they are stored as JSON); a task is a pure function of its inputs and seed, so the
numbers do not depend on which worker ran it or when.
"""

from __future__ import annotations

import time
import traceback
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import logsumexp

from ..errors import InputError, NotConvergedWarning
from ..fitting.grid import (
    MASS_CUT,
    Axis,
    Grid,
    GridPosterior,
    coordinate,
    evaluate,
    grid_posterior,
    parameter_axis,
    prior_span,
)
from ..fitting.log_posterior import UNITS, LogPosterior
from ..observations import THICKNESS_OF
from ..study.seeds import generator
from .settings import SurveySettings
from .sites import Site, site_observations

__all__ = ["GRID_MAX_FREE", "QUANTILES", "SITE_DRAWS", "TP", "SiteOutcome", "SiteTask",
           "run_site"]

#: Sites with at most this many free parameters get a grid posterior, others emcee.
GRID_MAX_FREE = 3
#: Parameter shared by every site in joint mode.
TP = "potential_temperature"
#: Quantiles of every summary row: the median, then the 95 % and 68 % interval ends.
QUANTILES = {"median": 0.5, "q2.5": 0.025, "q16": 0.16, "q84": 0.84, "q97.5": 0.975}
#: Largest accepted quadrature error of a log-likelihood or ln Z (nats).
LOG_TOLERANCE = 0.05
_DRAWS = 4000  # posterior draws for the predicted thickness and the melt check
#: Posterior draws of every site kept for survey.nc (stream ``survey_site_draws``).
SITE_DRAWS = 1000
_MIN_MELT_SHARE = 0.5  # below it a site that records melt "cannot make melt"
#: A site "cannot be fitted" when its thickness lies more than this many total sigma
#: (stated sigma and model error in quadrature) from the posterior's predicted thickness
#: (median over the draws): 5 sigma happens by chance once in ~1.7 million sites.
MISFIT_SIGMA = 5.0
_SITE_NODES = {1: 64, 2: 24}  # first try per site-level axis in the likelihood pass
_SCAN_NODES = {1: 48, 2: 24}  # coarse scan for the per-Tp boxes
_ROWS = 64  # Tp nodes per call of the log-likelihood (bounds memory)
_REFINEMENTS = 2  # node doublings when the likelihood pass misses LOG_TOLERANCE


@dataclass(frozen=True)
class SiteTask:
    """Everything a worker needs for one site (picklable).

    Attributes
    ----------
    kind : {"posterior", "likelihood", "conditional"}
    study : inversion.Study
        Model, priors and sampler settings (no observations).
    settings : SurveySettings
    site : Site
    seed : int
        The site's own seed (from the master seed by site order).
    keep_chains : bool
        Return the chain (emcee) or grid for the site folder.
    tp_axis : numpy.ndarray or None
        ``"likelihood"``: Tp nodes (degC) shared by every site.
    tp_factor : (numpy.ndarray, numpy.ndarray) or None
        ``"conditional"``: Tp nodes (degC) and the log-factor on them.
    tp_box : (float, float) or None
        ``"conditional"``: the Tp range (degC) holding the mass.
    """

    kind: str
    study: object
    settings: SurveySettings
    site: Site
    seed: int
    keep_chains: bool = False
    tp_axis: np.ndarray | None = None
    tp_factor: tuple | None = None
    tp_box: tuple | None = None


@dataclass
class SiteOutcome:
    """What a task returns: the JSON-ready record and, optionally, bulky arrays."""

    record: dict
    arrays: dict = field(default_factory=dict)


def run_site(task: SiteTask) -> SiteOutcome:
    """Run one task; site problems become a record with a failed ``status``."""
    started = time.perf_counter()
    outcome = SiteOutcome(_base_record(task))
    try:
        if task.site.error is not None:
            raise InputError(task.site.error)
        study = task.study.with_observations(site_observations(task.site, task.settings))
        # warnings become part of the site's record, never raw lines on standard error
        with warnings.catch_warnings(record=True) as caught, np.errstate(all="ignore"):
            warnings.simplefilter("always")
            _KINDS[task.kind](task, LogPosterior(study), outcome)
        messages = sorted({f"{w.category.__name__}: {w.message}" for w in caught})
        if messages:
            outcome.record["warnings"] = messages
    except (InputError, ValueError, FloatingPointError) as err:
        outcome.record.update(status=f"failed: {err}", converged=False)
    except Exception as err:  # a bug should not stop a thousand-site survey: report it
        where = traceback.extract_tb(err.__traceback__)[-1]
        outcome.record.update(status=f"failed: unexpected {type(err).__name__}: {err} "
                              f"({where.filename}:{where.lineno})", converged=False)
    outcome.record["seconds"] = round(time.perf_counter() - started, 3)
    return outcome


def _base_record(task: SiteTask) -> dict:
    site = task.site
    return {"site": site.name, "index": site.index, "line": site.line,
            "position_km": site.position_km, "seed": task.seed, "phase": task.kind,
            "method": "", "converged": False, "status": "ok"}


# ---- independent mode -------------------------------------------------------------------

def _posterior(task: SiteTask, logpost: LogPosterior, outcome: SiteOutcome) -> None:
    if logpost.ndim <= GRID_MAX_FREE:
        post = _site_grid(logpost.log_likelihood, logpost, task.settings)
        _grid_outcome(task, logpost, post, outcome, method="grid")
    else:
        _mcmc_outcome(task, logpost, outcome)


def _site_grid(log_like, logpost: LogPosterior, settings: SurveySettings, *,
               box=None) -> GridPosterior:
    """The site's grid posterior on ``survey.grid_points`` points, and again with the
    nodes per axis doubled (at most `_REFINEMENTS` times, as in the likelihood pass)
    while its ln Z error (`GridPosterior.log_evidence_error`) exceeds `LOG_TOLERANCE`.

    A free model error gives a site's posterior long tails, so the box that holds the
    mass (`inversion.fitting.grid.find_box`) is wide; in joint mode the other sites then
    squeeze Tp into a core a few cells wide on that box, which the half-resolution check
    cannot resolve.
    """
    points = settings.grid_points
    post = grid_posterior(log_like, logpost.names, logpost.priors, box=box,
                          max_points=points)
    for _ in range(_REFINEMENTS):
        if post.log_evidence_error <= LOG_TOLERANCE:
            break
        points *= 2 ** logpost.ndim
        post = grid_posterior(log_like, logpost.names, logpost.priors, box=box,
                              max_points=points)
    return post


def _grid_outcome(task, logpost, post, outcome: SiteOutcome, *, method: str) -> None:
    error = float(post.log_evidence_error)
    rows = [_row(name, post.quantile(name, list(QUANTILES.values())), logpost.units[name])
            for name in logpost.names]
    draws = post.sample(generator(task.seed, "site_grid_draws"), _DRAWS)
    outcome.record.update(method=method, converged=bool(error <= LOG_TOLERANCE),
                          diagnostics={"grid_shape": list(post.grid.shape),
                                       "log_evidence": float(post.log_evidence),
                                       "log_evidence_error": error})
    if error > LOG_TOLERANCE:
        outcome.record["status"] = (f"not converged: grid quadrature error of ln Z "
                                    f"{error:.3g} > {LOG_TOLERANCE:g}; raise "
                                    "survey.grid_points")
    _finish(task, logpost, rows, draws, outcome)
    kept = post.sample(generator(task.seed, "survey_site_draws"), SITE_DRAWS)
    outcome.arrays["draws"] = dict(zip(logpost.names, kept.T, strict=True))
    if task.keep_chains:
        outcome.arrays["grid"] = {**{f"axis_{a.name}": a.values for a in post.grid.axes},
                                  "log_likelihood": post.log_likelihood}


def _mcmc_outcome(task: SiteTask, logpost: LogPosterior, outcome: SiteOutcome) -> None:
    from ..fitting.run import fit

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)
        posterior = fit(logpost.study, seed=task.seed, quiet=True)
    summary = posterior.summary().set_index("parameter")
    rows = [_row(name, [summary.loc[name, key] for key in QUANTILES], logpost.units[name])
            for name in logpost.names]
    outcome.record.update(method="mcmc", converged=bool(posterior.converged),
                          diagnostics={"steps": int(posterior.chain.shape[0]),
                                       "walkers": int(posterior.chain.shape[1]),
                                       "ess_min": float(np.min(posterior.ess)),
                                       "tau_max": float(np.max(posterior.tau))})
    if not posterior.converged:
        outcome.record["status"] = (
            f"not converged: emcee stopped at the step cap ({posterior.chain.shape[0]} "
            f"steps, smallest ESS {np.min(posterior.ess):.0f}); raise sampler.max_steps")
    _finish(task, logpost, rows, posterior.predictive_draws(_DRAWS), outcome)
    flat = posterior.chain[posterior.discard:].reshape(-1, logpost.ndim)
    pick = generator(task.seed, "survey_site_draws").choice(
        flat.shape[0], SITE_DRAWS, replace=flat.shape[0] < SITE_DRAWS)
    outcome.arrays["draws"] = dict(zip(logpost.names, flat[pick].T, strict=True))
    if task.keep_chains:
        outcome.arrays["chain"] = posterior.result


def _finish(task, logpost, rows, draws: np.ndarray, outcome: SiteOutcome) -> None:
    """Add the predicted thickness row and check the site (`_check_site`)."""
    predicted = _check_site(task, logpost, draws, outcome)
    rows.append(_row(THICKNESS_OF[task.settings.thickness_of],
                     np.quantile(predicted, list(QUANTILES.values()))))
    outcome.record["rows"] = rows


def _check_site(task, logpost, draws: np.ndarray, outcome: SiteOutcome) -> np.ndarray:
    """Fail a site whose posterior makes no melt or cannot fit its thickness.

    The misfit rule (`MISFIT_SIGMA`) judges a site on its own posterior, so the joint
    second pass (a posterior given the other sites) records the misfit but does not fail
    on it: disagreement with the other sites is the consistency check's business.
    Returns the predicted thickness of every draw (km).
    """
    column = logpost.column(draws)
    predicted = np.asarray(getattr(column, THICKNESS_OF[task.settings.thickness_of]), float)
    share = float(np.mean(np.asarray(column.produces_melt, bool)))
    outcome.record["melt_share"] = share
    site = task.site
    if site.records_melt and share < _MIN_MELT_SHARE:
        outcome.record.update(status=(
            f"failed: no melt possible: only {100 * share:.0f} % of the posterior makes "
            f"melt, yet the site records {site.thickness_km:g} km of crust"
            + (" and a melting pressure" if site.has_pressure else "")
            + "; the priors cannot explain the data (mantle too cold or lid too thick)"),
            converged=False)
        return predicted
    z = _thickness_misfit(logpost, draws, predicted)
    outcome.record["thickness_z"] = z
    if abs(z) > MISFIT_SIGMA and task.kind != "conditional":
        outcome.record.update(status=(
            f"failed: cannot be fitted: the site records {site.thickness_km:g} km, "
            f"{abs(z):.1f} sigma {'above' if z > 0 else 'below'} the "
            f"{np.median(predicted):.3g} km its posterior predicts (rule: more than "
            f"{MISFIT_SIGMA:g} sigma); the model and priors cannot make this thickness"),
            converged=False)
    return predicted


def _thickness_misfit(logpost, draws: np.ndarray, predicted: np.ndarray) -> float:
    """Median over the draws of (observed - predicted) / total sigma of the thickness."""
    block = logpost.study.observations[0]  # the crust block (`site_observations`)
    errors = logpost.block_errors(draws)[0]
    sigma = np.asarray(block.total_sigma(errors or None), float)
    sigma = sigma[:, 0] if sigma.ndim == 2 else sigma[0]  # per draw for a free error
    observed = float(np.asarray(block.values, float)[0])
    return float(np.median((observed - predicted) / sigma))


def _row(name: str, values, unit: str | None = None) -> dict:
    values = [float(v) for v in values]
    return {"parameter": name, "unit": unit or UNITS[name],
            **{key: v for key, v in zip(QUANTILES, values, strict=True)}}


# ---- joint mode ------------------------------------------------------------------------

def _likelihood(task: SiteTask, logpost: LogPosterior, outcome: SiteOutcome) -> None:
    """log L_i(Tp) on the shared axis, the site's own parameters integrated out.

    For each Tp node the site's parameters are integrated by the midpoint rule in
    parameter units over the box that holds the mass at that Tp (found on a coarse
    scan, as `inversion.fitting.grid.find_box` does for a whole grid); the rule is
    compared with the rule at half the resolution, and the nodes are doubled (at most
    `_REFINEMENTS` times) until the two agree within `LOG_TOLERANCE` wherever log L_i is
    within `MASS_CUT` of its largest value.
    """
    others = [n for n in logpost.names if n != TP]
    tp = np.asarray(task.tp_axis, float)
    if not others:
        grid = Grid((Axis(TP, tp, np.zeros(tp.size)),))
        values = evaluate(logpost.log_likelihood, grid)
        _check_alone(task, logpost, grid, values, outcome)
        fine, error, nodes = values, 0.0, 0
    else:
        boxes, grid, values = _row_boxes(logpost, tp, others)
        _check_alone(task, logpost, grid, values, outcome)
        nodes = _SITE_NODES.get(len(others), 16)
        coarse = _integrate_rows(logpost, tp, boxes, nodes // 2)
        for step in range(_REFINEMENTS + 1):
            fine = _integrate_rows(logpost, tp, boxes, nodes)
            error = _difference(fine, coarse)
            if error <= LOG_TOLERANCE or step == _REFINEMENTS:
                break
            coarse, nodes = fine, 2 * nodes
    if outcome.record["status"] != "ok":
        outcome.record.update(method="grid", converged=False)
        return
    outcome.record.update(method="grid", converged=bool(error <= LOG_TOLERANCE),
                          tp_log_likelihood=[float(v) for v in fine],
                          diagnostics={"site_nodes": nodes, "quadrature_error": error})
    if error > LOG_TOLERANCE:
        outcome.record["status"] = (f"not converged: quadrature error of the site's Tp "
                                    f"likelihood {error:.3g} > {LOG_TOLERANCE:g} nats")


def _difference(fine: np.ndarray, coarse: np.ndarray) -> float:
    finite = np.isfinite(fine)
    if not finite.any():
        raise InputError("the site's likelihood is zero everywhere on the Tp axis")
    near = finite & (fine >= np.max(fine[finite]) - MASS_CUT)
    return float(np.max(np.abs(fine[near] - coarse[near])))


def _row_boxes(logpost, tp: np.ndarray, others) -> np.ndarray:
    """Per Tp node, the (t_low, t_high) box of each site axis holding the mass.

    Returns shape ``(len(tp), len(others), 2)`` in each axis' integration coordinate
    (`inversion.fitting.grid.coordinate`): the cells within `MASS_CUT` of that row's
    largest posterior mass on a coarse grid over the prior's range, plus two cells each
    side.
    """
    priors = dict(zip(logpost.names, logpost.priors, strict=True))
    scan = _SCAN_NODES.get(len(others), 16)
    axes = [parameter_axis(n, priors[n], prior_span(priors[n]), scan) for n in others]
    grid = Grid((Axis(TP, tp, np.zeros(tp.size)), *axes))
    values = evaluate(logpost.log_likelihood, grid) + grid.log_weights()
    site_axes = tuple(range(1, len(others) + 1))
    with np.errstate(invalid="ignore"):  # a row that is -inf everywhere keeps its range
        keep = values >= np.max(values, axis=site_axes, keepdims=True) - MASS_CUT
    keep |= ~np.isfinite(np.max(values, axis=site_axes, keepdims=True))
    boxes = np.empty((tp.size, len(others), 2))
    for j, axis in enumerate(axes):
        used = keep.any(axis=tuple(a for a in site_axes if a != j + 1))
        first = np.argmax(used, axis=1)
        last = scan - 1 - np.argmax(used[:, ::-1], axis=1)
        boxes[:, j, 0] = axis.edges[np.clip(first - 2, 0, scan)]
        boxes[:, j, 1] = axis.edges[np.clip(last + 3, 0, scan)]
    return boxes, grid, values


def _check_alone(task, logpost, grid: Grid, values: np.ndarray,
                 outcome: SiteOutcome) -> None:
    """`_check_site` on the site's own posterior, from draws of the coarse scan's nodes
    (weights: likelihood, site-axis weights and the Tp prior; the Tp axis is equally
    spaced). A failed site is left out of the area-wide answer."""
    tp_prior = logpost.priors[logpost.names.index(TP)]
    with np.errstate(divide="ignore"):
        log_p = values + np.expand_dims(np.asarray(tp_prior.logpdf(grid.axes[0].values),
                                                   float), tuple(range(1, values.ndim)))
    if not np.isfinite(log_p).any():
        raise InputError("the site's likelihood is zero everywhere in the priors")
    weights = np.exp(log_p - np.max(log_p)).ravel()
    rng = np.random.default_rng(task.seed)
    index = rng.choice(weights.size, size=_DRAWS // 4, p=weights / weights.sum())
    points = grid.points()[index]
    order = [grid.names.index(name) for name in logpost.names]
    _check_site(task, logpost, points[:, order], outcome)


def _integrate_rows(logpost, tp: np.ndarray, boxes: np.ndarray, nodes: int) -> np.ndarray:
    """Midpoint rule with `nodes` cells per site axis inside each Tp node's box, in
    parameter units (log units for a log-uniform prior), weights pi(theta) |cell|."""
    priors = dict(zip(logpost.names, logpost.priors, strict=True))
    others = [n for n in logpost.names if n != TP]
    mid = (np.arange(nodes) + 0.5) / nodes
    width = boxes[:, :, 1] - boxes[:, :, 0]  # (m, d)
    t = boxes[:, :, :1] + width[:, :, None] * mid  # (m, d, nodes)
    values, log_w = {}, {}
    for j, name in enumerate(others):
        _, from_t, in_log = coordinate(priors[name])
        theta = np.asarray(from_t(t[:, j]), float)
        with np.errstate(divide="ignore"):
            log_w[name] = (np.asarray(priors[name].logpdf(theta), float)
                           + (np.log(theta) if in_log else 0.0)
                           + np.log(width[:, j] / nodes)[:, None])
        values[name] = theta
    mesh = np.meshgrid(*([np.arange(nodes)] * len(others)), indexing="ij")
    flat = [m.ravel() for m in mesh]
    out = np.empty(tp.size)
    for start in range(0, tp.size, _ROWS):
        rows = slice(start, start + _ROWS)
        count = tp[rows].size
        theta = np.empty((count, flat[0].size, len(logpost.names)))
        weight = np.zeros((count, flat[0].size))
        for c, name in enumerate(logpost.names):
            if name == TP:
                theta[:, :, c] = tp[rows, None]
                continue
            column = flat[others.index(name)]
            theta[:, :, c] = values[name][rows][:, column]
            weight += log_w[name][rows][:, column]
        with np.errstate(all="ignore"):
            log_l = logpost.log_likelihood(theta.reshape(-1, len(logpost.names)))
        log_l = np.where(np.isnan(log_l), -np.inf, log_l).reshape(count, -1)
        out[rows] = logsumexp(log_l + weight, axis=1)
    return out


def _conditional(task: SiteTask, logpost: LogPosterior, outcome: SiteOutcome) -> None:
    """The site's posterior given the other sites (through the tabulated Tp factor)."""
    nodes, log_factor = (np.asarray(a, float) for a in task.tp_factor)
    factor = CubicSpline(nodes, log_factor)
    column = logpost.names.index(TP)

    def log_like(theta: np.ndarray) -> np.ndarray:
        tp = theta[:, column]
        extra = np.where((tp >= nodes[0]) & (tp <= nodes[-1]), factor(tp), -np.inf)
        return logpost.log_likelihood(theta) + extra

    start = [tuple(task.tp_box) if name == TP else None for name in logpost.names]
    post = _site_grid(log_like, logpost, task.settings, box=start)
    _grid_outcome(task, logpost, post, outcome, method="grid")


_KINDS = {"posterior": _posterior, "likelihood": _likelihood, "conditional": _conditional}
