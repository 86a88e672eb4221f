"""Posterior-predictive checks: the lattice statistics against hand counts and direct numpy/scipy
computation, the replicate distribution at a fixed parameter against exact enumeration, the
p-values, the failure verdict, the approximate simulator path, and the errors on bad input."""

import jax.numpy as jnp
import networkx as nx
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from scipy.sparse.csgraph import shortest_path

import zhat
from tests.references import lattice_exact as ref
from zhat.families import lattice

GRID = lattice.grid(4, 4)


def ising_model(y):
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 0.6))
    field = numpyro.sample("field", dist.Normal(0.0, 0.5))
    numpyro.sample("y", lattice.ising(GRID, coupling=coupling, field=field), obs=y)


def fixed_draws(chains=2, draws=200, **values):
    """A 'posterior' that puts all its mass at one parameter value, grouped by chain."""
    return {k: np.full((chains, draws), v) for k, v in values.items()}


def test_join_counts_match_hand_counts():
    x = np.array([[1, 1, 0], [0, 1, 0], [0, 0, 1]])
    # hand count over the 12 edges of the free 3×3 grid (rows: 1-1, 1-0 | 0-1, 1-0 | 0-0, 0-1;
    # columns: 1-0, 0-0 | 1-1, 1-0 | 0-0, 0-1): 0–0: 3, 1–1: 2, 0–1: 7
    counts = zhat.check.join_counts(lattice.grid(3, 3), x, labels=(0, 1))
    np.testing.assert_array_equal(np.asarray(counts), [3, 2, 7])
    # three labels on a 4-cycle 0-1-2-3-0 with labels (0, 0, 2, 1): edges 0-1 same, 1-2, 2-3,
    # 3-0 different (hand count)
    cycle = lattice.from_adjacency([[1, 3], [0, 2], [1, 3], [2, 0]])
    counts = zhat.check.join_counts(cycle, np.array([0, 0, 2, 1]), labels=(0, 1, 2))
    np.testing.assert_array_equal(np.asarray(counts), [1, 3])


def both_orders_corr(a, b):
    """Pearson correlation over the pairs in both orders, by numpy's corrcoef."""
    return np.corrcoef(np.concatenate([a, b]), np.concatenate([b, a]))[0, 1]


@pytest.mark.parametrize("boundary", ["free", "periodic"])
def test_correlation_by_distance_on_a_grid_matches_numpy(boundary):
    rng = np.random.default_rng(1)
    x = rng.integers(0, 2, size=(6, 7)).astype(float)
    graph = lattice.grid(6, 7, boundary)
    got = np.asarray(zhat.check.correlation_by_distance(graph, x, 3))
    for d in (1, 2, 3):
        if boundary == "free":  # lag d along rows and along columns (direct slicing)
            a = np.concatenate([x[:, :-d].ravel(), x[:-d, :].ravel()])
            b = np.concatenate([x[:, d:].ravel(), x[d:, :].ravel()])
        else:  # wrap-around lags on the torus (d ≤ half of each side), each site pair once:
            # at d = half a side the two ways round reach the same site (6 rows, d = 3)
            rows, cols = x.shape
            pairs = set()
            for r in range(rows):
                for c in range(cols):
                    i = r * cols + c
                    pairs.add(tuple(sorted((i, r * cols + (c + d) % cols))))
                    pairs.add(tuple(sorted((i, ((r + d) % rows) * cols + c))))
            i, j = np.array(sorted(pairs)).T
            a, b = x.ravel()[i], x.ravel()[j]
        np.testing.assert_allclose(got[d - 1], both_orders_corr(a, b), rtol=1e-12)


