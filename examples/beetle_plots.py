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

The model and the invented data live in :mod:`zhat.examples.beetles` (what ``zhat demo`` fits).

Run: ``python examples/beetle_plots.py`` (``zhat demo`` fits the same model and saves the run).
"""

from __future__ import annotations

import time

import jax
import numpy as np

import zhat
from zhat.examples import beetles
from zhat.examples.beetles import ROWS, TRUE, model
from zhat.kernels import Exchange, pseudo_marginal_gibbs


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
    survey = beetles.survey_data()
    data = (survey["presence"], survey["x"])
    print(__doc__.split("\n\n")[1].replace("\n", " "))
    print(f"\n{int(data[0].sum())} of {ROWS * beetles.COLS} plots hold the beetle.\n")

    exposed = zhat.expose(model, beetles.estimator())
    samples = run(pseudo_marginal_gibbs(exposed), data, jax.random.key(1), "pseudo_marginal_gibbs")
    means = {k: np.asarray(v).mean(axis=(0, 1)) for k, v in samples.items() if k != "presence"}
    noise = zhat.check.estimator_noise(jax.random.key(3), exposed, means, *data, num_draws=64)
    print("\nPosterior (2 chains × 2000 draws after 500 warmup):")
    print(zhat.check.posterior_summary(samples, exposed.describe(*data), noise, truth=TRUE))

    exchange = Exchange(model, budget=beetles.BUDGET)
    check = run(exchange, data, jax.random.key(4), "\nexchange algorithm")
    print("Exchange algorithm, for comparison (same model):")
    print(zhat.check.posterior_summary(check, truth=TRUE, sampler=exchange))


if __name__ == "__main__":
    main()
