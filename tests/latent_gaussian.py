"""A latent-Gaussian model whose marginal likelihood is Gaussian in closed form.

    μ ~ N(0, s0²),   z_i | μ ~ N(μ, τ²),   y_i | z_i ~ N(z_i, σ²),   i = 1..n,

so y_i | μ ~ N(μ, τ² + σ²) independently and the posterior of μ is Normal with
precision 1/s0² + n/(τ² + σ²) and mean (Σ y_i/(τ² + σ²)) / precision (conjugate normal model,
e.g. Gelman et al., Bayesian Data Analysis, 3rd ed., §2.5). The data are drawn from the model
with a fixed generator; nothing here is an invented 'scenario'.
"""

from __future__ import annotations

import math

import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist

import zhat

S0, TAU, SIGMA = 2.0, 1.0, 1.0


def make_data(n: int = 10, mu: float = 0.7, seed: int = 1) -> jnp.ndarray:
    rng = np.random.default_rng(seed)
    return jnp.asarray(rng.normal(mu, math.sqrt(TAU**2 + SIGMA**2), n))


def exact_posterior(y: jnp.ndarray) -> tuple[float, float]:
    """Posterior mean and sd of μ (closed form, conjugate normal model)."""
    v = TAU**2 + SIGMA**2
    precision = 1 / S0**2 + y.shape[0] / v
    return float(jnp.sum(y) / v / precision), float(precision**-0.5)


def model(y: jnp.ndarray) -> None:
    """The latent block z is integrated out; the proposal is its prior N(μ, τ²)."""
    mu = numpyro.sample("mu", dist.Normal(0.0, S0))

    def log_joint(z):
        return dist.Normal(mu, TAU).log_prob(z).sum() + dist.Normal(z, SIGMA).log_prob(y).sum()

    zhat.integrate_out("z", log_joint, y.shape, proposal=(mu, TAU))


def marginal_model(y: jnp.ndarray) -> None:
    """The same model with z integrated analytically (the oracle)."""
    mu = numpyro.sample("mu", dist.Normal(0.0, S0))
    numpyro.sample("y", dist.Normal(mu, math.sqrt(TAU**2 + SIGMA**2)), obs=y)
