"""posterior.nc opens in ArviZ and holds the same numbers as the fit's own tables."""

import io

import numpy as np
import pytest

from lidmelt import demo_data, inversion
from lidmelt.inversion.results.netcdf import PRIOR_DRAWS, inference_data_bytes

az = pytest.importorskip("arviz")  # in the test extra; the writer itself does not need it


@pytest.fixture(scope="module")
def fitted():
    study = inversion.Study.from_file(demo_data.study_path())
    # A short run is enough: the test is about bookkeeping, not statistics.
    return inversion.fit(study.with_sampler(walkers=16, ess_target=300, tau_multiple=20,
                                            check_interval=50), quiet=True)


@pytest.fixture(scope="module")
def idata(fitted, tmp_path_factory):
    path = tmp_path_factory.mktemp("nc") / "posterior.nc"
    path.write_bytes(inference_data_bytes(fitted, version="test"))
    return az.from_netcdf(path)


def test_groups_and_shapes(fitted, idata):
    assert set(idata.groups()) >= {"posterior", "log_likelihood", "observed_data", "prior"}
    steps = fitted.chain.shape[0] - fitted.discard
    walkers = fitted.chain.shape[1]
    for name in fitted.names:
        assert idata.posterior[name].shape == (walkers, steps)
    assert idata.prior[fitted.names[0]].shape == (1, PRIOR_DRAWS)
    assert idata.posterior["potential_temperature"].attrs["units"] == "degC"  # CF style


def test_medians_equal_the_summary_table(fitted, idata):
    summary = fitted.summary().set_index("parameter")
    for name in fitted.names:
        np.testing.assert_allclose(float(idata.posterior[name].median()),
                                   summary.loc[name, "median"], rtol=1e-12)


def test_pointwise_log_likelihood_sums_to_the_samplers(fitted, idata):
    # log-likelihood of each kept draw = log-posterior - log-prior (emcee's own numbers)
    kept = fitted.chain[fitted.discard:]
    steps, walkers, ndim = kept.shape
    log_prior = fitted.logpost.log_prior(kept.reshape(-1, ndim)).reshape(steps, walkers)
    expected = (fitted.log_prob[fitted.discard:] - log_prior).T
    total = sum(idata.log_likelihood[b.name].sum(idata.log_likelihood[b.name].dims[-1])
                for b in fitted.study.observations)
    np.testing.assert_allclose(np.asarray(total), expected, rtol=1e-9, atol=1e-9)


def test_loo_runs_on_the_file(idata):
    # with several blocks ArviZ asks which one: each block's LOO is finite
    for name in idata.log_likelihood.data_vars:
        assert np.isfinite(az.loo(idata, var_name=name).elpd_loo)


def test_observed_data_are_the_tables(fitted, idata):
    for block in fitted.study.observations:
        np.testing.assert_array_equal(idata.observed_data[block.name].values, block.values)


def test_attributes_name_the_run(fitted):
    import h5netcdf

    with h5netcdf.File(io.BytesIO(inference_data_bytes(fitted, version="9.9")), "r") as nc:
        assert nc.attrs["lidmelt_version"] == "9.9"
        assert nc.attrs["seed"] == fitted.seed
        assert nc.attrs["parameterization"] == fitted.study.model.parameterization
        assert "estimates" in nc.attrs["caution"]
