"""Friendships in a rowing club: a random graph model with homophily and transitivity.

Invented scenario and data. The 36 members of a small rowing club train in four crews. Asked
whom they count as a friend, they name each other: a tie is a mutual friendship. Do friends
cluster within crews, do longer-serving members have more friends, and do friends of friends
become friends (transitivity)? The model is an exponential-family random graph,

    p(A | θ) ∝ exp(θ_1 ties + θ_2 same-crew ties + θ_3 Σ_ties (years_i + years_j)
                   + θ_4 weighted shared partners(0.5)),

whose normalizer sums over all 2^630 graphs on 36 nodes (years standardised). zhat fits it
three ways: maximum pseudo-likelihood (fast, standard errors too small), Monte Carlo maximum
likelihood (standard errors from the simulated Fisher information), and the posterior by the
exchange algorithm. Random graphs have no perfect sampler, so the auxiliary graphs come from a
finite run of the tie/no-tie simulator (double Metropolis–Hastings): the posterior is
APPROXIMATE and the summary says so. A posterior-predictive check compares the degree,
shared-partner and distance distributions of replicate networks with the observed one.

Run: ``python examples/rowing_club.py`` (about three minutes).
"""

from __future__ import annotations

import time

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist

import zhat
from zhat import fit
from zhat.families import network
from zhat.kernels import DoubleMetropolisHastings

MEMBERS, CREWS = 36, 4
TRUE = np.array([-3.2, 1.2, 0.3, 0.5])
NAMES = ("ties", "same crew", "years", "shared partners")


def invented_club(seed: int = 7) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Crews, years of membership and a friendship network simulated at ``TRUE``."""
    rng = np.random.default_rng(seed)
    crews = np.repeat(np.arange(CREWS), MEMBERS // CREWS)
    years = np.round(rng.gamma(2.0, 2.5, MEMBERS), 1)
    years = (years - years.mean()) / years.std()  # standardised: coefficients of like size
    d = network.model(MEMBERS, statistics(crews, years), TRUE)
    step = d.family.simulators["tie_no_tie"]
    a = jnp.zeros((MEMBERS, MEMBERS))
    key = jax.random.key(seed)
    for t in range(60):  # 60 × 630 toggles from the empty graph, at TRUE
        a = step.step(
            d.params, a, jax.random.normal(jax.random.fold_in(key, t), step.noise_shape(a))
        )
    return crews, years, np.asarray(a)


def statistics(crews, years):
    return [
        network.edges(),
        network.same_group(crews),
        network.covariate(years),
        network.weighted_shared_partners(0.5),
    ]


def club_model(y, crews, years):
    theta = numpyro.sample(
        "theta",
        dist.Normal(jnp.array([-3.0, 0.0, 0.0, 0.0]), jnp.array([2.0, 1.0, 0.5, 1.0])).to_event(1),
    )
    numpyro.sample("friends", network.model(MEMBERS, statistics(crews, years), theta), obs=y)


def main() -> None:
    crews, years, y = invented_club()
    print(__doc__.split("\n\n")[1].replace("\n", " "))
    ties = int(y.sum() // 2)
    print(f"\n{MEMBERS} members, {ties} friendships (density {ties / (MEMBERS * 35 / 2):.3f}).\n")
    d = network.model(MEMBERS, statistics(crews, years), jnp.zeros(4))

    pl = fit.pseudo_likelihood(d, y)
    print(pl.summary())
    start = time.perf_counter()
    ml = fit.maximum_likelihood(jax.random.key(1), d, y, steps=300, draws=300)
    print(f"\n{ml.summary()}\n  ({time.perf_counter() - start:.1f} s)")

    kernel = DoubleMetropolisHastings(club_model, sweeps=5, simulator="tie_no_tie")
    mcmc = zhat.MCMC(
        kernel,
        num_warmup=1000,
        num_samples=2000,
        num_chains=2,
        chain_method="sequential",
        progress_bar=False,
    )
    args = (jnp.asarray(y), crews, years)
    start = time.perf_counter()
    start_at = jnp.broadcast_to(ml.estimate["coefficients"], (2, 4))  # both chains at the MLE
    mcmc.run(jax.random.key(2), *args, init_params={"theta": start_at})
    seconds = time.perf_counter() - start
    samples = mcmc.get_samples(group_by_chain=True)
    print(
        "\nPosterior by the approximate exchange algorithm (double Metropolis–Hastings, 5 "
        "simulator sweeps per auxiliary graph: APPROXIMATE); 2 chains × 2000 draws after 1000 "
        "warmup; theta = " + ", ".join(NAMES) + ":"
    )
    print(zhat.check.posterior_summary(samples, truth={"theta": TRUE}, sampler=kernel))
    print(f"Sampling took {seconds:.1f} s (including compilation).")

    check = zhat.check.posterior_predictive(
        jax.random.key(4), club_model, samples, *args, num_replicates=100, sweeps=20
    )
    print("\n" + check.text())


if __name__ == "__main__":
    zhat.compile_small_loops()  # before the first computation: the toggle loops compiled whole
    main()
