"""Part "samplers" of the network benchmark: ESS per second on an invented 50-member club.

The network (invented): a walking club of 50 members, simulated once (fixed key) from the model
with statistics edges and weighted_shared_partners(0.5) at coefficients (−3.2, 0.9), by
``burn_in_calls`` calls of the tie/no-tie simulator from the empty graph. Prior: θ ~ N(0, 2²) ×
N(0, 1²). The reference point of the estimators and every chain's start is the Monte Carlo
maximum-likelihood estimate (``zhat.fit.maximum_likelihood``, not timed).

Samplers, each on the same data, chains run one after another (``chains_in_turn``), the
sampling phase timed without compilation (:class:`_common.CompileClock`):

1. **approximate exchange** (double Metropolis–Hastings, Liang 2010): ``sweeps`` simulator calls
   (each one toggle per dyad) from the data per auxiliary graph;
2. **pseudo_marginal_gibbs** (default blocks) on the model exposed with the single auxiliary-
   variable estimator (``num_draws`` graphs, each ``sweeps`` simulator calls from the data);
3. **PM-MH**: standard pseudo-marginal Metropolis–Hastings (fresh noise at every proposal) with
   the same estimator.

All three are APPROXIMATE (no perfect sampler for random graphs): they target slightly different
perturbed posteriors, so their means are printed side by side but not tested against each other.
ESS is ArviZ's bulk ESS, the smaller of the two coefficients'.
"""

from __future__ import annotations

import sys
import time
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist
from jax import random

import zhat
from _common import CompileClock, chains_in_turn, listening, posterior_summary
from zhat import fit
from zhat.estimators import single_auxiliary
from zhat.families import network
from zhat.kernels import DoubleMetropolisHastings, PseudoMarginalMH, pseudo_marginal_gibbs

Array = jax.Array

MEMBERS = 50
TRUE = np.array([-3.2, 0.9])
STATS = (network.edges(), network.weighted_shared_partners(0.5))
PRIOR_SD = np.array([2.0, 1.0])
NAMES = ("edges", "shared_partners")
SETTINGS = {
    "full": {"chains": 2, "warmup": 500, "draws": 2000, "sweeps": 3, "num_draws": 2,
             "burn_in_calls": 200},
    "quick": {"chains": 2, "warmup": 150, "draws": 300, "sweeps": 2, "num_draws": 2,
              "burn_in_calls": 100},
}  # fmt: skip


def club(calls: int) -> np.ndarray:
    d = network.model(MEMBERS, list(STATS), TRUE)
    step = d.family.simulators["tie_no_tie"]
    a = jnp.zeros((MEMBERS, MEMBERS))
    noise = random.normal(random.key(50), (calls,) + tuple(step.noise_shape(a)))
    run = jax.jit(lambda a, z: jax.lax.scan(lambda x, u: (step.step(d.params, x, u), None), a, z))
    return np.asarray(run(a, noise)[0])


def club_model(y):
    prior = dist.Normal(jnp.zeros(PRIOR_SD.size), jnp.asarray(PRIOR_SD))
    theta = numpyro.sample("theta", prior.to_event(1))
    numpyro.sample("g", network.model(MEMBERS, list(STATS), theta), obs=y)


def timed_run(make, y, init, key, clock, fields) -> dict[str, Any]:
    mcmc = make()
    k_warm, k_run = random.split(key)
    start = time.time()
    mcmc.warmup(k_warm, y, init_params=init)
    jax.block_until_ready(mcmc.post_warmup_state)
    middle = time.time()
    mcmc.run(k_run, y, init_params=init, extra_fields=fields)
    draws = np.asarray(jax.block_until_ready(mcmc.get_samples(group_by_chain=True))["theta"])
    extra = {k: np.asarray(v) for k, v in mcmc.get_extra_fields(group_by_chain=True).items()}
    end = time.time()
    seconds = (end - middle) - clock.seconds_between(middle, end)
    per = [posterior_summary(draws[..., k], NAMES[k]) for k in range(len(NAMES))]
    ess = min(p["ess_bulk"] for p in per)
    out = {
        "sampling_seconds": seconds,
        "warmup_seconds_with_compile": middle - start,
        "ess_bulk_min": ess,
        "ess_per_second": ess / seconds,
        "mean": [p["mean"] for p in per],
        "mcse_mean": [p["mcse_mean"] for p in per],
        "sd": [p["sd"] for p in per],
    }
    for field, name in (
        ("info.accepted", "acceptance"),
        ("block_states.0.info.accepted", "theta_acceptance"),
        ("block_states.1.info.accepted", "noise_acceptance"),
    ):
        if field in extra:
            out[name] = float(np.mean(extra[field]))
    return out


