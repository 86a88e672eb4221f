"""Random graph family on directed graphs: change statistics, totals against networkx counts,
the log potential and pseudo-likelihood against enumeration of all 2^12 graphs on 4 nodes, the
pseudo-likelihood fit against a scipy logistic regression, and the input checks."""

import itertools
import math

import jax
import jax.numpy as jnp
import networkx as nx
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from numpyro.infer.util import log_density

from tests.references.logistic import logistic_fit
from zhat.estimators import maximum_pseudo_likelihood
from zhat.families import network
from zhat.families.network.graph import NetworkStructure
from zhat.model import as_potential


def random_digraph(key, n, density):
    a = jax.random.bernoulli(key, density, (n, n)).astype(float)
    return a * (1.0 - jnp.eye(n))


def all_digraphs(n):
    """Every directed graph on n nodes, (2^M, n, n), bit m of the index (most significant
    first) being the tie of dyad m in the order of ``network.dyads(n, directed=True)``."""
    rows, cols = network.dyads(n, directed=True)
    bits = np.array(list(itertools.product([0.0, 1.0], repeat=rows.size)))
    a = np.zeros((bits.shape[0], n, n))
    a[:, rows, cols] = bits
    return jnp.asarray(a)


def every_directed_statistic(n):
    x = np.linspace(-1.0, 2.0, n)
    groups = np.arange(n) % 3
    return (
        network.edges(),
        network.mutual(),
        network.stars(2, direction="out"),
        network.stars(3, direction="in"),
        network.triangles(),
        network.covariate(x, role="sender"),
        network.covariate(x**2, role="receiver"),
        network.covariate(-x),
        network.same_group(groups),
        network.difference(x**2),
        network.weighted_degrees(0.7, direction="out"),
        network.weighted_degrees(0.3, direction="in"),
        network.weighted_shared_partners(0.4),
        network.weighted_dyad_partners(0.6),
    )


def test_change_statistics_equal_differences_of_recomputation(key):
    """δ_ij(A) = s(A with i → j) − s(A without i → j), the tie j → i left as it is, on 12
    random directed graphs of densities 0.05–0.95 and 50 random ordered pairs in each
    (definition of a change statistic)."""
    n, num_graphs, num_dyads = 8, 12, 50
    stats = every_directed_statistic(n)

    def both(a, i, j):
        plus, minus = a.at[i, j].set(1.0), a.at[i, j].set(0.0)
        s_plus = network.statistics(stats, plus, directed=True)
        diff = s_plus - network.statistics(stats, minus, directed=True)
        return network.change_statistics(stats, a, i, j, directed=True), diff

    k_graph, k_i, k_j = jax.random.split(key, 3)
    density = jnp.linspace(0.05, 0.95, num_graphs)
    keys = jax.random.split(k_graph, num_graphs)
    graphs = jax.vmap(lambda k, p: random_digraph(k, n, p))(keys, density)
    i = jax.random.randint(k_i, (num_graphs, num_dyads), 0, n)
    j = (i + jax.random.randint(k_j, (num_graphs, num_dyads), 1, n)) % n  # j ≠ i
    per_graph = jax.vmap(both, in_axes=(None, 0, 0))
    change, diff = jax.jit(jax.vmap(per_graph))(graphs, i, j)
    np.testing.assert_allclose(change, diff, rtol=1e-10, atol=1e-10)


# Transitive triples i → j → k with i → k in each triad type of the census (the M-A-N labels of
# Holland & Leinhardt 1976, Sociol. Methodol. 7, as networkx names them; reference from memory),
# counted by hand from the type's ties: e.g. 120D
# (A ← B → C, A ↔ C) holds B→A→C and B→C→A; 300 holds all 3! orderings. Other types: none.
TRANSITIVE_TRIPLES_PER_TRIAD = {"030T": 1, "120D": 2, "120U": 2, "120C": 1, "210": 3, "300": 6}


