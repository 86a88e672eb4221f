"""Beetle presence on a grid of forest plots: an autologistic model with a soil-moisture covariate.

Invented scenario and data. A survey team checks 20 × 20 plots of a forest for a ground beetle
(present / absent). Presence is more likely on moist soil, and beetles on one plot make the
neighbouring plots more likely to hold them too (they spread between adjacent plots):

    p(x_i = 1 | neighbours) = σ( β₀ + β₁ · moisture_i + coupling · Σ_{j~i} (x_j − κ_j) ),

with κ_j = σ(β₀ + β₁ · moisture_j): the centred autologistic model, in which β keeps its
meaning as a regression on the probability of presence.

The normalizing constant sums over 2^400 maps and cannot be computed. zhat replaces the
likelihood by the annealed multiple auxiliary-variable estimator driven by exact (perfect) draws
of the model, so the sampled posterior is the exact one, and samples (β₀, β₁, coupling) together
with the estimator's noise. The exchange algorithm, the method most people would script by hand
for this model, runs alongside as a check.

Run: ``make demo`` (or ``python examples/beetle_plots.py``).
"""

from __future__ import annotations

import time

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist

import zhat
from zhat.estimators import multiple_auxiliary
from zhat.families import lattice
from zhat.kernels import Exchange, pseudo_marginal_gibbs

ROWS = COLS = 20
TRUE = {"beta": np.array([-0.4, 0.9]), "coupling": 0.8}
PLOTS = lattice.grid(ROWS, COLS)
BUDGET = 512  # most sweeps one perfect draw may take; at these couplings it needs about 16–64


def soil_moisture(seed: int = 7) -> np.ndarray:
    """A smooth invented moisture surface (a wet valley running across the grid), standardised."""
    rng = np.random.default_rng(seed)
    r, c = np.meshgrid(np.arange(ROWS), np.arange(COLS), indexing="ij")
    surface = np.exp(-(((r - 0.4 * c - 6.0) / 4.0) ** 2)) + 0.2 * rng.normal(size=(ROWS, COLS))
    return ((surface - surface.mean()) / surface.std()).ravel()


def covariates(moisture: np.ndarray) -> jnp.ndarray:
    return jnp.stack([jnp.ones(ROWS * COLS), jnp.asarray(moisture)], axis=1)


def invented_survey(moisture: np.ndarray, key: jax.Array) -> jnp.ndarray:
    """One exact draw of the presence map at ``TRUE`` (coupling from the past)."""
    truth = lattice.autologistic(
        PLOTS,
        coupling=TRUE["coupling"],
        covariates=covariates(moisture),
        coefficients=TRUE["beta"],
        centred=True,
    )
    sampler = truth.family.perfect_sampler
    noise = jax.random.normal(key, sampler.noise_shape(BUDGET))
    presence, exact = sampler.draw(truth.params, noise)
    assert bool(exact), "the perfect sampler did not coalesce; raise its budget"
    return presence.reshape(ROWS, COLS)


def model(presence: jnp.ndarray, x: jnp.ndarray) -> None:
    beta = numpyro.sample("beta", dist.Normal(0.0, 2.0).expand([2]).to_event(1))
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 2.0))
    numpyro.sample(
        "presence",
        lattice.autologistic(
            PLOTS, coupling=coupling, covariates=x, coefficients=beta, centred=True
        ),
        obs=presence,
    )


def run(kernel, data, key, label: str):
    mcmc = zhat.MCMC(
        kernel,
        num_warmup=500,
        num_samples=2000,
        num_chains=2,
        chain_method="sequential",
        progress_bar=False,
    )
    start = time.perf_counter()
    mcmc.run(key, *data)
    samples = jax.block_until_ready(mcmc.get_samples(group_by_chain=True))
    print(f"{label}: {time.perf_counter() - start:.1f} s including compilation")
    return samples


def main() -> None:
    moisture = soil_moisture()
    data = (invented_survey(moisture, jax.random.key(2026)), covariates(moisture))
    print(__doc__.split("\n\n")[1].replace("\n", " "))
    print(f"\n{int(data[0].sum())} of {ROWS * COLS} plots hold the beetle.\n")

    estimator = multiple_auxiliary(8, budget=BUDGET)
    exposed = zhat.expose(model, estimator)
    samples = run(pseudo_marginal_gibbs(exposed), data, jax.random.key(1), "pseudo_marginal_gibbs")
    means = {k: np.asarray(v).mean(axis=(0, 1)) for k, v in samples.items() if k != "presence"}
    noise = zhat.check.estimator_noise(jax.random.key(3), exposed, means, *data, num_draws=64)
    print("\nPosterior (2 chains × 2000 draws after 500 warmup):")
    print(zhat.check.posterior_summary(samples, exposed.describe(*data), noise, truth=TRUE))

    exchange = Exchange(model, budget=BUDGET)
    check = run(exchange, data, jax.random.key(4), "\nexchange algorithm")
    print("Exchange algorithm, for comparison (same model):")
    print(zhat.check.posterior_summary(check, truth=TRUE, sampler=exchange))


if __name__ == "__main__":
    main()