def part_samplers(settings: dict[str, Any]) -> dict[str, Any]:
    s = settings["samplers"]
    y = jnp.asarray(club(s["burn_in_calls"]))
    ties = int(y.sum() // 2)
    start = time.time()
    d = network.model(MEMBERS, list(STATS), jnp.zeros(2))
    mle = fit.maximum_likelihood(random.key(1), d, y, steps=300, draws=300)
    fit_seconds = time.time() - start
    theta0 = jnp.asarray(mle.estimate["coefficients"])
    chains = s["chains"]
    init = {"theta": jnp.broadcast_to(theta0, (chains, theta0.size))}  # every chain at the MLE
    estimator = single_auxiliary(
        num_draws=s["num_draws"], sampler="tie_no_tie", sweeps=s["sweeps"],
        reference={"coefficients": theta0},
    )  # fmt: skip
    exposed = zhat.expose(club_model, estimator)
    options = dict(
        num_warmup=s["warmup"], num_samples=s["draws"], num_chains=s["chains"],
        chain_method=chains_in_turn, progress_bar=False,
    )  # fmt: skip
    (info,) = exposed.describe(y)
    noise0 = random.normal(random.key(3), (chains, *info.noise_shape))
    samplers = {
        "exchange_approximate": (
            f"approximate exchange (double MH, {s['sweeps']} sweeps)",
            lambda: zhat.MCMC(
                DoubleMetropolisHastings(club_model, sweeps=s["sweeps"], simulator="tie_no_tie"),
                **options,
            ),
            init,
            ("info.accepted",),
        ),
        "pmg_default": (
            f"pseudo_marginal_gibbs, default blocks (K={s['num_draws']})",
            lambda: zhat.MCMC(pseudo_marginal_gibbs(exposed), **options),
            init,
            ("block_states.0.info.accepted", "block_states.1.info.accepted"),
        ),
        "pmmh": (
            f"standard PM-MH, same estimator (K={s['num_draws']})",
            lambda: zhat.MCMC(PseudoMarginalMH(exposed), **options),
            {**init, info.noise_site: noise0},
            ("info.accepted",),
        ),
    }
    results = {}
    with listening(CompileClock()) as clock:
        for i, (name, (label, make, start_at, fields)) in enumerate(samplers.items()):
            print(f"  {label} ...", file=sys.stderr, flush=True)
            r = timed_run(make, y, start_at, random.fold_in(random.key(7), i), clock, fields)
            results[name] = {"label": label, **r}
    pmg = results["pmg_default"]["ess_per_second"]
    return {
        "members": MEMBERS,
        "ties": ties,
        "true_coefficients": TRUE.tolist(),
        "mle": np.asarray(theta0).tolist(),
        "mle_standard_errors": [float(v) for v in mle.standard_errors.values()],
        "mle_seconds": fit_seconds,
        "samplers": results,
        "pmg_over_exchange": pmg / results["exchange_approximate"]["ess_per_second"],
        "pmg_over_pmmh": pmg / results["pmmh"]["ess_per_second"],
        "approximate": True,
    }


def print_part_samplers(r: dict[str, Any]) -> None:
    print(
        f"\n(samplers) invented {r['members']}-member club, {r['ties']} ties; MLE "
        f"{np.round(r['mle'], 3).tolist()} (true {r['true_coefficients']}, "
        f"{r['mle_seconds']:.0f} s). All samplers APPROXIMATE (simulator draws)."
    )
    head = f"  {'sampler':<48} {'ESS':>7} {'s':>7} {'ESS/s':>8}  mean ± MCSE (edges, partners)"
    print(head)
    print("  " + "-" * (len(head) - 2))
    for v in r["samplers"].values():
        means = ", ".join(
            f"{m:.3f}±{e:.3f}" for m, e in zip(v["mean"], v["mcse_mean"], strict=True)
        )
        print(
            f"  {v['label']:<48} {v['ess_bulk_min']:>7.0f} {v['sampling_seconds']:>7.1f} "
            f"{v['ess_per_second']:>8.2f}  {means}"
        )
    print(
        f"  pseudo_marginal_gibbs / approximate exchange: {r['pmg_over_exchange']:.2f}x; "
        f"/ PM-MH: {r['pmg_over_pmmh']:.2f}x (ESS/s)"
    )