def test_statistics_match_counts_from_networkx(key):
    """Each total against an independent count on a networkx DiGraph: reciprocity, out/in
    degrees, successors/predecessors and the triad census (networkx 3 docs for each function;
    the weighted forms as sums over the degree and two-path distributions, Hunter 2007, Social
    Networks 29(2), with outgoing two-paths i → k → j as the partners)."""
    n = 10
    a = np.asarray(random_digraph(key, n, 0.4))
    g = nx.from_numpy_array(a, create_using=nx.DiGraph)
    stats = every_directed_statistic(n)
    x, groups = np.linspace(-1.0, 2.0, n), np.arange(n) % 3
    out_deg = np.array([g.out_degree(v) for v in range(n)])
    in_deg = np.array([g.in_degree(v) for v in range(n)])

    def two_paths(u, v):  # the k with u → k → v
        return len(set(g.successors(u)) & set(g.predecessors(v)))

    def weighted(decay, counts):
        r = 1 - math.exp(-decay)
        return math.exp(decay) * sum(1 - r ** int(c) for c in counts)

    census = nx.triadic_census(g)
    pairs = [(u, v) for u in range(n) for v in range(n) if u != v]
    expected = [
        g.number_of_edges(),
        # networkx: reciprocity = (ties in a mutual pair) / (all ties), so pairs = r·E/2
        nx.reciprocity(g) * g.number_of_edges() / 2,
        sum(math.comb(int(d), 2) for d in out_deg),
        sum(math.comb(int(d), 3) for d in in_deg),
        sum(TRANSITIVE_TRIPLES_PER_TRIAD.get(t, 0) * c for t, c in census.items()),
        sum(x[u] for u, v in g.edges),
        sum(x[v] ** 2 for u, v in g.edges),
        sum(-x[u] - x[v] for u, v in g.edges),
        sum(groups[u] == groups[v] for u, v in g.edges),
        sum(abs(x[u] ** 2 - x[v] ** 2) for u, v in g.edges),
        weighted(0.7, out_deg),
        weighted(0.3, in_deg),
        weighted(0.4, [two_paths(u, v) for u, v in g.edges]),
        weighted(0.6, [two_paths(u, v) for u, v in pairs]),
    ]
    np.testing.assert_allclose(network.statistics(stats, a, directed=True), expected, rtol=1e-10)
    # the same transitive triples counted directly: for each tie u → v, the two-paths u → k → v
    assert sum(two_paths(u, v) for u, v in g.edges) == expected[4]


def test_symmetric_matrix_counts_as_directed_ties_both_ways(key):
    """On a symmetric matrix each undirected tie is two directed ties that form a mutual pair,
    and each triangle is 6 transitive triples (from the definitions)."""
    upper = jnp.triu(jax.random.bernoulli(key, 0.5, (7, 7)).astype(float), k=1)
    a = upper + upper.T
    undirected = network.statistics((network.edges(), network.triangles()), a)
    directed = network.statistics(
        (network.edges(), network.mutual(), network.triangles()), a, directed=True
    )
    np.testing.assert_allclose(directed, np.array([2, 1, 6]) * undirected[np.array([0, 0, 1])])


def test_edges_and_mutual_normaliser_is_closed_form():
    """Edges and mutual ties only: the pairs are independent with states none, one way (two
    of them) and both ways, so Z = (1 + 2e^{θ₁} + e^{2θ₁+θ₂})^{n(n−1)/2} (Holland & Leinhardt
    1981, JASA 76(373), the p1 model without node effects). Enumeration of all 2^12 graphs."""
    n, theta = 4, np.array([-0.6, 1.3])
    d = network.model(n, [network.edges(), network.mutual()], theta, directed=True)
    log_g = jax.vmap(d.log_potential)(all_digraphs(n))
    per_pair = 1 + 2 * math.exp(theta[0]) + math.exp(2 * theta[0] + theta[1])
    np.testing.assert_allclose(jax.scipy.special.logsumexp(log_g), 6 * math.log(per_pair))


def test_pseudo_likelihood_is_the_sum_of_exact_conditionals(key):
    """For 64 of the 2^12 directed graphs on 4 nodes, drawn at random, the pseudo-log-likelihood
    equals Σ over the 12 ties of log p(A_ij | rest), each conditional computed from the
    enumerated joint distribution p(A) ∝ exp(θ·s(A)) over all 2^12 directed graphs (Besag
    1975, The Statistician 24(3): the pseudo-likelihood is the product of the full
    conditionals)."""
    n = 4
    stats = [
        network.edges(),
        network.mutual(),
        network.triangles(),
        network.stars(2, direction="in"),
        network.covariate(np.array([0.5, -1.0, 2.0, 0.0]), role="sender"),
        network.weighted_shared_partners(0.5),
    ]
    theta = jnp.array([-0.8, 0.9, 0.4, -0.3, 0.35, 0.2])
    d = network.model(n, stats, theta, directed=True)
    graphs = all_digraphs(n)
    log_g = jax.jit(jax.vmap(d.log_potential))(graphs)
    m = n * (n - 1)
    index = jax.random.choice(key, graphs.shape[0], (64,), replace=False)
    flips = 1 << np.arange(m - 1, -1, -1)  # the index of a graph with the tie of dyad k flipped

    def exact(g):
        other = log_g[jnp.bitwise_xor(g, flips)]
        return jnp.sum(log_g[g] - jnp.logaddexp(log_g[g], other))

    pseudo = jax.jit(
        jax.vmap(lambda g: d.family.pseudo_log_likelihood(graphs[g], coefficients=theta))
    )
    np.testing.assert_allclose(pseudo(index), jax.vmap(exact)(index), rtol=1e-10)


