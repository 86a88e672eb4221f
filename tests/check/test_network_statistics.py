"""Network statistics for posterior-predictive checks: degree, edgewise shared-partner and geodesic
distance distributions against networkx on the karate-club graph and on random graphs (undirected
and directed), under vmap and jit; the posterior-predictive hook and figure on a random graph
model; replicate degree counts of an edges-only model against the closed form; bad input."""

import jax
import jax.numpy as jnp
import networkx as nx
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from scipy.stats import binom

import zhat
from zhat.check.plots import curve_bins, predictive_figure
from zhat.families import lattice, network
from zhat.families.network.graph import NetworkStructure


def matrix(g):
    """The 0/1 adjacency matrix of a networkx graph in node order (row i → column j)."""
    return nx.to_numpy_array(g, nodelist=sorted(g.nodes), weight=None, dtype=float)


def capped(values, last):
    """Counts of integer values in bins 0..last−1 and ≥ last, by numpy."""
    return np.bincount(np.minimum(np.asarray(values, dtype=int), last), minlength=last + 1)


def degree_reference(g, last, incoming=False):
    if not g.is_directed():
        # networkx: nx.degree_histogram (counts of degree 0..max), tail summed into "≥ last"
        hist = np.array(nx.degree_histogram(g))
        hist = np.pad(hist, (0, max(0, last + 1 - hist.size)))
        return np.append(hist[:last], hist[last:].sum())
    # networkx: DiGraph.in_degree / DiGraph.out_degree
    degrees = dict(g.in_degree() if incoming else g.out_degree())
    return capped([degrees[v] for v in sorted(g.nodes)], last)


def partner_reference(g, last):
    if not g.is_directed():
        # networkx: nx.common_neighbors of the two ends of each edge (each edge once)
        shared = [len(list(nx.common_neighbors(g, u, v))) for u, v in g.edges()]
    else:
        # networkx: for each tie u → v, the nodes k with u → k (successors of u) and
        # k → v (predecessors of v): the outgoing two-paths
        shared = [len(set(g.successors(u)) & set(g.predecessors(v))) for u, v in g.edges()]
    return capped(shared, last)


def distance_reference(g, last):
    """Pairs at distance 1..last−1, ≥ last and unreachable, from networkx's shortest paths
    (nx.all_pairs_shortest_path_length); unordered pairs if undirected, ordered if directed."""
    lengths = dict(nx.all_pairs_shortest_path_length(g))
    nodes = sorted(g.nodes)
    pairs = [(u, v) for u in nodes for v in nodes if u != v and (g.is_directed() or u < v)]
    found = [lengths[u][v] for u, v in pairs if v in lengths[u]]
    counts = capped(found, last)[1:]  # no pair at distance 0
    return np.append(counts, len(pairs) - len(found))


def random_graphs(directed):
    """Sparse Erdős–Rényi graphs from fixed seeds: several components, so some pairs have no
    path."""
    return [nx.gnp_random_graph(40, 0.05, seed=seed, directed=directed) for seed in (1, 2, 3)]


def reference(g, d, k, length):
    parts = [degree_reference(g, d)]
    if g.is_directed():
        parts.append(degree_reference(g, d, incoming=True))
    return np.concatenate([*parts, partner_reference(g, k), distance_reference(g, length)])


def test_karate_club_counts_match_networkx():
    """Zachary's karate club (Zachary 1977, J. Anthropol. Res. 33(4)), as shipped by networkx."""
    g = nx.karate_club_graph()
    a = matrix(g)
    for d, k, length in [(19, 12, 7), (5, 3, 3), (1, 1, 1)]:  # all bins, then tails
        np.testing.assert_array_equal(
            np.asarray(zhat.check.degree_counts(a, d)), degree_reference(g, d)
        )
        np.testing.assert_array_equal(
            np.asarray(zhat.check.shared_partner_counts(a, k)), partner_reference(g, k)
        )
        np.testing.assert_array_equal(
            np.asarray(zhat.check.distance_counts(a, length)), distance_reference(g, length)
        )


