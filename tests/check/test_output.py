"""InferenceData groups (no noise, no log_likelihood group, estimator flags kept), netCDF round
trip, and the sticking detector on chains built to stick."""

import json

import arviz as az
import jax
import numpy as np

import zhat
from tests.latent_gaussian import make_data, model
from zhat.estimators import importance_sampling
from zhat.kernels import PseudoMarginalMH


def test_inference_data_groups_and_round_trip(key, tmp_path):
    y = make_data(n=6)
    exposed = zhat.expose(model, importance_sampling(4))
    mcmc = zhat.MCMC(
        PseudoMarginalMH(exposed),
        num_warmup=50,
        num_samples=60,
        num_chains=2,
        chain_method="sequential",
        progress_bar=False,
        keep_noise=True,
    )
    mcmc.run(key, y)
    samples = mcmc.get_samples(group_by_chain=True)
    assert "z_noise" in samples  # kept on request, and still left out of the InferenceData
    accepted = mcmc.get_extra_fields(group_by_chain=True)["info.accepted"]
    idata = zhat.check.to_inference_data(
        samples,
        exposed.describe(y),
        sample_stats={"accepted": accepted},
        observed={"y": y},
        attrs={"sampler": "PseudoMarginalMH"},
    )
    assert set(idata.groups()) == {"posterior", "sample_stats", "observed_data"}
    assert list(idata.posterior.data_vars) == ["mu"]
    assert {"z_log_estimate", "accepted"} <= set(idata.sample_stats.data_vars)
    flags = json.loads(idata.posterior.attrs["zhat_estimators"])
    assert flags["z"]["unbiased"] is True and idata.posterior.attrs["zhat_exact"] == 1
    path = tmp_path / "run.nc"
    idata.to_netcdf(str(path))
    back = az.from_netcdf(str(path))
    np.testing.assert_array_equal(back.posterior["mu"].values, np.asarray(samples["mu"]))
    assert json.loads(back.posterior.attrs["zhat_estimators"]) == flags


def test_sticking_detector_flags_a_chain_built_to_stick():
    rng = np.random.default_rng(0)
    moving = rng.normal(size=(1, 1000))
    stuck = moving.copy()
    stuck[0, 300:520] = stuck[0, 300]  # 220 identical draws in a row
    runs = zhat.check.longest_runs(np.concatenate([moving, stuck]))
    assert runs.tolist() == [1, 220]
    [report] = zhat.check.sticking({"theta": np.concatenate([moving, stuck])})
    assert report.stuck and report.limit == 50 and "WARNING" in report.line()
    [fine] = zhat.check.sticking({"theta": moving})
    assert not fine.stuck and fine.line().endswith("ok")


def test_standard_pseudo_marginal_mh_sticks_where_the_noise_is_large(key):
    """With sd(log f̂) ≈ 2.5 standard PM-MH keeps one value for long runs (Andrieu & Roberts
    2009 discuss the mechanism); the detector must see it."""
    y = make_data(n=10)
    exposed = zhat.expose(model, importance_sampling(2))
    mcmc = zhat.MCMC(
        PseudoMarginalMH(exposed), num_warmup=300, num_samples=2000, progress_bar=False
    )
    mcmc.run(jax.random.fold_in(key, 3), y)
    [report] = zhat.check.sticking(mcmc.get_samples(group_by_chain=True))
    assert report.stuck, report.line()
