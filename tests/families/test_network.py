"""Random graph family: statistics, change statistics, toggle samplers, pseudo-likelihood, the
karate-club network and the input checks."""

import itertools
import math

import jax
import jax.numpy as jnp
import networkx as nx
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
import scipy.optimize
from numpyro.handlers import seed, trace
from numpyro.infer.util import log_density

import zhat
from zhat.estimators import maximum_pseudo_likelihood, single_auxiliary
from zhat.families import network
from zhat.model import as_potential


def random_graph(key, n, density):
    upper = jnp.triu(jax.random.bernoulli(key, density, (n, n)).astype(float), k=1)
    return upper + upper.T


def all_graphs(n):
    """Every graph on n nodes, (2^M, n, n)."""
    rows, cols = np.triu_indices(n, k=1)
    bits = np.array(list(itertools.product([0.0, 1.0], repeat=rows.size)))
    a = np.zeros((bits.shape[0], n, n))
    a[:, rows, cols] = bits
    return jnp.asarray(a + a.transpose(0, 2, 1))


def every_statistic(n):
    x = np.linspace(-1.0, 2.0, n)
    groups = np.arange(n) % 3
    return (
        network.edges(),
        network.stars(2),
        network.stars(3),
        network.triangles(),
        network.covariate(x),
        network.same_group(groups),
        network.weighted_degrees(0.7),
        network.weighted_shared_partners(0.4),
        network.difference(x**2),
        network.weighted_dyad_partners(0.6),
    )


def test_change_statistics_equal_differences_of_recomputation(key):
    """δ_ij(A) = s(A with i–j) − s(A without i–j), on random graphs and random dyads."""
    n, num_dyads = 9, 60
    stats = every_statistic(n)
    for g, density in enumerate([0.2, 0.5, 0.8]):
        k_graph, k_i, k_j = jax.random.split(jax.random.fold_in(key, g), 3)
        a = random_graph(k_graph, n, density)
        i = jax.random.randint(k_i, (num_dyads,), 0, n)
        j = (i + jax.random.randint(k_j, (num_dyads,), 1, n)) % n  # j ≠ i

        def both(i, j, a=a):
            plus = a.at[i, j].set(1.0).at[j, i].set(1.0)
            minus = a.at[i, j].set(0.0).at[j, i].set(0.0)
            diff = network.statistics(stats, plus) - network.statistics(stats, minus)
            return network.change_statistics(stats, a, i, j), diff

        change, diff = jax.vmap(both)(i, j)
        np.testing.assert_allclose(change, diff, rtol=1e-10, atol=1e-10)


def test_statistics_match_counts_from_networkx(key):
    """Each total against an independent count made with networkx (degrees, triangles, common
    neighbours; the weighted forms as sums over the degree and shared-partner distributions,
    Hunter 2007, J. Stat. Softw. 24(3), eqs. 26 and 30; the dyadwise form likewise over every
    pair, tied or not)."""
    n = 11
    a = np.asarray(random_graph(key, n, 0.45))
    g = nx.from_numpy_array(a)
    stats = every_statistic(n)
    degree = np.array([g.degree(v) for v in range(n)])
    x, groups = np.asarray(stats[4].values), np.arange(n) % 3
    shared = [len(list(nx.common_neighbors(g, u, v))) for u, v in g.edges]
    every_pair = itertools.combinations(range(n), 2)
    dyad_shared = [len(list(nx.common_neighbors(g, u, v))) for u, v in every_pair]
    r_deg, r_esp, r_dsp = 1 - math.exp(-0.7), 1 - math.exp(-0.4), 1 - math.exp(-0.6)
    degree_counts = np.bincount(degree, minlength=n)
    esp_counts = np.bincount(shared, minlength=n)
    dsp_counts = np.bincount(dyad_shared, minlength=n)
    expected = [
        g.number_of_edges(),
        sum(math.comb(int(d), 2) for d in degree),
        sum(math.comb(int(d), 3) for d in degree),
        sum(nx.triangles(g).values()) / 3,
        sum(x[u] + x[v] for u, v in g.edges),
        sum(groups[u] == groups[v] for u, v in g.edges),
        math.exp(0.7) * sum((1 - r_deg**k) * degree_counts[k] for k in range(1, n)),
        math.exp(0.4) * sum((1 - r_esp**k) * esp_counts[k] for k in range(1, n)),
        sum(abs(x[u] ** 2 - x[v] ** 2) for u, v in g.edges),
        math.exp(0.6) * sum((1 - r_dsp**k) * dsp_counts[k] for k in range(1, n)),
    ]
    np.testing.assert_allclose(network.statistics(stats, a), expected, rtol=1e-10)