def test_defaults_come_from_the_observed_graph():
    g = nx.karate_club_graph()
    a = matrix(g)
    stats = zhat.check.network_statistics(34, a, site="g")
    # largest degree 17 (networkx: max of g.degree), largest shared partners 10, diameter 5
    # (networkx: nx.diameter), each + 2
    assert max(dict(g.degree()).values()) == 17 and nx.diameter(g) == 5
    assert "g: degree ≥ 19" in stats.names and "g: degree 18" in stats.names
    assert "g: shared partners ≥ 12" in stats.names
    assert stats.names[-3:] == ("g: distance 6", "g: distance ≥ 7", "g: distance inf")
    titles = [t for t, _, _ in stats.curves]
    assert titles == [
        "g: degree distribution",
        "g: edgewise shared partners",
        "g: geodesic distances",
    ]
    assert stats.curves[-1][2] == len(stats.names)
    np.testing.assert_array_equal(np.asarray(stats.compute(a)), reference(g, 19, 12, 7))
    # each distribution sums to its total: 34 nodes, 78 ties, 34·33/2 pairs (common practice)
    values = np.asarray(stats.compute(a))
    totals = [values[first:last].sum() for _, first, last in stats.curves]
    assert totals == [34, 78, 561]


@pytest.mark.parametrize("directed", [False, True])
def test_random_graphs_match_networkx_under_vmap_and_jit(directed):
    graphs = random_graphs(directed)
    batch = jnp.asarray(np.stack([matrix(g) for g in graphs]))
    structure = NetworkStructure(40, (), directed=directed)
    stats = zhat.check.network_statistics(
        structure, batch[0], max_degree=6, max_partners=3, max_distance=8, site="g"
    )
    expected = np.stack([reference(g, 6, 3, 8) for g in graphs])
    assert expected[:, -1].min() > 0  # some pairs are unreachable: the "inf" bin is tested
    np.testing.assert_array_equal(np.asarray(jax.vmap(stats.compute)(batch)), expected)
    np.testing.assert_array_equal(np.asarray(jax.jit(jax.vmap(stats.compute))(batch)), expected)
    one = jax.jit(lambda x: zhat.check.distance_counts(x, 8, directed=directed))
    np.testing.assert_array_equal(np.asarray(one(batch[1])), distance_reference(graphs[1], 8))
    if directed:
        assert stats.names[:2] == ("g: out-degree 0", "g: out-degree 1")
        assert "g: in-degree ≥ 6" in stats.names
        titles = [t for t, _, _ in stats.curves]
        assert titles[:2] == ["g: out-degree distribution", "g: in-degree distribution"]


def edges_only_model(n):
    def model(g):
        theta = numpyro.sample("theta", dist.Normal(0.0, 2.0))
        numpyro.sample("g", network.model(n, [network.edges()], jnp.reshape(theta, (1,))), obs=g)

    return model


def test_posterior_predictive_adds_the_network_statistics_and_plots_them(key):
    n = 12
    a = jnp.asarray(matrix(nx.gnp_random_graph(n, 0.3, seed=4)))
    samples = {"theta": np.random.default_rng(0).normal(-0.8, 0.1, size=(2, 10))}
    with pytest.warns(UserWarning, match="APPROXIMATE"):
        check = zhat.check.posterior_predictive(
            key, edges_only_model(n), samples, a, num_replicates=8, sweeps=5, simulator="toggle"
        )
    expected = zhat.check.network_statistics(n, a, site="g")
    assert check.names == ("g: sufficient statistic 1", *expected.names)
    assert check.curves == tuple((t, f + 1, e + 1) for t, f, e in expected.curves)
    np.testing.assert_array_equal(check.observed[1:], np.asarray(expected.compute(a)))
    assert check.replicates.shape == (8, len(check.names)) and check.p_values.shape == (
        len(check.names),
    )
    assert "g: distance inf" in check.text() and "g: degree 3" in check.text()
    fig = predictive_figure(check)
    titles = {ax.get_title(): ax for ax in fig.axes}
    degree = titles["g: degree distribution"]
    labels = [t.get_text() for t in degree.get_xticklabels()]
    top = expected.curves[0][2] - 1  # the "≥ D" bin
    assert labels[0] == "0" and labels[-1] == expected.names[top].removeprefix("g: degree ")
    assert labels[-1].startswith("≥ ")
    assert degree.get_xlabel() == "degree"
    distance = titles["g: geodesic distances"]
    labels = [t.get_text() for t in distance.get_xticklabels()]
    assert labels[0] == "1" and labels[-2].startswith("≥ ") and labels[-1] == "inf"
    assert distance.get_xlabel() == "distance"
    assert titles["g: edgewise shared partners"].get_xlabel() == "shared partners"


