"""Every sampler on the exposed latent-Gaussian model recovers the exact posterior of μ.

Reference: the closed-form conjugate posterior (tests/latent_gaussian.py). Tolerance: 4 Monte
Carlo standard errors from ArviZ (``mcse`` of the mean and of the sd), fixed keys.
"""

import arviz as az
import jax
import numpy as np
import pytest
from numpyro.infer import NUTS

import zhat
from tests.latent_gaussian import exact_posterior, make_data, model
from zhat.estimators import importance_sampling
from zhat.kernels import PseudoMarginalMH, Slice, pseudo_marginal_gibbs

SAMPLERS = {
    "joint NUTS": lambda m: NUTS(m),
    "gibbs NUTS + elliptical slice": lambda m: pseudo_marginal_gibbs(m),
    "gibbs slice + elliptical slice": lambda m: pseudo_marginal_gibbs(m, theta_kernel=Slice(m)),
    "pseudo-marginal MH": lambda m: PseudoMarginalMH(m),
    "correlated pseudo-marginal MH": lambda m: PseudoMarginalMH(m, correlation=0.95),
}


@pytest.mark.slow
@pytest.mark.parametrize("name", list(SAMPLERS))
def test_sampler_recovers_exact_posterior(key, name):
    y = make_data(n=10)
    exposed = zhat.expose(model, importance_sampling(num_draws=8))
    mcmc = zhat.MCMC(
        SAMPLERS[name](exposed),
        num_warmup=1000,
        num_samples=4000,
        num_chains=2,
        chain_method="parallel",
        progress_bar=False,
    )
    mcmc.run(jax.random.fold_in(key, 7), y)
    draws = np.asarray(mcmc.get_samples(group_by_chain=True)["mu"])
    data = az.convert_to_dataset(draws[..., None] if draws.ndim == 1 else draws)
    mean, sd = exact_posterior(y)
    got_mean, got_sd = float(draws.mean()), float(draws.std())
    se_mean = float(az.mcse(data, method="mean").to_array().squeeze())
    se_sd = float(az.mcse(data, method="sd").to_array().squeeze())
    assert float(az.rhat(data).to_array().squeeze()) < 1.05
    assert abs(got_mean - mean) < 4 * se_mean, (got_mean, mean, se_mean)
    assert abs(got_sd - sd) < 4 * se_sd, (got_sd, sd, se_sd)
