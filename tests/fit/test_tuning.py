"""Hooks from a point estimate into sampling: initial values, reference points, the log estimate
as a differentiable function, and the number of draws tuned to a target sd(log f̂).

References: the latent-Gaussian model of ``tests/latent_gaussian.py`` has the closed-form
marginal y_i | μ ~ N(μ, τ² + σ²) (conjugate normal model), hence the exact score
Σ_i (y_i − μ)/(τ² + σ²). The target sd(log f̂) = 1.2 is from Doucet, Pitt, Deligiannidis & Kohn
(2015), Biometrika 102(2). Tolerances: 4 Monte Carlo standard errors.
"""

import math

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from jax import random
from numpyro.infer import NUTS

import zhat
from tests.latent_gaussian import SIGMA, TAU, make_data, model
from zhat.estimators import importance_sampling, single_auxiliary
from zhat.families import lattice
from zhat.families.lattice import coupling_from_the_past
from zhat.fit import chain_inits, factor_estimate, reference_at, tune_num_draws
from zhat.kernels import pseudo_marginal_gibbs

GRID = lattice.grid(8, 8)


def exact_score(y, mu: float) -> float:
    """d/dμ Σ log N(y_i; μ, τ² + σ²) (closed form)."""
    return float(np.sum(np.asarray(y) - mu) / (TAU**2 + SIGMA**2))


def exact_log_marginal(y, mu: float) -> float:
    v = TAU**2 + SIGMA**2
    return float(np.sum(-0.5 * (np.asarray(y) - mu) ** 2 / v - 0.5 * math.log(2 * math.pi * v)))


def sd_and_error(key, fe, point, n: int) -> tuple[float, float]:
    noise = random.normal(key, (n, *fe.noise_shape))
    values = np.asarray(
        jax.lax.map(jax.jit(lambda u: fe.log_estimate(point, u)), noise, batch_size=8)
    )
    sd = float(np.std(values, ddof=1))
    return sd, sd / math.sqrt(2 * (n - 1))  # normal approximation (common practice)


def ising_model(y):
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 0.6))
    numpyro.sample("y", lattice.ising(GRID, coupling=coupling), obs=y)


def lattice_data() -> np.ndarray:
    noise = random.normal(random.key(7), (1024, GRID.num_sites))
    s, ok, _ = coupling_from_the_past(GRID, 0.0, 0.3, noise)
    assert bool(ok)
    return np.asarray(s).reshape(8, 8)


def test_gradient_at_fixed_noise_is_the_finite_difference(key):
    y = make_data(n=10)
    fe = factor_estimate(model, importance_sampling(8), {"mu": 0.4}, y)
    u = random.normal(key, fe.noise_shape)
    f = lambda mu: fe.log_estimate({"mu": mu}, u)  # noqa: E731
    grad = float(jax.grad(f)(0.4))
    h = 1e-5  # central difference, truncation O(h²) (common practice)
    fd = float((f(0.4 + h) - f(0.4 - h)) / (2 * h))
    assert abs(grad - fd) < 1e-6 * (1 + abs(fd)), (grad, fd)


def test_gradients_over_the_noise_give_the_exact_score(key):
    y, mu = make_data(n=10), 0.4
    score = exact_score(y, mu)
    log_f = exact_log_marginal(y, mu)

    def gradients(draws: int, key, n: int = 4000):
        fe = factor_estimate(model, importance_sampling(draws), {"mu": mu}, y)
        noise = random.normal(key, (n, *fe.noise_shape))
        value_grad = jax.jit(jax.value_and_grad(lambda m, u: fe.log_estimate({"mu": m}, u)))
        values, grads = jax.lax.map(lambda u: value_grad(mu, u), noise, batch_size=50)
        return np.asarray(values), np.asarray(grads)

    # E_u[f̂] = f for every μ and u's law does not depend on μ, so E_u[f̂ ∇log f̂] = ∇f:
    # E_u[exp(log f̂ − log f) ∇log f̂] is the exact score (differentiation under the integral)
    values, grads = gradients(16, random.fold_in(key, 1))
    weighted = np.exp(values - log_f) * grads
    se = np.std(weighted, ddof=1) / math.sqrt(weighted.size)
    assert abs(weighted.mean() - score) <= 4 * se, (weighted.mean(), se, score)
    # the plain mean of ∇log f̂ is biased (log of an average) and approaches the score as the
    # number of draws grows: the bias falls significantly from 1 to 8 to 64 draws
    biases = []
    for i, draws in enumerate((1, 8, 64)):
        _, g = gradients(draws, random.fold_in(key, 2 + i))
        biases.append((abs(g.mean() - score), np.std(g, ddof=1) / math.sqrt(g.size)))
    for (far, far_se), (near, near_se) in zip(biases, biases[1:], strict=False):
        assert near + 4 * near_se < far - 4 * far_se, biases


