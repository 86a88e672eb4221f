"""Simulators for lattice models as pure functions of explicit noise.

Spin form (Ising, and autologistic mapped to spins): s ∈ {−1, +1}^N with
log g(s) = Σ_i h_i s_i + J Σ_{i~j} s_i s_j.

- Heat-bath Gibbs sweep by colour classes: every site of one colour is redrawn at once from
  p(s_i = +1 | rest) = σ(2 (h_i + J Σ_{j~i} s_j)) with its own uniform U_i: s_i = +1 iff
  U_i < that probability (Geman & Geman 1984, IEEE PAMI 6(6)). With common uniforms this update
  is monotone in the neighbours when J ≥ 0, which coupling from the past relies on.
- Swendsen–Wang (Swendsen & Wang 1987, Phys. Rev. Lett. 58(2)) for J ≥ 0: bond each edge
  whose ends agree with probability 1 − exp(−2J), find clusters, give each cluster C a new spin
  with P(+1) = σ(2 Σ_{i∈C} h_i).

Potts form: x ∈ {0..q−1}^N with log g(x) = Σ_i f_{i,x_i} + J Σ_{i~j} 1[x_i = x_j]; heat-bath by
colour classes through the inverse CDF of each site's conditional, and Swendsen–Wang with bond
probability 1 − exp(−J) and cluster labels drawn ∝ exp(Σ_{i∈C} f_{i,k}).

All uniforms come from exposed standard-normal noise through Φ (never from a key), so the
simulators can serve inside estimators.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
from jax import lax
from jax.scipy.special import ndtr

from zhat.families.lattice.graph import Neighbours

Array = jax.Array

__all__ = [
    "heat_bath_sweep",
    "neighbour_sum",
    "potts_gibbs_sweeps",
    "potts_heat_bath_sweep",
    "potts_swendsen_wang",
    "swendsen_wang",
]


DENSE_LIMIT = 256
"""Up to this many sites the neighbour sum is one dense matrix product (fewest operations)."""


def neighbour_sum(nb: Neighbours, s: Array) -> Array:
    """Σ_{j~i} s_j for every site (flat arrays).

    A dense adjacency product on small graphs, shifted copies (stencils) on larger grids, a
    gather through the padded neighbour table on larger irregular graphs.
    """
    if nb.num_sites <= DENSE_LIMIT:
        return jnp.asarray(nb.dense_adjacency(), s.dtype) @ s
    if nb.boundary is not None:
        rows, cols = nb.shape
        g = s.reshape(rows, cols)
        if nb.boundary == "periodic":
            total = jnp.roll(g, 1, 0) + jnp.roll(g, -1, 0) + jnp.roll(g, 1, 1) + jnp.roll(g, -1, 1)
        else:
            p = jnp.pad(g, 1)
            total = p[:-2, 1:-1] + p[2:, 1:-1] + p[1:-1, :-2] + p[1:-1, 2:]
        return total.reshape(-1)
    padded = jnp.concatenate([s, jnp.zeros((1,), s.dtype)])
    return padded[nb.table].sum(axis=1)


def heat_bath_sweep(nb: Neighbours, s: Array, h: Array, coupling: Array, uniform: Array) -> Array:
    """One heat-bath sweep by colour classes; ``uniform`` holds one U(0, 1) per site."""
    colours = jnp.asarray(nb.colours)
    for c in range(nb.num_colours):
        local = h + coupling * neighbour_sum(nb, s)
        new = jnp.where(uniform < jax.nn.sigmoid(2.0 * local), 1.0, -1.0).astype(s.dtype)
        s = jnp.where(colours == c, new, s) if nb.num_colours > 1 else new
    return s


def _components(nb: Neighbours, bonded: Array) -> Array:
    """Root label (smallest site index) of each site's cluster under the bonded edges."""
    n = nb.num_sites
    edges = jnp.asarray(nb.edges)
    i, j = edges[:, 0], edges[:, 1]
    big = jnp.int32(n)

    def step(label: Array) -> Array:
        li, lj = label[i], label[j]
        low = jnp.minimum(li, lj)
        cand = jnp.where(bonded, low, big)
        label = label.at[i].min(cand).at[j].min(cand)
        return label[label]  # pointer jumping

    def cond(carry: tuple[Array, Array]) -> Array:
        return carry[1]

    def body(carry: tuple[Array, Array]) -> tuple[Array, Array]:
        label, _ = carry
        new = step(label)
        return new, jnp.any(new != label)

    label0 = jnp.arange(n, dtype=jnp.int32)
    return lax.while_loop(cond, body, (label0, jnp.array(True)))[0]