def invented_messages():
    """An invented directed network: who messaged whom among 30 members of a (fictional)
    allotment society over one season, grown with a fixed seed — ties likelier within the
    three garden plots, replies likely, and keener members (higher x) sending more."""
    rng = np.random.default_rng(42)
    n = 30
    plot = np.arange(n) % 3
    keen = rng.normal(size=n)
    logit = -2.6 + 1.0 * (plot[:, None] == plot[None, :]) + 0.5 * keen[:, None]
    a = (rng.random((n, n)) < 1 / (1 + np.exp(-logit))).astype(float)
    reply = rng.random((n, n)) < 0.35
    a = np.maximum(a, a.T * reply.T)
    np.fill_diagonal(a, 0.0)
    return a, plot, keen


def test_pseudo_likelihood_maximum_equals_logistic_regression():
    """Maximum pseudo-likelihood = logistic regression of each tie i → j on its change
    statistics (Strauss & Ikeda 1990, JASA 85(409)); the design is rebuilt here from full
    recomputations s(A⁺_ij) − s(A⁻_ij) over all ordered pairs and fitted by scipy."""
    a, plot, keen = invented_messages()
    stats = (
        network.edges(),
        network.mutual(),
        network.same_group(plot),
        network.covariate(keen, role="sender"),
        network.difference(keen),
        network.weighted_shared_partners(0.5),
    )
    d = network.model(a, list(stats), directed=True)
    fit = maximum_pseudo_likelihood(d, jnp.asarray(a), parameters=("coefficients",))
    fit = np.asarray(fit["coefficients"])

    rows, cols = np.nonzero(~np.eye(a.shape[0], dtype=bool))

    def recomputed(i, j):
        plus, minus = (jnp.asarray(a).at[i, j].set(v) for v in (1.0, 0.0))
        total = lambda g: network.statistics(stats, g, directed=True)  # noqa: E731
        return total(plus) - total(minus)

    design = np.asarray(jax.jit(jax.vmap(recomputed))(rows, cols))
    response = a[rows, cols]
    ours, y = network.dyad_design(stats, a, directed=True)
    np.testing.assert_allclose(ours, design, atol=1e-10)
    np.testing.assert_array_equal(y, response)
    beta, _ = logistic_fit(design, response)
    np.testing.assert_allclose(fit, beta, rtol=1e-6, atol=1e-6)


def directed_site(y):
    theta = numpyro.sample("theta", dist.Normal(0.0, 1.0).expand([2]).to_event(1))
    numpyro.sample(
        "g", network.model(5, [network.edges(), network.mutual()], theta, directed=True), obs=y
    )


def test_directed_site_log_density_and_structure(key):
    """At a NumPyro site the directed model's log potential is θ·s(A) (definition)."""
    y = np.asarray(random_digraph(key, 5, 0.4))
    theta = jnp.array([0.3, -0.7])
    log_joint, _ = log_density(as_potential(directed_site), (jnp.asarray(y),), {}, {"theta": theta})
    s = network.statistics((network.edges(), network.mutual()), y, directed=True)
    prior = float(jnp.sum(dist.Normal().log_prob(theta)))
    np.testing.assert_allclose(float(log_joint), float(s @ theta) + prior, rtol=1e-12)

    g = nx.from_numpy_array(y, create_using=nx.DiGraph)
    d = network.model(g, [network.edges()])
    assert d.family.structure == NetworkStructure(5, (network.edges(),), directed=True)
    assert d.family.name == "random graph, directed (edges)"
    undirected = network.model(nx.Graph(g.to_undirected()), [network.edges()])
    assert undirected.family.structure.directed is False
    assert undirected.family.name == "random graph, undirected (edges)"
    assert network.model(y, [network.edges()], directed=True).family.structure.directed