def test_tuner_reaches_the_target_for_importance_sampling(key):
    y, point = make_data(n=10), {"mu": 0.9}
    tuned = tune_num_draws(random.fold_in(key, 1), importance_sampling, model, point, y)
    assert tuned.num_draws > 1 and tuned.history[0][0] == 1 and tuned.history[0][1] > 1.2
    assert abs(tuned.sd - 1.2) <= 2 * tuned.sd_error, tuned  # the tuner's own criterion
    # a fresh measurement at the chosen number agrees with what the tuner reported
    fe = factor_estimate(model, tuned.estimator, point, y)
    sd, err = sd_and_error(random.fold_in(key, 2), fe, point, 2000)
    assert abs(sd - tuned.sd) <= 4 * math.hypot(err, tuned.sd_error), (sd, err, tuned)
    assert abs(sd - 1.2) <= 4 * math.hypot(err, tuned.sd_error) + 2 * tuned.sd_error, (sd, tuned)


def test_tuner_reaches_the_target_for_a_lattice_estimator(key):
    y, point = lattice_data(), {"coupling": 0.3}

    def estimator(num_draws):
        return single_auxiliary(num_draws, sampler="gibbs", sweeps=20, reference={"coupling": 0.45})

    tuned = tune_num_draws(random.fold_in(key, 3), estimator, ising_model, point, y, num_noise=300)
    assert tuned.num_draws > 1 and tuned.history[0][1] > 1.2, tuned.history
    assert abs(tuned.sd - 1.2) <= 2 * tuned.sd_error, tuned
    fe = factor_estimate(ising_model, tuned.estimator, point, y)
    sd, err = sd_and_error(random.fold_in(key, 4), fe, point, 1000)
    assert abs(sd - tuned.sd) <= 4 * math.hypot(err, tuned.sd_error), (sd, err, tuned)


def test_tuner_says_when_the_target_is_out_of_reach(key):
    y = make_data(n=10)
    with pytest.raises(ValueError, match="max_draws=2"):
        tune_num_draws(key, importance_sampling, model, {"mu": 0.9}, y, max_draws=2)
    with pytest.raises(ValueError, match="lacks the latent sites"):
        tune_num_draws(key, importance_sampling, model, {"nu": 0.9}, y)


def test_reference_at_the_point_makes_the_ratios_one():
    y, point = lattice_data(), {"coupling": 0.3}
    reference = reference_at(ising_model, point, y)
    assert set(reference) == {"coupling"} and float(reference["coupling"]) == 0.3
    # with θ̂ = θ every ratio g(x; θ̂)/g(x; θ) is 1, so log f̂ = log g(y; θ) exactly
    estimator = single_auxiliary(4, sampler="gibbs", sweeps=5, reference=reference)
    fe = factor_estimate(zhat.expose(ising_model, estimator), estimator, point, y)
    log_g = lattice.ising(GRID, coupling=0.3).log_potential(y)
    u = random.normal(random.key(1), fe.noise_shape)
    np.testing.assert_allclose(fe.log_estimate(point, u), log_g, rtol=1e-12)


def test_chain_inits_start_zhat_and_numpyro_chains(key):
    y = make_data(n=10)
    exposed = zhat.expose(model, importance_sampling(8))
    inits = chain_inits(random.fold_in(key, 1), exposed, {"mu": 0.5}, y, num_chains=2)
    assert inits["mu"].shape == (2,) and inits["z_noise"].shape == (2, 8, 10)
    assert float(inits["mu"][0]) != float(inits["mu"][1])
    assert np.all(np.abs(np.asarray(inits["mu"]) - 0.5) < 0.5)
    mcmc = zhat.MCMC(
        pseudo_marginal_gibbs(exposed),
        num_warmup=5,
        num_samples=5,
        num_chains=2,
        chain_method="parallel",
        progress_bar=False,
    )
    mcmc.run(random.fold_in(key, 2), y, init_params=inits)
    assert np.isfinite(np.asarray(mcmc.get_samples()["mu"])).all()
    # NumPyro's NUTS takes unconstrained values
    free = chain_inits(
        random.fold_in(key, 3), exposed, {"mu": 0.5}, y, num_chains=2, unconstrained=True
    )
    nuts = zhat.MCMC(
        NUTS(exposed),
        num_warmup=5,
        num_samples=5,
        num_chains=2,
        chain_method="parallel",
        progress_bar=False,
    )
    nuts.run(random.fold_in(key, 4), y, init_params=free)
    assert np.isfinite(np.asarray(nuts.get_samples()["mu"])).all()


def test_chain_inits_stay_in_the_support():
    y = lattice_data()
    exposed = zhat.expose(
        ising_model, single_auxiliary(2, sampler="gibbs", sweeps=5, reference={"coupling": 0.3})
    )
    inits = chain_inits(random.key(2), exposed, {"coupling": 0.59}, y, num_chains=8, jitter=2.0)
    c = np.asarray(inits["coupling"])
    assert c.shape == (8,) and np.all((c > 0) & (c < 0.6)) and np.unique(c).size == 8
    same = chain_inits(random.key(2), exposed, {"coupling": 0.3}, y, num_chains=3, jitter=0.0)
    np.testing.assert_allclose(same["coupling"], 0.3, rtol=1e-12)
    with pytest.raises(ValueError, match="outside the support"):
        chain_inits(random.key(2), exposed, {"coupling": 0.9}, y)
    with pytest.raises(TypeError, match="exposed model"):
        chain_inits(random.key(2), ising_model, {"coupling": 0.3}, y)
    assert jnp.issubdtype(inits["y_noise"].dtype, jnp.floating)
