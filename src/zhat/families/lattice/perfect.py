"""Perfect sampling of Ising and autologistic models by monotone coupling from the past.

Propp & Wilson (1996), "Exact sampling with coupled Markov chains and applications to
statistical mechanics", Random Structures & Algorithms 9(1–2). For J ≥ 0 the heat-bath sweep
with common uniforms is monotone, so running it from the all-(+1) and all-(−1) states from time
−T to 0 with the SAME uniforms for each time step brackets every other start; if the two meet
at time 0, the common state is an exact draw from p(s) ∝ exp(Σ h_i s_i + J Σ_{i~j} s_i s_j).
Otherwise T doubles, reusing the uniforms already assigned to times −1, …, −T (the noise row
t drives the sweep at time −(t + 1)).

Here the noise is an explicit array of standard normals, shape (max_sweeps, N): the draw is a
deterministic function of it, and only the rows the doubling reaches are ever transformed. A
kernel with randomness of its own (the exchange algorithm) may pass a PRNG key instead, with
``max_sweeps``: row t is then a row of uniforms drawn from ``fold_in(key, t)`` only when the
doubling reaches it, so the unused part of the budget costs nothing.

Doubling stops at the budget ``max_sweeps``; the result then is
the upper chain's state, *not* an exact draw, and the returned flag says so.

Antiferromagnetic couplings (J < 0) on a bipartite graph use the sublattice flip s_i → σ_i s_i
(σ = +1 on one side, −1 on the other), which maps J to −J and h_i to σ_i h_i. On a graph that
is not bipartite a negative coupling cannot be sampled this way: the flag is then False.
"""

from __future__ import annotations

import math

import jax
import jax.numpy as jnp
from jax import lax

from zhat.families.lattice.graph import Neighbours
from zhat.families.lattice.spin_sweep import spin_sweep

Array = jax.Array

__all__ = ["coupling_from_the_past", "perfect_noise_shape"]


def perfect_noise_shape(nb: Neighbours, max_sweeps: int) -> tuple[int, int]:
    """Noise shape of one perfect draw with a budget of ``max_sweeps`` sweeps."""
    return (int(max_sweeps), nb.num_sites)


def coupling_from_the_past(
    nb: Neighbours,
    h: Array,
    coupling: Array,
    noise: Array,
    first_sweeps: int = 8,
    max_sweeps: int | None = None,
) -> tuple[Array, Array, Array]:
    """Exact draw of spins given noise of shape (max_sweeps, N), or a PRNG key and max_sweeps.

    :return: ``(spins, coalesced, sweeps)`` — the draw (float ±1), whether it is exact, and the
        number of time steps T of the last attempt.
    """
    n = nb.num_sites
    keyed = jax.dtypes.issubdtype(noise.dtype, jax.dtypes.prng_key)
    if keyed:
        if max_sweeps is None:
            raise ValueError("coupling_from_the_past with a key needs max_sweeps.")
        key, dtype = noise, jnp.result_type(float)
    else:
        max_sweeps = noise.shape[0]
        if noise.shape[1:] != (n,):
            raise ValueError(f"Noise has shape {noise.shape} for a graph of {n} sites.")
        dtype = noise.dtype

    # attempts at first_sweeps · 2^level, the last one clipped to the whole budget
    levels = 1 + max(0, math.ceil(math.log2(max_sweeps / first_sweeps)))
    h = jnp.asarray(h, dtype)
    coupling = jnp.asarray(coupling, dtype)
    if nb.bipartite:
        side_signs = jnp.where(coupling < 0, jnp.array([1.0, -1.0], dtype), 1.0)
        flip = side_signs[jnp.asarray(nb.sides)]
        possible = jnp.array(True)
    else:
        side_signs, flip = None, jnp.ones((n,), dtype)
        possible = coupling >= 0
    # a key draws uniforms directly, only for the rows the doubling reaches (row t from
    # fold_in(key, t)); an array is standard normal, each row transformed when it is used
    plan = spin_sweep(nb, h, jnp.abs(coupling), side_signs, uniform=keyed)

    def noise_row(t: Array) -> Array:
        if keyed:
            return plan.to_noise(jax.random.uniform(jax.random.fold_in(key, t), (n,), dtype))
        return plan.to_noise(noise[t])

    def attempt(level: Array) -> tuple[Array, Array, Array]:
        """Both bounding chains (as one batch) from time −t to 0."""
        t = jnp.minimum(first_sweeps * 2**level, max_sweeps)

        def body(k: Array, pair):
            z = noise_row(t - 1 - k)
            return jax.vmap(lambda q: plan.sweep(q, z))(pair)

        start = jax.vmap(plan.to_state)(jnp.stack([jnp.ones((n,), dtype), -jnp.ones((n,), dtype)]))
        top, bottom = jax.vmap(plan.from_state)(lax.fori_loop(0, t, body, start))
        return top, jnp.all(top == bottom), t

    def cond(carry):
        level, _, done, _ = carry
        return (level < levels) & ~done

    def step(carry):
        level, _, _, _ = carry
        top, done, t = attempt(level)
        return level + 1, top, done, t.astype(jnp.int32)

    init = (jnp.int32(0), jnp.ones((n,), dtype), jnp.array(False), jnp.int32(0))
    _, spins, coalesced, sweeps = lax.while_loop(cond, step, init)
    return spins * flip, coalesced & possible, sweeps