def test_lattice_curves_still_plot_over_distance():
    graph = lattice.grid(5, 5)
    stats = zhat.check.lattice_statistics(graph, (-1.0, 1.0), site="y", max_distance=3)
    rng = np.random.default_rng(5)
    maps = jnp.asarray(rng.choice([-1.0, 1.0], size=(20, 5, 5)))
    reps = np.asarray(jax.vmap(stats.compute)(maps))
    check = zhat.check.PredictiveCheck(
        names=stats.names,
        observed=reps[0],
        replicates=reps[1:],
        p_values=zhat.check.predictive_p_values(reps[0], reps[1:]),
        exact=np.ones(19, dtype=bool),
        method="test",
        approximate=False,
        curves=stats.curves,
    )
    axis, labels, x = curve_bins(stats.names[3:])
    assert axis == "distance" and labels == ["1", "2", "3"]
    np.testing.assert_array_equal(x, [1.0, 2.0, 3.0])
    ax = {a.get_title(): a for a in predictive_figure(check).axes}["y: correlation by distance"]
    assert [t.get_text() for t in ax.get_xticklabels()] == ["1", "2", "3"]
    assert ax.get_xlabel() == "distance"
    # non-numeric bins follow the one before them
    _, labels, x = curve_bins(["g: distance 1", "g: distance ≥ 2", "g: distance inf"])
    assert labels == ["1", "≥ 2", "inf"]
    np.testing.assert_array_equal(x, [1.0, 2.0, 3.0])


def degree_bin_moments(n, p, bins):
    """Mean and variance of the number of nodes whose degree lies in each bin, for independent
    Bernoulli(p) ties on n nodes (an Erdős–Rényi graph; closed form, derived here): each
    degree is Binomial(n − 1, p), and two nodes i, j share only the tie i–j, so with
    B ~ Binomial(n − 2, p), Pr(d_i ∈ S, d_j ∈ S) = p Pr(B + 1 ∈ S)² + (1 − p) Pr(B ∈ S)²."""
    means, variances = [], []
    for values in bins:
        q = binom.pmf(values, n - 1, p).sum()
        rest = binom.pmf(values, n - 2, p).sum()
        shifted = binom.pmf(np.asarray(values) - 1, n - 2, p).sum()
        joint = p * shifted**2 + (1 - p) * rest**2
        means.append(n * q)
        variances.append(n * q * (1 - q) + n * (n - 1) * (joint - q**2))
    return np.array(means), np.array(variances)


def degree_check(check, curve, mean_variance, m):
    """Replicate means of one degree curve against closed-form moments, within 4 MCSE."""
    title, first, last = check.curves[curve]
    top = last - first - 1  # the last bin is "≥ top"
    assert check.names[last - 1].endswith(f"degree ≥ {top}"), check.names[last - 1]
    mean, variance = mean_variance([[k] for k in range(top)] + [list(range(top, 1000))])
    got = check.replicates[:, first:last]
    assert got.shape == (m, top + 1)
    mcse = np.sqrt(variance / m)
    assert np.all(np.abs(got.mean(0) - mean) < 4 * mcse), (title, got.mean(0), mean, mcse)
    return got