def test_correlation_by_distance_on_a_graph_uses_shortest_paths():
    g = nx.gnp_random_graph(30, 0.12, seed=3)
    graph = lattice.from_adjacency(nx.to_numpy_array(g, dtype=int))
    # external reference for the distances: scipy's shortest paths (unweighted)
    hops = shortest_path(nx.to_numpy_array(g), unweighted=True)
    x = np.random.default_rng(2).integers(0, 2, size=30).astype(float)
    pairs = zhat.check.distance_pairs(graph, 4)
    got = np.asarray(zhat.check.correlation_by_distance(graph, x, 4))
    for d in range(1, 5):
        expected = np.argwhere(np.triu(hops == d, 1))
        np.testing.assert_array_equal(pairs[d - 1], expected)
        a, b = x[expected[:, 0]], x[expected[:, 1]]
        np.testing.assert_allclose(got[d - 1], both_orders_corr(a, b), rtol=1e-12)


def test_constant_labels_have_no_correlation():
    got = np.asarray(zhat.check.correlation_by_distance(lattice.grid(3, 3), np.ones((3, 3)), 2))
    assert np.isnan(got).all()


def test_mid_p_values_by_hand():
    # (#{rep > obs} + ½ #{rep = obs}) / #finite: (1 + 1)/4, (0 + 0)/3 with the NaN left out
    p = zhat.check.predictive_p_values([2.0, 5.0], [[1, 0], [2, 1], [2, np.nan], [3, 2]])
    np.testing.assert_allclose(p, [0.5, 0.0])
    assert np.isnan(zhat.check.predictive_p_values([np.nan], [[1.0], [2.0]])).all()


def joins_and_statistics(configs, edges):
    """(Σ s, Σ_edges s_i s_j, joins −1–−1, joins 1–1, joins −1–1) of each ±1 row, by numpy."""
    s = np.asarray(configs)
    left, right = s[:, edges[:, 0]], s[:, edges[:, 1]]
    return np.stack(
        [
            s.sum(1),
            (left * right).sum(1),
            ((left < 0) & (right < 0)).sum(1),
            ((left > 0) & (right > 0)).sum(1),
            (left != right).sum(1),
        ],
        axis=1,
    )


def test_replicates_at_a_fixed_parameter_match_exact_enumeration(key):
    """Replicates drawn at (coupling 0.3, field 0.1) on 16 sites are exact independent draws:
    their mean statistics lie within 4 Monte Carlo standard errors (exact sd / √M) of the exact
    means by enumeration of all 2^16 maps (tests/references/lattice_exact.py)."""
    y = jnp.asarray(np.where(np.arange(16).reshape(4, 4) % 3 == 0, 1.0, -1.0))
    samples = fixed_draws(coupling=0.3, field=0.1)
    check = zhat.check.posterior_predictive(key, ising_model, samples, y, num_replicates=400)
    assert len(check.exact) == 400 and check.num_inexact == 0 and not check.approximate
    edges = ref.grid_edges(4, 4)
    exact = ref.enumerate_moments(
        lambda c: joins_and_statistics(c, edges), ref.ising_log_potential(edges, 0.3, 0.1), 16
    )
    names = ["y: sufficient statistic 1", "y: sufficient statistic 2"]
    names += ["y: joins -1–-1", "y: joins 1–1", "y: joins -1–1"]
    got = check.replicates[:, [check.names.index(n) for n in names]]
    mcse = np.sqrt(np.diag(exact.cov) / got.shape[0])
    assert np.all(np.abs(got.mean(0) - exact.mean) < 4 * mcse), (got.mean(0), exact.mean, mcse)
    # the observed statistics are the same functions at the data
    np.testing.assert_allclose(
        check.observed[[check.names.index(n) for n in names]],
        joins_and_statistics(np.asarray(y).reshape(1, -1), edges)[0],
    )


def test_a_map_the_model_cannot_produce_is_reported(key):
    """A perfect chequerboard has all 24 joins mixed; at coupling 0 (independent fair spins)
    that happens with probability 2/2^16, so the mixed-join count fails (p = 0)."""
    y = jnp.asarray(np.where(np.add.outer(np.arange(4), np.arange(4)) % 2 == 0, 1.0, -1.0))
    samples = fixed_draws(coupling=0.0, field=0.0)
    check = zhat.check.posterior_predictive(key, ising_model, samples, y, num_replicates=100)
    assert "y: joins -1–1" in check.failures
    assert check.p_values[check.names.index("y: joins -1–1")] == 0.0
    assert "fails to reproduce" in check.text() and "y: joins -1–1" in check.text()
    assert any("fails to reproduce y: joins -1–1" in w for w in check.warnings())