def test_edges_only_normaliser_is_closed_form():
    """Edges only: the dyads are independent, Z(θ) = (1 + e^θ)^{n(n−1)/2} (closed form)."""
    n, theta = 4, -0.7
    d = network.model(n, [network.edges()], [theta])
    graphs = all_graphs(n)
    log_g = jax.vmap(d.log_potential)(graphs)
    s = jax.vmap(d.statistics)(graphs)
    np.testing.assert_allclose(log_g, theta * s[:, 0], rtol=1e-12)
    np.testing.assert_allclose(
        jax.scipy.special.logsumexp(log_g), 6 * math.log1p(math.exp(theta)), rtol=1e-12
    )


@pytest.mark.parametrize("simulator", ["tie_no_tie", "toggle"])
def test_edges_only_simulated_density_is_logistic(key, simulator):
    """From the empty graph, the simulated tie density → logistic(θ) (independent dyads).
    Chains are independent, so the standard error is the sd of the chain means / √chains."""
    n, theta, chains = 10, -1.0, 2000
    d = network.model(n, [network.edges()], [theta], toggles=300)
    step = d.family.simulators[simulator]
    empty = jnp.zeros((n, n))
    noise = jax.random.normal(key, (chains, *step.noise_shape(empty)))
    final = jax.vmap(lambda z: step.step(d.params, empty, z))(noise)
    density = jnp.sum(final, axis=(1, 2)) / (n * (n - 1))
    mcse = float(jnp.std(density) / math.sqrt(chains))
    assert abs(float(jnp.mean(density)) - 1 / (1 + math.exp(-theta))) < 4 * mcse


@pytest.mark.parametrize("simulator", ["tie_no_tie", "toggle"])
def test_simulators_leave_the_exact_distribution_invariant(key, simulator):
    """Start independent chains from exact draws (enumeration of all 2^10 graphs on 5 nodes),
    run one simulator call: the end states must still have the exact means of the statistics
    (|error| < 4 standard errors; the draws are independent, so SE = sd/√chains)."""
    n, chains = 5, 4000
    stats = (
        network.edges(),
        network.stars(2),
        network.triangles(),
        network.covariate(np.arange(5)),
    )
    theta = jnp.array([-0.3, -0.4, 1.1, 0.25])
    d = network.model(n, list(stats), theta, toggles=25)
    graphs = all_graphs(n)
    s_all = jax.vmap(lambda a: network.statistics(stats, a))(graphs)
    log_p = s_all @ theta
    p = jnp.exp(log_p - jax.scipy.special.logsumexp(log_p))
    exact_mean = p @ s_all
    exact_sd = jnp.sqrt(p @ (s_all - exact_mean[None, :]) ** 2)

    k_start, k_noise = jax.random.split(key)
    start = graphs[jax.random.categorical(k_start, log_p, shape=(chains,))]
    step = d.family.simulators[simulator]
    noise = jax.random.normal(k_noise, (chains, *step.noise_shape(start[0])))
    final = jax.vmap(lambda a, z: step.step(d.params, a, z))(start, noise)
    s_final = jax.vmap(lambda a: network.statistics(stats, a))(final)

    moved = jnp.mean(jnp.any(final != start, axis=(1, 2)))
    assert moved > 0.5  # the chains did move
    error = jnp.mean(s_final, axis=0) - exact_mean
    np.testing.assert_array_less(jnp.abs(error), 4 * exact_sd / math.sqrt(chains))


def test_simulator_keeps_shape_and_dtype_and_is_the_same_jitted(key):
    n = 6
    d = network.model(n, [network.edges(), network.triangles()], [-0.5, 0.3], toggles=10)
    step = d.family.simulators["tie_no_tie"]
    flat = random_graph(key, n, 0.5).reshape(-1).astype(jnp.int32)
    z = jax.random.normal(jax.random.fold_in(key, 1), step.noise_shape(flat))
    out = step.step(d.params, flat, z)
    assert out.shape == flat.shape and out.dtype == flat.dtype
    np.testing.assert_array_equal(out, jax.jit(step.step)(d.params, flat, z))
    network.check_adjacency(np.asarray(out).reshape(n, n))


def karate():
    """Zachary's karate club network (Zachary 1977, J. Anthropol. Res. 33(4)), as shipped by
    networkx; its ties carry weights, which are ignored (a tie is present or absent)."""
    return nx.karate_club_graph()


