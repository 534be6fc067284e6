"""The master seed: one check, and one named random stream for every random choice.

Every random choice of a run comes from the master seed (``[sampler] seed`` or
``--seed``) through a *named stream*: ``stream(seed, "walker_start")`` is a
`numpy.random.SeedSequence` that belongs to that use alone. Each name has its own first
spawn key (the table below), so two names never share a stream; a name used once per
item (a scenario, a site) takes the item's index as a second key. A stream with key
``(k,)`` is the k-th child of ``SeedSequence(seed).spawn(...)`` (numpy's definition of
spawning), so the streams that existed under spawn indices keep their numbers.

==================== ==== ===============================================================
name                 key  used for
==================== ==== ===============================================================
sampler_moves        0    emcee's generator (`fitting.run`)
walker_start         1    starting positions and the MAP search (`fitting.start`)
predictive_draws     2    the kept positions behind figures and checks
                          (`Posterior.predictive_draws`)
predictive_check     3    data replicated for the posterior predictive check
                          (`results.checks.posterior_checks`)
no_melt_draws        4    prior draws of the no-melt warning (`fitting.convergence`)
scenario_nested      5, i the nested sampler of scenario i (`comparison.run`)
scenario_check       6    the fit check of a compared scenario (`comparison.run`)
scenario_figure      7    data replicated for the comparison figure (`comparison.figure`)
ranking_spread       8    the spread of scenario probabilities (`comparison.ranking`)
survey_site          9, k the seed of site k of a survey (`survey.run`)
site_grid_draws      10   draws from a site's grid posterior (`survey.job`; the site's seed)
netcdf_prior_draws   11   the prior group of posterior.nc (`results.netcdf`)
survey_site_draws    12   a site's posterior draws kept for survey.nc (`survey.job`; the
                          site's seed)
==================== ==== ===============================================================

A new use gets a new name at the end of the table; never reuse or renumber a key, or
results of earlier versions stop being reproducible.
"""

from __future__ import annotations

from numbers import Integral

from ..errors import InputError

__all__ = ["SEED_LIMIT", "STREAMS", "check_seed", "generator", "integer_seed", "stream"]

#: Seeds are whole numbers from 0 to SEED_LIMIT - 1 (what numpy's legacy generator, which
#: emcee uses, accepts).
SEED_LIMIT = 2**32

#: Stream name -> its first spawn key (see the module docstring).
STREAMS = {
    "sampler_moves": 0,
    "walker_start": 1,
    "predictive_draws": 2,
    "predictive_check": 3,
    "no_melt_draws": 4,
    "scenario_nested": 5,
    "scenario_check": 6,
    "scenario_figure": 7,
    "ranking_spread": 8,
    "survey_site": 9,
    "site_grid_draws": 10,
    "netcdf_prior_draws": 11,
    "survey_site_draws": 12,
}


def check_seed(value, *, where: str = "seed") -> int:
    """The seed as an int, or an `InputError` naming `where`.

    Parameters
    ----------
    value : int
        A whole number 0 <= value < 2**32 (a Python or numpy integer). Floats (even 7.0),
        booleans and strings are refused: a seed is never guessed.
    where : str
        The study-file key or argument the seed came from (``"sampler.seed"``,
        ``"seed"``), named in the message.

    Examples
    --------
    >>> check_seed(7)
    7
    >>> check_seed(True)
    Traceback (most recent call last):
    ...
    lidmelt.inversion.errors.InputError: key 'seed': seed True must be a whole number ...
    """
    if isinstance(value, bool) or not isinstance(value, Integral) \
            or not 0 <= value < SEED_LIMIT:
        raise InputError(f"seed {value!r} must be a whole number from 0 to "
                         f"{SEED_LIMIT - 1}", key=where)
    return int(value)


def stream(seed: int, name: str, *index: int):
    """The `numpy.random.SeedSequence` of the stream `name` of master seed `seed`.

    Parameters
    ----------
    seed : int
        The master seed (checked with `check_seed`).
    name : str
        A key of `STREAMS`.
    *index : int
        The item's position for per-item streams (a scenario, a site).

    Returns
    -------
    numpy.random.SeedSequence
    """
    import numpy as np

    if name not in STREAMS:
        raise KeyError(f"no random stream is named {name!r}; add it to seeds.STREAMS")
    return np.random.SeedSequence(check_seed(seed),
                                  spawn_key=(STREAMS[name], *(int(i) for i in index)))


def generator(seed: int, name: str, *index: int):
    """A `numpy.random.Generator` on the stream `name` (see `stream`)."""
    import numpy as np

    return np.random.default_rng(stream(seed, name, *index))


def integer_seed(seed: int, name: str, *index: int) -> int:
    """A seed for a library that takes an integer (emcee, nautilus, a site's run).

    The first 32-bit word of the stream's state, so it is itself a valid master seed.
    """
    return int(stream(seed, name, *index).generate_state(1)[0])