def test_without_a_perfect_sampler_the_replicates_are_flagged_approximate(key):
    """Potts (no perfect sampler): simulator replicates, flagged. With 200 heat-bath sweeps on
    9 sites the chain has long forgotten its start, so the mean of the same-label joins still
    lies within 4 MCSE of the exact mean by enumeration of all 3^9 maps."""
    graph = lattice.grid(3, 3)

    def potts_model(y):
        coupling = numpyro.sample("coupling", dist.Uniform(0.0, 1.0))
        numpyro.sample("y", lattice.potts(graph, coupling=coupling, q=3), obs=y)

    y = jnp.asarray(np.array([[0, 0, 1], [2, 0, 1], [2, 2, 1]]))
    with pytest.warns(UserWarning, match="APPROXIMATE"):
        check = zhat.check.posterior_predictive(
            key, potts_model, fixed_draws(coupling=0.5), y, num_replicates=200, sweeps=200
        )
    assert check.approximate and check.num_inexact == 200
    assert "APPROXIMATE" in check.text() and "'gibbs' simulator" in check.method
    edges = ref.grid_edges(3, 3)

    def same(c):
        return (c[:, edges[:, 0]] == c[:, edges[:, 1]]).sum(1).astype(float)

    exact = ref.enumerate_moments(same, lambda c: 0.5 * same(c), 9, labels=(0, 1, 2))
    got = check.replicates[:, check.names.index("y: same-label joins")]
    mcse = np.sqrt(exact.cov[0, 0] / got.shape[0])
    assert abs(got.mean() - exact.mean[0]) < 4 * mcse, (got.mean(), exact.mean, mcse)


def test_bad_input_gets_clear_errors(key):
    y = jnp.ones((4, 4))
    with pytest.raises(ValueError, match="grouped by chain"):
        zhat.check.posterior_predictive(key, ising_model, {"coupling": np.zeros(10)}, y)

    def plain(y):
        mu = numpyro.sample("mu", dist.Normal())
        numpyro.sample("y", dist.Normal(mu, 1.0), obs=y)

    with pytest.raises(ValueError, match="no observed site with a zhat unnormalized family"):
        zhat.check.posterior_predictive(key, plain, fixed_draws(mu=0.0), y)
    with pytest.raises(ValueError, match="must return one number"):
        zhat.check.posterior_predictive(
            key,
            ising_model,
            fixed_draws(coupling=0.1, field=0.0),
            y,
            statistics={"rows": lambda x: x.sum(1)},
        )


def test_exposed_model_and_inference_data_are_accepted(key):
    y = jnp.asarray(np.where(np.arange(16).reshape(4, 4) % 2 == 0, 1.0, -1.0))
    samples = {"coupling": np.linspace(0.1, 0.3, 20).reshape(2, 10), "field": np.zeros((2, 10))}
    idata = zhat.check.to_inference_data(samples)
    exposed = zhat.expose(ising_model)
    corner = {"top-left corner": lambda x: x[0, 0]}  # an extra statistic of the caller's
    a = zhat.check.posterior_predictive(key, exposed, idata, y, num_replicates=8, statistics=corner)
    b = zhat.check.posterior_predictive(key, ising_model, samples, y, num_replicates=8)
    np.testing.assert_array_equal(a.replicates[:, :-1], b.replicates)
    assert a.names[-1] == "y: top-left corner" and a.observed[-1] == 1.0
    assert set(np.unique(a.replicates[:, -1])) <= {-1.0, 1.0}
    assert a.replicates.shape == (8, len(a.names)) and a.num_draws == 20
