"""Moth counts at light traps: a Poisson model with a random effect per trap, integrated out.

Invented scenario and data. A field team runs 12 light traps along a valley for 8 nights and
counts one moth species each night. Counts rise with the night's temperature, and each trap has
its own level (aspect, nearby hedges) that nobody measured:

    count[t, j] ~ Poisson(exp(a + b · temperature[t, j] + effect[t])),   effect[t] ~ N(0, s²).

The likelihood of a trap's counts needs ∫ over its effect, which has no closed form. zhat
integrates each trap's effect out with an importance-sampling estimator (unbiased, smooth), and
samples (a, b, s) together with the estimator's noise: NUTS moves the parameters with the noise
held fixed, elliptical slice sampling moves the noise with the parameters held fixed.

Run: ``make demo`` (or ``python examples/moth_traps.py``).
"""

from __future__ import annotations

import time

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist

import zhat
from zhat.estimators import importance_sampling
from zhat.kernels import pseudo_marginal_gibbs

TRUE = {"a": 1.2, "b": 0.45, "s": 0.6}
NUM_TRAPS, NUM_NIGHTS, DRAWS_PER_TRAP = 12, 8, 24


def invented_counts(seed: int = 2026) -> tuple[np.ndarray, np.ndarray]:
    """Night temperatures (standardised) and counts drawn from the model at ``TRUE``."""
    rng = np.random.default_rng(seed)
    temperature = rng.normal(0.0, 1.0, (NUM_TRAPS, NUM_NIGHTS))
    effect = rng.normal(0.0, TRUE["s"], (NUM_TRAPS, 1))
    rate = np.exp(TRUE["a"] + TRUE["b"] * temperature + effect)
    return temperature, rng.poisson(rate)


def model(temperature: jnp.ndarray, counts: jnp.ndarray) -> None:
    a = numpyro.sample("a", dist.Normal(0.0, 2.0))
    b = numpyro.sample("b", dist.Normal(0.0, 1.0))
    s = numpyro.sample("s", dist.HalfNormal(1.0))

    def log_joint(effect: jnp.ndarray) -> jnp.ndarray:
        """One term per trap: log p(counts of trap t, effect t | a, b, s)."""
        log_rate = a + b * temperature + effect[:, None]
        counts_term = dist.Poisson(jnp.exp(log_rate)).log_prob(counts).sum(axis=1)
        return dist.Normal(0.0, s).log_prob(effect) + counts_term

    zhat.integrate_out(
        "trap_effects",
        log_joint,
        (NUM_TRAPS,),
        proposal=(0.0, s),
        estimator=importance_sampling(DRAWS_PER_TRAP, per_group=True),
    )


def main() -> None:
    temperature, counts = invented_counts()
    data = (jnp.asarray(temperature), jnp.asarray(counts))
    print(__doc__.split("\n\n")[1].replace("\n", " "))
    print(
        f"\n{NUM_TRAPS} traps × {NUM_NIGHTS} nights, {int(counts.sum())} moths counted; "
        f"estimator: importance sampling with {DRAWS_PER_TRAP} draws per trap.\n"
    )
    exposed = zhat.expose(model)
    mcmc = zhat.MCMC(
        pseudo_marginal_gibbs(exposed),
        num_warmup=800,
        num_samples=1500,
        num_chains=2,
        chain_method="sequential",
        progress_bar=False,
    )
    start = time.perf_counter()
    mcmc.run(jax.random.key(11), *data)
    seconds = time.perf_counter() - start

    samples = mcmc.get_samples(group_by_chain=True)
    means = {k: float(np.mean(samples[k])) for k in ("a", "b", "s")}
    noise = zhat.check.estimator_noise(jax.random.key(3), exposed, means, *data)
    print("Posterior (2 chains × 1500 draws after 800 warmup):")
    print(zhat.check.posterior_summary(samples, exposed.describe(*data), noise, truth=TRUE))
    print(f"\nSampling took {seconds:.1f} s (including compilation).")


if __name__ == "__main__":
    main()