def test_directed_simulator_leaves_the_exact_distribution_invariant(key):
    """Chains started from exact draws (enumeration of all 2^12 directed graphs on 4 nodes) keep
    the exact means of the statistics after one call of the default simulator (|error| < 4
    standard errors; independent draws, so SE = sd/√chains). The samplers' own tests cover
    each of them; this one checks that directed change statistics drive them correctly."""
    n, chains = 4, 2000
    stats = (network.edges(), network.mutual(), network.triangles())
    theta = jnp.array([-0.4, 0.8, 0.3])
    d = network.model(n, list(stats), theta, toggles=12, directed=True)
    graphs = all_digraphs(n)
    s_all = jax.vmap(lambda a: network.statistics(stats, a, directed=True))(graphs)
    log_p = s_all @ theta
    p = jnp.exp(log_p - jax.scipy.special.logsumexp(log_p))
    exact_mean = p @ s_all
    exact_sd = jnp.sqrt(p @ (s_all - exact_mean[None, :]) ** 2)
    k_start, k_noise = jax.random.split(key)
    start = graphs[jax.random.categorical(k_start, log_p, shape=(chains,))]
    step = next(iter(d.family.simulators.values()))
    noise = jax.random.normal(k_noise, (chains, *step.noise_shape(start[0])))
    final = jax.jit(jax.vmap(lambda a, z: step.step(d.params, a, z)))(start, noise)
    assert jnp.mean(jnp.any(final != start, axis=(1, 2))) > 0.5  # the chains moved
    s_final = jax.vmap(lambda a: network.statistics(stats, a, directed=True))(final)
    error = jnp.mean(s_final, axis=0) - exact_mean
    np.testing.assert_array_less(jnp.abs(error), 4 * exact_sd / math.sqrt(chains))


# --- input errors ------------------------------------------------------------------------
ONE_WAY = np.array([[0, 1, 0], [0, 0, 1], [1, 0, 0]])  # a directed three-cycle


def test_asymmetric_matrix_needs_directed():
    with pytest.raises(ValueError, match=r"not symmetric.*or pass directed=True"):
        network.model(ONE_WAY, [network.edges()])
    assert network.model(ONE_WAY, [network.edges()], directed=True).family.structure.directed
    np.testing.assert_array_equal(network.adjacency(ONE_WAY, directed=True), ONE_WAY)


@pytest.mark.parametrize(
    "matrix,pattern",
    [
        (np.ones((3, 4)), r"must be square.*got shape \(3, 4\)"),
        (np.where(ONE_WAY, 3.0, 0.0), r"must be 0 or 1; found \[3\.0\].*binarise"),
        (ONE_WAY + np.diag([0, 1, 0]), r"diagonal must be 0.*nodes \[1\].*fill_diagonal"),
        (np.where(ONE_WAY, np.nan, 0.0), r"NaN at \[\[0, 1\]"),
    ],
)
def test_bad_directed_matrix(matrix, pattern):
    with pytest.raises(ValueError, match=pattern):
        network.adjacency(matrix, directed=True)
    with pytest.raises(ValueError, match=pattern):
        network.model(matrix, [network.edges()], directed=True)


def test_bad_networkx_graphs_for_directed_models():
    with pytest.raises(ValueError, match=r"directed \(DiGraph\).*to_undirected"):
        network.model(nx.DiGraph([(0, 1)]), [network.edges()], directed=False)
    with pytest.raises(
        ValueError, match=r"directed=True, but the graph is undirected.*to_directed"
    ):
        network.model(nx.Graph([(0, 1)]), [network.edges()], directed=True)
    with pytest.raises(ValueError, match=r"MultiDiGraph.*networkx\.DiGraph\(graph\)"):
        network.model(nx.MultiDiGraph([(0, 1), (0, 1)]), [network.edges()])
    with pytest.raises(ValueError, match=r"1 self-loop.*node 2.*remove_edges_from"):
        network.model(nx.DiGraph([(0, 1), (2, 2)]), [network.edges()])


def test_directed_models_need_a_direction_for_degree_terms():
    with pytest.raises(ValueError, match=r"'stars2' needs a direction.*direction='out'"):
        network.model(4, [network.stars(2)], directed=True)
    with pytest.raises(ValueError, match=r"'weighted_degrees\(0.5\)' needs a direction"):
        network.model(4, [network.weighted_degrees(0.5)], directed=True)
    with pytest.raises(ValueError, match=r"'stars2' needs a direction"):
        network.statistics((network.stars(2),), np.zeros((3, 3)), directed=True)


def test_observed_directed_graph_is_checked_at_the_site(key):
    bad = np.array(random_digraph(key, 5, 0.5))
    bad[2, 2] = 1.0
    with pytest.raises(ValueError, match=r"Site 'g' \(random graph, directed.*diagonal must be 0"):
        log_density(as_potential(directed_site), (jnp.asarray(bad),), {}, {"theta": jnp.ones(2)})
    with pytest.raises(ValueError, match=r"Site 'g'.*has 4 nodes.*built for 5"):
        log_density(as_potential(directed_site), (jnp.zeros((4, 4)),), {}, {"theta": jnp.ones(2)})