def test_karate_club_loads_with_networkx_counts():
    g = karate()
    a = network.adjacency(g)
    club = network.node_values(g, "club")
    stats = [network.edges(), network.triangles(), network.same_group(club)]
    s = network.model(g, stats).statistics(a)
    same = sum(g.nodes[u]["club"] == g.nodes[v]["club"] for u, v in g.edges)
    np.testing.assert_array_equal(s, [g.number_of_edges(), sum(nx.triangles(g).values()) / 3, same])


def test_pseudo_likelihood_maximum_equals_logistic_regression():
    """Maximum pseudo-likelihood = logistic regression of the ties on their change statistics
    (Strauss & Ikeda 1990); the regression here is fitted by scipy's BFGS."""
    g = karate()
    a = network.adjacency(g)
    stats = [network.edges(), network.stars(2), network.triangles()]
    d = network.model(g, stats)
    fit = maximum_pseudo_likelihood(d, jnp.asarray(a), parameters=("coefficients",))
    fit = fit["coefficients"]

    design, y = (np.asarray(v) for v in network.dyad_design(tuple(stats), a))

    def loss(beta):
        eta = design @ beta
        return np.sum(np.logaddexp(0.0, eta) - y * eta)

    def grad(beta):
        return design.T @ (1 / (1 + np.exp(-(design @ beta))) - y)

    ref = scipy.optimize.minimize(loss, np.zeros(3), jac=grad, method="BFGS", tol=1e-12)
    np.testing.assert_allclose(fit, ref.x, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(
        d.family.pseudo_log_likelihood(jnp.asarray(a), coefficients=fit), -ref.fun, rtol=1e-10
    )


def graph_model(y):
    theta = numpyro.sample("theta", dist.Normal(0.0, 1.0).expand([2]).to_event(1))
    numpyro.sample("g", network.model(6, [network.edges(), network.triangles()], theta), obs=y)


def test_model_runs_under_expose_and_is_approximate(key):
    y = np.asarray(random_graph(key, 6, 0.4))
    estimator = single_auxiliary(
        sampler="tie_no_tie", sweeps=2, reference={"coefficients": jnp.zeros(2)}
    )
    assert not estimator.unbiased and "APPROXIMATE" in estimator.name
    tr = trace(seed(zhat.expose(graph_model, estimator), key)).get_trace(jnp.asarray(y))
    assert tr["g_noise"]["value"].shape == (1, 2 * 15 * 3)
    log_joint, _ = log_density(
        as_potential(graph_model), (jnp.asarray(y),), {}, {"theta": jnp.ones(2)}
    )
    expected = float(jnp.sum(network.statistics((network.edges(), network.triangles()), y)))
    assert abs(float(log_joint) - (expected + float(dist.Normal().log_prob(1.0)) * 2)) < 1e-10


# --- input errors ------------------------------------------------------------------------
TRIANGLE = np.array([[0, 1, 1], [1, 0, 1], [1, 1, 0]])


@pytest.mark.parametrize(
    "matrix,pattern",
    [
        (np.ones((3, 4)), r"must be square.*got shape \(3, 4\)"),
        (np.ones(3), r"must be square.*got shape \(3,\)"),
        (np.where(TRIANGLE, 2.5, 0.0), r"must be 0 or 1; found \[2\.5\].*binarise"),
        (TRIANGLE + np.eye(3), r"diagonal must be 0.*nodes \[0, 1, 2\].*fill_diagonal"),
        (np.triu(TRIANGLE), r"not symmetric \(entry \[0, 1\] = 1 but \[1, 0\] = 0\).*maximum"),
        (np.where(np.eye(3) == 1, np.nan, TRIANGLE), r"NaN at \[\[0, 0\]"),
        (np.array([["a", "b"], ["c", "d"]]), r"must be numeric.*0/1 array"),
    ],
)
def test_bad_adjacency_matrix(matrix, pattern):
    with pytest.raises((ValueError, TypeError), match=pattern):
        network.adjacency(matrix)


def test_bad_networkx_graphs():
    with pytest.raises(ValueError, match=r"directed \(DiGraph\).*to_undirected.*directed=True"):
        network.adjacency(nx.DiGraph([(0, 1)]), directed=False)
    with pytest.raises(ValueError, match=r"MultiGraph.*networkx\.Graph\(graph\)"):
        network.adjacency(nx.MultiGraph([(0, 1), (0, 1)]))
    with pytest.raises(ValueError, match=r"1 self-loop.*node 2.*remove_edges_from"):
        network.adjacency(nx.Graph([(0, 1), (2, 2)]))
    with pytest.raises(ValueError, match=r"have no attribute 'colour'.*node 0"):
        network.node_values(nx.Graph([(0, 1)]), "colour")


def test_observed_graph_is_checked_at_the_site(key):
    bad = np.array(random_graph(key, 6, 0.5))
    bad[0, 1] = 1 - bad[1, 0]
    with pytest.raises(ValueError, match=r"Site 'g'.*not symmetric"):
        log_density(as_potential(graph_model), (jnp.asarray(bad),), {}, {"theta": jnp.ones(2)})
    with pytest.raises(ValueError, match=r"Site 'g'.*has 5 nodes.*built for 6"):
        log_density(as_potential(graph_model), (jnp.zeros((5, 5)),), {}, {"theta": jnp.ones(2)})


def test_bad_model_arguments():
    with pytest.raises(ValueError, match=r"stars\(k\) needs a whole number k ≥ 1"):
        network.stars(0)
    with pytest.raises(ValueError, match=r"decay > 0"):
        network.weighted_shared_partners(-1.0)
    with pytest.raises(ValueError, match=r"decay > 0"):
        network.weighted_degrees(0)
    with pytest.raises(ValueError, match=r"one number per node.*same_group"):
        network.covariate(["a", "b"])
    with pytest.raises(ValueError, match=r"must be finite.*nodes \[1\]"):
        network.covariate([0.0, np.inf])
    with pytest.raises(ValueError, match=r"difference\(values\) needs one number per node"):
        network.difference(np.zeros((2, 2)))
    with pytest.raises(ValueError, match=r"difference values must be finite.*nodes \[0\]"):
        network.difference([np.nan, 1.0])
    with pytest.raises(ValueError, match=r"weighted_dyad_partners\(decay\) needs a decay > 0"):
        network.weighted_dyad_partners(0.0)
    with pytest.raises(ValueError, match=r"stars\(direction=...\) must be 'out' or 'in'"):
        network.stars(2, direction="up")
    with pytest.raises(ValueError, match=r"covariate\(role=...\) must be 'sender' or 'receiver'"):
        network.covariate([1.0, 2.0], role="middle")
    with pytest.raises(ValueError, match=r"one label per node \(1-D\)"):
        network.same_group(np.zeros((2, 2)))
    with pytest.raises(ValueError, match=r"'covariate' has 3 node values but the graph has 4"):
        network.model(4, [network.covariate([1.0, 2.0, 3.0])])
    with pytest.raises(ValueError, match=r"coefficients must have shape \(2,\).*got shape \(3,\)"):
        network.model(4, [network.edges(), network.triangles()], [1.0, 2.0, 3.0])
    with pytest.raises(ValueError, match=r"repeat one"):
        network.model(4, [network.edges(), network.edges()])
    with pytest.raises(TypeError, match=r"non-empty list of network statistics"):
        network.model(4, ["edges"])
    with pytest.raises(TypeError, match=r"number of nodes, a networkx Graph"):
        network.model(4.0, [network.edges()])
    with pytest.raises(ValueError, match=r"at least 2 nodes"):
        network.model(1, [network.edges()])
    with pytest.raises(ValueError, match=r"toggles must be a positive whole number"):
        network.model(4, [network.edges()], toggles=0)
    with pytest.raises(ValueError, match=r"unknown statistic kind 'cycles'.*network\.edges\(\)"):
        network.model(4, [network.Statistic("cycles")])
    with pytest.raises(TypeError, match=r"directed must be True, False or None"):
        network.model(4, [network.edges()], directed="yes")


def test_directed_only_terms_are_refused_on_undirected_models():
    """Mutual ties, out-/in-stars and sender/receiver covariates need a direction."""
    with pytest.raises(ValueError, match=r"'mutual'.*only in directed graphs.*directed=True"):
        network.model(4, [network.edges(), network.mutual()])
    with pytest.raises(ValueError, match=r"'out_stars2' has direction='out'.*directed=True"):
        network.model(4, [network.stars(2, direction="out")])
    with pytest.raises(ValueError, match=r"'weighted_in_degrees\(0.5\)' has direction='in'"):
        network.model(4, [network.weighted_degrees(0.5, direction="in")])
    with pytest.raises(ValueError, match=r"'covariate_sender' has role='sender'.*drop role"):
        network.model(4, [network.covariate(np.arange(4), role="sender")])
    with pytest.raises(ValueError, match=r"'mutual'.*only in directed graphs"):
        network.statistics((network.mutual(),), np.zeros((3, 3)))
