"""Coupling from the past (Propp & Wilson 1996, Random Struct. Algorithms 9(1–2)) gives exact
Ising draws: means and variances of t = (Σ_i s_i, Σ_edges s_i s_j) over many independent perfect
draws match the transfer-matrix moments (Kramers & Wannier 1941, Phys. Rev. 60, 252) within 4
standard errors (iid draws: sd/√n for means, √((m4 − s⁴)/n) for variances).
"""

import jax
import jax.numpy as jnp
import networkx as nx
import numpy as np
import pytest

from tests.families.lattice_helpers import assert_iid_means, assert_iid_variances
from tests.references import lattice_exact as ref
from zhat.families import lattice
from zhat.families.lattice import coupling_from_the_past
from zhat.families.lattice.perfect import perfect_noise_shape

NUM_DRAWS = 6000


def perfect_draws(key, nb, field, coupling, budget, num=NUM_DRAWS):
    """``num`` perfect draws, each from its own noise (vmapped in batches to bound memory)."""

    def one(k):
        noise = jax.random.normal(k, perfect_noise_shape(nb, budget))
        return coupling_from_the_past(nb, field, coupling, noise)

    run = jax.jit(lambda keys: jax.lax.map(one, keys, batch_size=1000))
    spins, ok, sweeps = run(jax.random.split(key, num))
    return np.asarray(spins), np.asarray(ok), np.asarray(sweeps)


CASES = {
    # name: (rows, cols, boundary, field, coupling)
    "3x3 free, ferromagnetic with field": (3, 3, "free", 0.2, 0.4),
    "3x3 free, antiferromagnetic with field": (3, 3, "free", 0.2, -0.4),
    "4x4 torus, ferromagnetic with field": (4, 4, "periodic", 0.1, 0.35),
    "4x4 torus, antiferromagnetic with field": (4, 4, "periodic", 0.1, -0.35),
}


@pytest.mark.parametrize("name", list(CASES))
def test_perfect_draws_have_exact_moments(key, name):
    rows, cols, boundary, field, coupling = CASES[name]
    nb = lattice.grid(rows, cols, boundary)
    assert nb.bipartite  # negative couplings use the sublattice flip
    spins, ok, sweeps = perfect_draws(jax.random.fold_in(key, 1), nb, field, coupling, 256)
    assert ok.all(), f"{(~ok).sum()} draws did not coalesce"
    assert sweeps.max() <= 256
    stats = ref.ising_statistics(spins, nb.edges)
    exact = ref.transfer_matrix_moments(rows, cols, coupling, field, boundary)
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: transfer-matrix exact mean and covariance
    assert_iid_means(stats, exact.mean, name)
    assert_iid_variances(stats, np.diag(exact.cov), name)


def test_perfect_draws_match_kaufman_at_zero_field(key):
    """At zero field E[Σ_edges s_i s_j] = d log Z/dK, here from Kaufman's closed form."""
    nb = lattice.grid(4, 4, "periodic")
    coupling = 0.3
    spins, ok, _ = perfect_draws(jax.random.fold_in(key, 2), nb, 0.0, coupling, 256)
    assert ok.all()
    stats = ref.ising_statistics(spins, nb.edges)
    eps = 1e-5
    # Kaufman (1949), Phys. Rev. 76, 1232: exact torus log Z; mean energy by central difference
    dlogz = (ref.kaufman_log_z(4, 4, coupling + eps) - ref.kaufman_log_z(4, 4, coupling - eps)) / (
        2 * eps
    )
    assert_iid_means(stats, [0.0, dlogz], "4x4 torus, zero field")


def test_site_varying_field(key):
    field = np.array([[0.5, -0.2, 0.0], [0.3, -0.6, 0.2], [0.1, 0.4, -0.3]])
    nb = lattice.grid(3, 3)
    spins, ok, _ = perfect_draws(jax.random.fold_in(key, 3), nb, field.reshape(-1), 0.45, 256)
    assert ok.all()
    exact = ref.enumerate_moments(
        lambda c: c.astype(np.float64), ref.ising_log_potential(nb.edges, 0.45, field), 9
    )
    # brute-force enumeration (2^9 states): exact per-site means E[s_i]
    assert_iid_means(spins, exact.mean, "per-site means with a site field")


@pytest.mark.parametrize(
    "graph",
    [
        lattice.from_adjacency(nx.cycle_graph(3)),
        lattice.grid(3, 3, "periodic"),
        lattice.from_adjacency(nx.petersen_graph()),
    ],
    ids=["triangle", "3x3 torus", "petersen"],
)
def test_negative_coupling_on_non_bipartite_graph_is_not_exact(key, graph):
    assert not graph.bipartite
    noise = jax.random.normal(key, (32, *perfect_noise_shape(graph, 64)))
    run = jax.jit(jax.vmap(lambda z: coupling_from_the_past(graph, 0.1, -0.3, z)))
    _, ok, _ = run(noise)
    assert not np.asarray(ok).any()
    # the same graph with a non-negative coupling is fine
    run = jax.jit(jax.vmap(lambda z: coupling_from_the_past(graph, 0.1, 0.3, z)))
    _, ok, _ = run(noise)
    assert np.asarray(ok).all()


def test_same_noise_same_draw(key):
    nb = lattice.grid(5, 5)
    noise = jax.random.normal(key, perfect_noise_shape(nb, 128))
    first = coupling_from_the_past(nb, 0.1, 0.4, noise)
    again = jax.jit(lambda z: coupling_from_the_past(nb, 0.1, 0.4, z))(noise)
    for a, b in zip(first, again, strict=True):
        np.testing.assert_array_equal(np.asarray(a), np.asarray(b))
    assert bool(first[1])
    assert set(np.unique(np.asarray(first[0])).tolist()) <= {-1.0, 1.0}
    other = coupling_from_the_past(
        nb, 0.1, 0.4, jax.random.normal(jax.random.fold_in(key, 1), noise.shape)
    )
    assert not np.array_equal(np.asarray(first[0]), np.asarray(other[0]))


def test_tiny_budget_at_strong_coupling_does_not_coalesce(key):
    nb = lattice.grid(16, 16)
    noise = jax.random.normal(key, (8, *perfect_noise_shape(nb, 8)))
    run = jax.jit(jax.vmap(lambda z: coupling_from_the_past(nb, 0.0, 1.0, z)))
    _, ok, sweeps = run(noise)
    assert not np.asarray(ok).any()
    np.testing.assert_array_equal(np.asarray(sweeps), 8)


def test_noise_shape_mismatch_is_an_error(key):
    nb = lattice.grid(3, 3)
    with pytest.raises(ValueError, match=r"Noise has shape \(16, 8\) for a graph of 9 sites"):
        coupling_from_the_past(nb, 0.0, 0.3, jnp.zeros((16, 8)))


@pytest.mark.parametrize("budget", [100, 1000])
def test_failed_draw_used_the_whole_budget(key, budget):
    """When coalescence fails, the last attempt should have run from time −budget (the module
    docstring: "Doubling stops at the budget max_sweeps"; the code clips t to max_sweeps)."""
    nb = lattice.grid(16, 16)
    noise = jax.random.normal(key, perfect_noise_shape(nb, budget))
    _, ok, sweeps = coupling_from_the_past(nb, 0.0, 1.5, noise)
    assert not bool(ok)
    assert int(sweeps) == budget
