"""K persistent simulator chains (vmapped) and the Monte Carlo moments of their scores.

The chains are the family's simulator (for lattices the heat-bath sweep) driven by standard
normal noise drawn from a key (in chunks of steps, see :func:`noise_scan`): fits are point-
estimation routines, not log densities, so they may draw their own noise. Each chain is one
batch for the Monte Carlo error (batch means over independent chains, common practice): with
per-chain sums a_k = Σ_t w_kt (s_kt − m̂) and b_k = Σ_t w_kt, the self-normalised mean m̂ = Σ w
s / Σ w has

    Var(m̂) ≈ K/(K − 1) · Σ_k a_k a_kᵀ / (Σ_k b_k)²        (ratio estimator, delta method).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import NamedTuple

import jax
import jax.numpy as jnp
from jax import lax

from zhat.fit._problem import Problem
from zhat.model.unnormalized import Transition

Array = jax.Array


class Draws(NamedTuple):
    """What one run of the chains collected (K chains, T draws, d parameters)."""

    scores: Array  # (K, T, d) ∇_v log g(x; v) at the simulation point
    mean_hessian: Array  # (d, d) mean over draws of ∇²_v log g(x; v) (zero if linear)
    states: Array | None  # (K, T, ...) the draws, kept only when asked (non-linear families)


class Moments(NamedTuple):
    mean: Array  # (d,) m̂
    cov: Array  # (d, d) weighted covariance of the scores
    mean_cov: Array  # (d, d) Monte Carlo covariance of m̂ (batch means over chains)
    cov_se: Array  # (d, d) Monte Carlo standard error of each entry of cov
    ess: Array  # effective sample size of the weights (K·T when unweighted)


def sweep(problem: Problem, transition: Transition, v: Array, states: Array, noise: Array):
    """One transition of every chain at v per slice of ``noise`` (K, n, ...)."""
    params = problem.params(v)

    def one(x, z):
        return lax.fori_loop(0, z.shape[0], lambda i, x: transition.step(params, x, z[i]), x)

    return jax.vmap(one)(states, noise)


def noise_shape(transition: Transition, states: Array, sweeps: int) -> tuple[int, ...]:
    """Noise of one step of every chain: (K, sweeps, ...)."""
    return (states.shape[0], sweeps) + tuple(transition.noise_shape(states[0]))


def noise_scan(body: Callable, carry, key: Array, steps: int, shape: tuple[int, ...]):
    """``lax.scan`` of ``body(carry, (t, noise_t))`` over t < steps, noise_t ~ N(0, I) of
    ``shape``. The noise of up to 16 steps (a chunk) is drawn at once, from
    ``fold_in(key, chunk)``: a random draw inside a loop body runs several times slower on CPU
    than one large draw."""
    size = max(1, math.prod(shape))
    most = int(max(1, min(16, 2**22 // size)))
    # a divisor of steps, if a large one exists, so that the body is compiled once
    chunk = max(c for c in range(1, most + 1) if steps % c == 0)
    chunk = most if chunk < most // 2 else chunk
    dtype = jnp.result_type(float)

    def chunk_scan(length: int):
        def run(carry, c):
            z = jax.random.normal(jax.random.fold_in(key, c), (length,) + shape, dtype)
            return lax.scan(body, carry, (c * chunk + jnp.arange(length), z))

        return run

    full, rest = divmod(steps, chunk)
    outs = []
    if full:
        carry, out = lax.scan(chunk_scan(chunk), carry, jnp.arange(full))
        outs.append(jax.tree.map(lambda a: a.reshape((full * chunk,) + a.shape[2:]), out))
    if rest:
        carry, out = chunk_scan(rest)(carry, jnp.int32(full))
        outs.append(out)
    return carry, jax.tree.map(lambda *a: jnp.concatenate(a), *outs)


def start_states(problem: Problem, transition: Transition, key: Array, chains: int) -> Array:
    """Every chain starts from the data, moved once (so the state has the simulator's layout)."""
    y = jnp.broadcast_to(problem.data, (chains,) + problem.data.shape)
    params = problem.params(problem.start)
    noise_shape = tuple(transition.noise_shape(problem.data))
    noise = jax.random.normal(key, (chains,) + noise_shape, jnp.result_type(float))
    return jax.vmap(lambda x, z: transition.step(params, x, z))(y, noise)


def make_runner(problem: Problem, transition: Transition, keep_states: bool):
    """The jitted chain runs of one fit (compiled once, reused across rounds)."""

    def scores_of(v, states):
        return jax.vmap(problem.score, in_axes=(None, 0))(v, states)

    def mean_hessian_of(v, states):
        if problem.linear:
            return jnp.zeros((v.size, v.size), v.dtype)
        mean_log_g = lambda u: jnp.mean(jax.vmap(problem.log_potential, (None, 0))(u, states))
        return jax.hessian(mean_log_g)(v)

    def run(key, v, states, draws, thin):
        def body(states, tz):
            states = sweep(problem, transition, v, states, tz[1])
            out = (scores_of(v, states), mean_hessian_of(v, states))
            return states, out + ((states,) if keep_states else ())

        shape = noise_shape(transition, states, thin)
        states, out = noise_scan(body, states, key, draws, shape)
        scores = jnp.swapaxes(out[0], 0, 1)
        kept = jnp.swapaxes(out[2], 0, 1) if keep_states else None
        return states, Draws(scores, jnp.mean(out[1], axis=0), kept)

    def burn(key, v, states, n):
        def body(states, tz):
            return sweep(problem, transition, v, states, tz[1]), None

        if n == 0:
            return states
        return noise_scan(body, states, key, n, noise_shape(transition, states, 1))[0]

    return Runner(
        jax.jit(run, static_argnames=("draws", "thin")), jax.jit(burn, static_argnames="n")
    )


class Runner(NamedTuple):
    """``run(key, v, states, draws, thin) -> (states, Draws)``; ``burn(key, v, states, n)``."""

    run: Callable
    burn: Callable


def moments(scores: Array, log_weights: Array | None = None) -> Moments:
    """Self-normalised moments of scores (K, T, d) with optional log weights (K, T)."""
    k, t, d = scores.shape
    if log_weights is None:
        w = jnp.ones((k, t), scores.dtype)
    else:
        w = jnp.exp(log_weights - jnp.max(log_weights))
    total = jnp.sum(w)
    mean = jnp.einsum("kt,ktd->d", w, scores) / total
    dev = scores - mean[None, None, :]
    cov = jnp.einsum("kt,ktd,kte->de", w, dev, dev) / total
    a = jnp.einsum("kt,ktd->kd", w, dev)
    mean_cov = k / (k - 1) * (a.T @ a) / total**2
    b = jnp.sum(w, axis=1)
    per_chain = jnp.einsum("kt,ktd,kte->kde", w, dev, dev) / b[:, None, None]
    # each chain's share of the pooled covariance, weighted by its total weight
    cov_dev = per_chain - cov[None]
    cov_var = k / (k - 1) * jnp.einsum("k,kde->de", b**2, cov_dev**2) / total**2
    ess = total**2 / jnp.sum(w**2)
    return Moments(mean, cov, mean_cov, jnp.sqrt(cov_var), ess)