def swendsen_wang(nb: Neighbours, s: Array, h: Array, coupling: Array, noise: Array) -> Array:
    """One Swendsen–Wang update; ``noise`` is standard normal of shape (E + N,).

    Cluster moves need J ≥ 0; for J < 0 the step is a heat-bath sweep with the site part of the
    noise instead, so the transition always leaves the model invariant.
    """
    e = nb.num_edges
    u_bond, u_spin = ndtr(noise[:e]), ndtr(noise[e:])
    return lax.cond(
        coupling >= 0,
        lambda: _swendsen_wang(nb, s, h, coupling, u_bond, u_spin),
        lambda: heat_bath_sweep(nb, s, h, coupling, u_spin).astype(s.dtype),
    )


def _clusters(nb: Neighbours, labels: Array, u_bond: Array, bond_prob: Array) -> Array:
    """Cluster root of each site: edges whose ends agree are bonded with ``bond_prob``."""
    edges = jnp.asarray(nb.edges)
    agree = labels[edges[:, 0]] == labels[edges[:, 1]]
    return _components(nb, agree & (u_bond < bond_prob))


def _swendsen_wang(nb, s, h, coupling, u_bond, u_spin):
    root = _clusters(nb, s, u_bond, -jnp.expm1(-2.0 * coupling))
    cluster_field = jnp.zeros_like(h).at[root].add(h)
    new_spin = jnp.where(u_spin < jax.nn.sigmoid(2.0 * cluster_field), 1.0, -1.0)
    return new_spin[root].astype(s.dtype)


def _potts_counts(nb: Neighbours, x: Array, q: int, dtype: jnp.dtype) -> Array:
    """(N, q) array: number of neighbours of each site with each label."""
    onehot = jax.nn.one_hot(x, q, dtype=dtype)
    if nb.boundary is not None:
        return jax.vmap(lambda col: neighbour_sum(nb, col), in_axes=1, out_axes=1)(onehot)
    padded = jnp.concatenate([onehot, jnp.zeros((1, q), onehot.dtype)])
    return padded[nb.table].sum(axis=1)


def _categorical(logits: Array, uniform: Array) -> Array:
    """Inverse-CDF draw per row of ``logits`` (N, q) from one uniform per row."""
    p = jax.nn.softmax(logits, axis=-1)
    cdf = jnp.cumsum(p, axis=-1)
    return jnp.minimum(jnp.sum(cdf < uniform[:, None], axis=-1), logits.shape[-1] - 1)


def potts_heat_bath_sweep(
    nb: Neighbours, x: Array, field: Array, coupling: Array, uniform: Array
) -> Array:
    """One heat-bath sweep of a q-label Potts model by colour classes; ``field`` is (N, q)."""
    q = field.shape[-1]
    colours = jnp.asarray(nb.colours)
    for c in range(nb.num_colours):
        logits = field + coupling * _potts_counts(nb, x, q, field.dtype)
        new = _categorical(logits, uniform).astype(x.dtype)
        x = jnp.where(colours == c, new, x) if nb.num_colours > 1 else new
    return x


def potts_gibbs_sweeps(nb: Neighbours, x: Array, field: Array, coupling: Array, noise: Array):
    """``noise.shape[0]`` Potts heat-bath sweeps; noise standard normal (T, N)."""

    def body(state: Array, z: Array) -> tuple[Array, None]:
        return potts_heat_bath_sweep(nb, state, field, coupling, ndtr(z)), None

    return lax.scan(body, x, noise)[0]


def potts_swendsen_wang(
    nb: Neighbours, x: Array, field: Array, coupling: Array, noise: Array
) -> Array:
    """One Swendsen–Wang update of a Potts model; noise standard normal (E + N,).

    For J < 0 the step is a heat-bath sweep with the site part of the noise instead.
    """
    e = nb.num_edges
    u_bond, u_label = ndtr(noise[:e]), ndtr(noise[e:])
    return lax.cond(
        coupling >= 0,
        lambda: _potts_swendsen_wang(nb, x, field, coupling, u_bond, u_label),
        lambda: potts_heat_bath_sweep(nb, x, field, coupling, u_label).astype(x.dtype),
    )


def _potts_swendsen_wang(nb, x, field, coupling, u_bond, u_label):
    root = _clusters(nb, x, u_bond, -jnp.expm1(-coupling))
    cluster_field = jnp.zeros_like(field).at[root].add(field)
    return _categorical(cluster_field, u_label)[root].astype(x.dtype)