def test_edges_only_replicate_degree_counts_match_the_binomial_closed_form(key):
    """An edges-only model makes the ties independent Bernoulli(σ(θ)) (common practice), so the
    degree counts have mean n·Binomial(n − 1, σ(θ)) pmf. Replicates at the true θ from 40 sweeps
    of the 'toggle' sampler, started at an observed graph twice as dense as the model's: each
    dyad is visited ~40 times and its two-state chain forgets its start by a factor e^θ per
    visit, so the replicates are stationary to far below the MCSE (with one sweep the test
    fails by over 20 MCSE). The replicate means lie within 4 Monte Carlo standard errors
    (closed-form sd / √M)."""
    n, theta, m = 30, -1.5, 400
    p = 1.0 / (1.0 + np.exp(-theta))
    rng = np.random.default_rng(7)
    upper = np.triu(rng.random((n, n)) < 0.35, 1)
    a = jnp.asarray((upper | upper.T).astype(float))
    samples = {"theta": np.full((2, m // 2), theta)}
    with pytest.warns(UserWarning, match="APPROXIMATE"):
        check = zhat.check.posterior_predictive(
            key, edges_only_model(n), samples, a, num_replicates=m, sweeps=40, simulator="toggle"
        )
    assert check.curves[0][0] == "g: degree distribution"
    got = degree_check(check, 0, lambda bins: degree_bin_moments(n, p, bins), m)
    np.testing.assert_allclose(got.sum(1), n)  # every node in one bin


def test_directed_edges_only_replicate_degree_counts_match_the_binomial_closed_form(key):
    """Directed edges-only model: every ordered tie independent Bernoulli(σ(θ)) (common
    practice), so out- and in-degrees are Binomial(n − 1, σ(θ)); distinct nodes' out-degrees
    (and in-degrees) use disjoint ties, so a bin count is Binomial(n, q) with q the bin's
    probability (closed form). Replicates as in the undirected test, from a denser start."""
    n, theta, m = 20, -1.0, 400
    p = 1.0 / (1.0 + np.exp(-theta))
    rng = np.random.default_rng(8)
    a = (rng.random((n, n)) < 0.5).astype(float)
    np.fill_diagonal(a, 0.0)

    def model(g):
        theta = numpyro.sample("theta", dist.Normal(0.0, 2.0))
        graph = network.model(n, [network.edges()], jnp.reshape(theta, (1,)), directed=True)
        numpyro.sample("g", graph, obs=g)

    def moments(bins):
        q = np.array([binom.pmf(values, n - 1, p).sum() for values in bins])
        return n * q, n * q * (1 - q)

    samples = {"theta": np.full((2, m // 2), theta)}
    with pytest.warns(UserWarning, match="APPROXIMATE"):
        check = zhat.check.posterior_predictive(
            key, model, samples, jnp.asarray(a), num_replicates=m, sweeps=40, simulator="toggle"
        )
    assert [t for t, _, _ in check.curves[:2]] == [
        "g: out-degree distribution",
        "g: in-degree distribution",
    ]
    degree_check(check, 0, moments, m)
    degree_check(check, 1, moments, m)


def test_bad_input_gets_clear_errors():
    a = matrix(nx.path_graph(4))
    with pytest.raises(ValueError, match="shape \\(3, 4\\).*4 nodes"):
        zhat.check.network_statistics(4, a[:3])
    with pytest.raises(ValueError, match="must be square"):
        zhat.check.degree_counts(a[:3], 2)
    with pytest.raises(ValueError, match="0 or 1"):
        zhat.check.network_statistics(4, 2 * a)
    one_way = np.triu(a)
    with pytest.raises(ValueError, match="not symmetric.*directed=True"):
        zhat.check.network_statistics(4, one_way)
    zhat.check.network_statistics(4, one_way, directed=True)  # fine once directed
    with pytest.raises(ValueError, match="self-loops"):
        zhat.check.network_statistics(4, a + np.eye(4))
    with pytest.raises(ValueError, match="directed=True was passed with an undirected"):
        zhat.check.network_statistics(NetworkStructure(4, ()), a, directed=True)
    with pytest.raises(ValueError, match="max_degree must be a positive whole number"):
        zhat.check.network_statistics(4, a, max_degree=0)
    with pytest.raises(ValueError, match="max_distance must be a positive whole number"):
        zhat.check.distance_counts(a, 1.5)
    with pytest.raises(TypeError, match="NetworkStructure or a number of nodes"):
        zhat.check.network_statistics("four", a)
    with pytest.raises(ValueError, match="at least 2 nodes"):
        zhat.check.network_statistics(1, np.zeros((1, 1)))
