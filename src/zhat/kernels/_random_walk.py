"""The random-walk proposal shared by the Metropolis-type baselines, with warmup adaptation.

θ' = θ + h · L ε, ε ~ N(0, I), in unconstrained space. During warmup L L' tracks the running
covariance of θ over the last three quarters of warmup (adaptive Metropolis, Haario, Saksman &
Tamminen 2001, Bernoulli 7(2); a full covariance up to ``DENSE_MAX`` coordinates, the diagonal
beyond), and — when a target acceptance rate is given — log h moves towards it by
bounded Robbins–Monro steps; after warmup both are frozen, so the sampling phase is a valid
Markov chain. h₀ = 2.56/√d is the optimal scaling of pseudo-marginal random-walk proposals
relative to the posterior sd (Sherlock, Thiery, Roberts & Rosenthal 2015, Ann. Statist. 43(1));
it is close to the classical 2.38/√d. With noisy estimates the acceptance rate is capped by
the noise alone (2Φ(−σ/√2) for Gaussian log-noise of sd σ, same source), so pseudo-marginal MH
keeps h₀ and adapts only s.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import jax
import jax.numpy as jnp
from jax import random

Array = jax.Array


class Adaptation(NamedTuple):
    """Warmup adaptation carried between steps (frozen after warmup)."""

    iteration: Array
    log_step: Array
    mean: Array
    m2: Array
    scale: Array


def check_options(proposal_scale: float, target_accept: float | None) -> None:
    if target_accept is not None and not 0.0 < target_accept < 1.0:
        raise ValueError(f"target_accept must lie in (0, 1), got {target_accept!r}.")
    if not proposal_scale > 0:
        raise ValueError(f"proposal_scale must be positive, got {proposal_scale!r}.")


DENSE_MAX = 30
"""Up to this many coordinates the proposal adapts a full covariance."""


def _base(d: int) -> float:
    return math.log(2.56 / math.sqrt(max(d, 1)))


def init(flat: Array, proposal_scale: float) -> Adaptation:
    d = flat.size
    dense = d <= DENSE_MAX
    eye = jnp.eye(d, dtype=flat.dtype)
    return Adaptation(
        iteration=jnp.zeros((), jnp.int32),
        log_step=jnp.asarray(_base(d), flat.dtype),
        mean=jnp.zeros_like(flat),
        m2=jnp.zeros((d, d), flat.dtype) if dense else jnp.zeros_like(flat),
        scale=proposal_scale * eye if dense else jnp.full_like(flat, proposal_scale),
    )


def propose(rng_key: Array, flat: Array, adapt: Adaptation) -> Array:
    eps = random.normal(rng_key, flat.shape, flat.dtype)
    step = adapt.scale @ eps if adapt.scale.ndim == 2 else adapt.scale * eps
    return flat + jnp.exp(adapt.log_step) * step


def update(
    adapt: Adaptation,
    x: Array,
    accept_prob: Array,
    num_warmup: int,
    proposal_scale: float,
    target_accept: float | None,
) -> Adaptation:
    """One adaptation step at the chain's new position ``x`` (no-op after warmup)."""
    n = adapt.iteration + 1
    warm = adapt.iteration < num_warmup
    # moments of θ from the last three quarters of warmup (the first quarter is the approach)
    start = num_warmup // 4
    count = jnp.maximum(n - start, 1)
    collect = adapt.iteration >= start
    dense = adapt.m2.ndim == 2
    delta = x - adapt.mean
    mean = jnp.where(collect, adapt.mean + delta / count, adapt.mean)
    outer = jnp.outer(delta, x - mean) if dense else delta * (x - mean)
    m2 = jnp.where(collect, adapt.m2 + outer, adapt.m2)
    # the scale follows the running covariance, shrunk towards the initial guess while few
    # draws are in (weight of 20 pseudo-draws)
    weight = jnp.where(collect, count, 0) + 20
    if dense:
        cov = (0.5 * (m2 + m2.T) + 20 * proposal_scale**2 * jnp.eye(x.size, dtype=x.dtype)) / weight
        scale = jnp.linalg.cholesky(cov)
    else:
        scale = jnp.sqrt((m2 + 20 * proposal_scale**2) / weight)
    log_step = adapt.log_step
    if target_accept is not None:
        base = _base(x.size)
        log_step = log_step + (accept_prob - target_accept) / n**0.6
        log_step = jnp.clip(log_step, base - math.log(50.0), base + math.log(5.0))
    new = Adaptation(n, log_step.astype(adapt.log_step.dtype), mean, m2, scale)
    return jax.tree.map(lambda a, b: jnp.where(warm, a, b), new, adapt._replace(iteration=n))
