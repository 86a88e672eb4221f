"""The modelling layer: marked factors fail loudly until exposed; ``expose`` adds the noise site,
the estimate and the record; bad input gets errors that name the site and the fix."""

import jax
import jax.numpy as jnp
import numpyro
import numpyro.distributions as dist
import pytest
from numpyro.handlers import seed, trace
from numpyro.infer import MCMC, NUTS
from numpyro.infer.util import log_density

import zhat
from tests.latent_gaussian import make_data, model
from zhat.estimators import importance_sampling


@zhat.unnormalized(name="pair_chain")
def pair_chain(x, coupling):
    """log g(x) = coupling · Σ x_i x_{i+1}: a chain with an unknown normalizer."""
    return coupling * jnp.sum(x[1:] * x[:-1])


def chain_model(x):
    c = numpyro.sample("c", dist.Normal(0.0, 1.0))
    numpyro.sample("x", pair_chain(coupling=c), obs=x)


def test_unexposed_integrated_block_names_site_and_fix(key):
    y = make_data()
    with pytest.raises(zhat.NotExposedError, match=r"site 'z'.*zhat\.expose"):
        MCMC(NUTS(model), num_warmup=2, num_samples=2, progress_bar=False).run(key, y)


def test_unexposed_family_names_site_and_fix(key):
    x = jnp.array([1.0, -1.0, 1.0])
    with pytest.raises(zhat.NotExposedError, match=r"pair_chain.*site 'x'.*zhat\.expose"):
        log_density(seed(chain_model, key), (x,), {}, {"c": 0.3})


def test_expose_adds_noise_site_estimate_and_record(key):
    y = make_data()
    estimator = importance_sampling(num_draws=5)
    exposed = zhat.expose(model, estimator)
    tr = trace(seed(exposed, key)).get_trace(y)
    noise = tr["z_noise"]
    assert not noise["is_observed"]
    assert noise["value"].shape == (5, y.shape[0])
    # the prior is N(0, I): its log density at the value is the standard-normal one
    assert jnp.allclose(
        noise["fn"].log_prob(noise["value"]), dist.Normal(0.0, 1.0).log_prob(noise["value"]).sum()
    )
    # the factor's density is log f̂ at the noise, and the record holds the same value
    factor = tr["z"]["fn"]
    assert tr["z_log_estimate"]["type"] == "deterministic"
    assert jnp.allclose(factor.log_prob(tr["z"]["value"]), tr["z_log_estimate"]["value"])
    assert zhat.noise_sites(tr) == ("z_noise",)
    [info] = exposed.describe(y)
    assert info.site == "z" and info.noise_site == "z_noise" and info.noise_shape == (5, 10)
    assert info.estimator.unbiased and info.estimator.smooth


def test_log_density_of_exposed_model_is_prior_plus_estimate_plus_noise_prior(key):
    y = make_data()
    estimator = importance_sampling(num_draws=4)
    exposed = zhat.expose(model, estimator)
    u = jax.random.normal(key, (4, y.shape[0]))
    mu = 0.3
    got, tr = log_density(exposed, (y,), {}, {"mu": mu, "z_noise": u})
    factor = tr["z"]["fn"]
    expected = (
        dist.Normal(0.0, 2.0).log_prob(mu)
        + factor.log_estimate
        + dist.Normal(0.0, 1.0).log_prob(u).sum()
    )
    assert jnp.allclose(got, expected)


def test_estimator_choice_errors_name_the_fix():
    x = jnp.array([1.0, -1.0, 1.0])
    with pytest.raises(ValueError, match=r"No estimator .* site 'x'.*estimators="):
        trace(seed(zhat.expose(chain_model), 0)).get_trace(x)
    with pytest.raises(TypeError, match="cannot serve a unnormalized family 'pair_chain'"):
        trace(seed(zhat.expose(chain_model, importance_sampling(4)), 0)).get_trace(x)
    with pytest.raises(TypeError, match="one zhat Estimator or a dict"):
        zhat.expose(chain_model, estimators=[importance_sampling(4)])


def test_unobserved_or_plated_factor_is_refused():
    def latent_family():
        numpyro.sample("x", pair_chain(coupling=0.1))

    with pytest.raises(ValueError, match=r"site 'x' is not observed.*obs="):
        trace(seed(zhat.expose(latent_family, importance_sampling(2)), 0)).get_trace()

    def plated(y):
        with numpyro.plate("groups", 3):
            zhat.integrate_out("z", lambda z: -0.5 * jnp.sum(z**2), (2,), proposal=(0.0, 1.0))

    with pytest.raises(ValueError, match=r"site 'z' sits inside a plate or was expanded"):
        trace(seed(zhat.expose(plated, importance_sampling(2)), 0)).get_trace(None)


def test_noise_site_name_collision_is_an_error():
    def clash(y):
        numpyro.sample("z_noise", dist.Normal(0.0, 1.0))
        zhat.integrate_out("z", lambda z: -0.5 * jnp.sum(z**2), (2,), proposal=(0.0, 1.0))

    with pytest.raises(ValueError, match="z_noise"):
        trace(seed(zhat.expose(clash, importance_sampling(2)), 0)).get_trace(None)


def test_unnormalized_rejects_unknown_options():
    with pytest.raises(TypeError, match=r"unknown options \['simulater'\]"):
        zhat.unnormalized(lambda x: x, simulater=None)
