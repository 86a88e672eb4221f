"""The O(n) toggle samplers of random graphs: change statistics read off the carried state, the
uniform choice of ties and empty dyads, invariance of the exact distribution, and the carried
state after long runs."""

import itertools
import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from jax.scipy.special import ndtri

from zhat.families import network
from zhat.families.network import toggles
from zhat.families.network.statistics import (
    difference,
    mutual,
    stars,
    weighted_degrees,
    weighted_dyad_partners,
)
from zhat.families.network.toggles import (
    change_from_state,
    choose_empty_dyad,
    choose_tie,
    run,
    toggle_moves,
    toggle_simulators,
)


def random_graph(key, n, density, directed=False):
    ties = jax.random.bernoulli(key, density, (n, n)).astype(float)
    if directed:
        return ties * (1.0 - jnp.eye(n))
    upper = jnp.triu(ties, k=1)
    return upper + upper.T


def undirected_statistics(n):
    """Every undirected statistic: the fast forms and some of the generic fallback."""
    x = np.linspace(-1.0, 2.0, n)
    return (
        network.edges(),
        network.stars(2),
        network.stars(3),
        network.triangles(),
        network.covariate(x),
        network.same_group(np.arange(n) % 3),
        difference(x),
        network.weighted_degrees(0.7),
        network.weighted_shared_partners(0.4),
        weighted_dyad_partners(0.6),
    )


def directed_statistics(n):
    x = np.linspace(-1.0, 2.0, n)
    return (
        network.edges(),
        mutual(),
        stars(2, direction="out"),
        stars(2, direction="in"),
        network.triangles(),
        network.covariate(x, role="sender"),
        weighted_degrees(0.5, direction="in"),
        network.weighted_shared_partners(0.4),
    )


def random_dyads(key, n, count):
    k_i, k_j = jax.random.split(key)
    i = jax.random.randint(k_i, (count,), 0, n)
    j = (i + jax.random.randint(k_j, (count,), 1, n)) % n  # j ≠ i
    return i, j


def assert_fast_equals_generic(stats, state, i, j, directed):
    a = state.adjacency
    fast = jax.vmap(lambda i, j: change_from_state(stats, state, i, j, directed=directed))(i, j)
    generic = jax.vmap(lambda i, j: network.change_statistics(stats, a, i, j, directed=directed))(
        i, j
    )
    np.testing.assert_allclose(fast, generic, rtol=1e-10, atol=1e-10)


@pytest.mark.parametrize("directed", [False, True])
def test_change_statistics_from_the_state_equal_the_generic_ones(key, directed):
    """δ from (A, d, S) equals ``change_statistics`` (itself checked against recomputation in
    test_network.py), on random graphs of several densities and many dyads, tied or not."""
    n, count = 14, 300
    stats = directed_statistics(n) if directed else undirected_statistics(n)
    moves = toggle_moves(n, stats, directed)
    for g, density in enumerate([0.1, 0.4, 0.85]):
        k_graph, k_dyads = jax.random.split(jax.random.fold_in(key, g))
        state = moves.init(random_graph(k_graph, n, density, directed))
        i, j = random_dyads(k_dyads, n, count)
        assert_fast_equals_generic(stats, state, i, j, directed)


def grid_uniforms(size):
    """Standard-normal noise whose Φ is the midpoint grid (k + 1/2)/size, k < size."""
    return ndtri((np.arange(size) + 0.5) / size)


def assert_choices_are_uniform(state, n, directed):
    """Push a grid of G uniforms through the choice of a tie and of an empty dyad. With G a
    multiple of Σd and of Σ(n − 1 − d), the rank floor(u Σd) takes each value exactly G/Σd
    times, so a uniform choice gives every tie exactly G/E grid points and every empty dyad
    G/(M − E) (exact reference: the derivation in the module docstring of toggles.py)."""
    a = np.asarray(state.adjacency)
    m = n * (n - 1) if directed else n * (n - 1) // 2
    ties = int(state.ties)
    sides = 1 if directed else 2
    size = 4 * sides * ties * sides * (m - ties)
    z = jnp.asarray(grid_uniforms(size))
    pairs = [(i, j) for i in range(n) for j in range(n) if i != j and (directed or i < j)]
    for choose, wanted, count in [(choose_tie, 1.0, ties), (choose_empty_dyad, 0.0, m - ties)]:
        i, j = jax.vmap(lambda u, choose=choose: choose(state, jax.scipy.special.ndtr(u)))(z)
        i, j = np.asarray(i), np.asarray(j)
        if not directed:
            i, j = np.minimum(i, j), np.maximum(i, j)
        assert np.all(i != j)
        assert np.all(a[i, j] == wanted)
        counts = {p: 0 for p in pairs if a[p] == wanted}
        for p in zip(i.tolist(), j.tolist(), strict=True):
            counts[p] += 1
        assert len(counts) == count
        assert set(counts.values()) == {size // count}


@pytest.mark.parametrize("directed", [False, True])
def test_tie_and_empty_dyad_choice_is_exactly_uniform(key, directed):
    """On a fixed small graph and on the state a run of toggles left (the partner lists then
    hold their neighbours in a shuffled order), every tie and every empty dyad gets the same
    number of grid points."""
    n = 6
    stats = (network.edges(), network.triangles()) if not directed else (network.edges(),)
    moves = toggle_moves(n, stats, directed)
    a = np.zeros((n, n))
    for i, j in [(0, 1), (0, 2), (0, 3), (1, 2), (3, 4), (4, 5), (2, 5)]:
        a[i, j] = 1.0
        if not directed:
            a[j, i] = 1.0
    state = moves.init(jnp.asarray(a))
    assert_choices_are_uniform(state, n, directed)
    theta = jnp.zeros(len(stats))
    noise = jax.random.normal(key, (200, 3))
    shuffled = run(moves, moves.tie_no_tie, theta, state, noise)
    assert 0 < int(shuffled.ties) < (n * (n - 1) if directed else n * (n - 1) // 2)
    assert_choices_are_uniform(shuffled, n, directed)


def all_graphs(n, directed):
    """Every graph on n nodes, (2^M, n, n)."""
    if directed:
        rows, cols = np.nonzero(1 - np.eye(n))
    else:
        rows, cols = np.triu_indices(n, k=1)
    bits = np.array(list(itertools.product([0.0, 1.0], repeat=rows.size)))
    a = np.zeros((bits.shape[0], n, n))
    a[:, rows, cols] = bits
    return jnp.asarray(a if directed else a + a.transpose(0, 2, 1))


@pytest.mark.parametrize("simulator", ["tie_no_tie", "toggle"])
@pytest.mark.parametrize("directed", [False, True])
def test_simulators_leave_the_exact_distribution_invariant(key, simulator, directed):
    """Chains started from exact draws (enumeration of all 64 undirected graphs on 4 nodes, or
    all 64 directed graphs on 3 nodes) and run for one call must still follow the exact
    distribution: the means of the statistics and the probabilities of each number of ties
    agree with the enumeration within 4 standard errors (independent chains, so
    SE = exact sd/√chains)."""
    n = 3 if directed else 4
    chains = 4000
    if directed:
        stats = (
            network.edges(),
            mutual(),
            stars(2, direction="out"),
            network.triangles(),
            network.covariate(np.arange(3.0), role="sender"),
        )
        theta = jnp.array([-0.4, 0.9, -0.3, 0.5, 0.3])
    else:
        stats = (
            network.edges(),
            network.stars(2),
            network.triangles(),
            network.weighted_degrees(0.5),
            network.weighted_shared_partners(0.5),
            weighted_dyad_partners(0.5),
            network.covariate(np.arange(4.0)),
        )
        theta = jnp.array([-0.3, -0.4, 1.1, 0.3, 0.4, -0.2, 0.25])
    graphs = all_graphs(n, directed)
    s_all = jax.vmap(lambda a: network.statistics(stats, a, directed=directed))(graphs)
    log_p = s_all @ theta
    p = jnp.exp(log_p - jax.scipy.special.logsumexp(log_p))
    m = n * (n - 1) if directed else n * (n - 1) // 2
    counts = jnp.sum(graphs, axis=(1, 2)) / (1 if directed else 2)
    features = jnp.concatenate(
        [s_all, (counts[:, None] == jnp.arange(m + 1)[None, :]).astype(float)], 1
    )
    exact_mean = p @ features
    exact_sd = jnp.sqrt(p @ (features - exact_mean[None, :]) ** 2)

    k_start, k_noise = jax.random.split(key)
    index = jax.random.categorical(k_start, log_p, shape=(chains,))
    start = graphs[index]
    step = toggle_simulators(n, stats, 3 * m, directed=directed)[simulator]
    noise = jax.random.normal(k_noise, (chains, *step.noise_shape(start[0])))
    final = jax.vmap(lambda a, z: step.step({"coefficients": theta}, a, z))(start, noise)
    graph_index = jnp.argmax(
        jnp.all(final[:, None] == graphs[None], axis=(2, 3)), axis=1
    )  # every end state is one of the enumerated graphs
    assert bool(jnp.all(jnp.all(final[:, None] == graphs[None], axis=(2, 3)).any(axis=1)))
    assert float(jnp.mean(graph_index != index)) > 0.5  # the chains did move
    error = jnp.mean(features[graph_index], axis=0) - exact_mean
    np.testing.assert_array_less(jnp.abs(error), 4 * exact_sd / math.sqrt(chains) + 1e-12)


@pytest.mark.parametrize("directed", [False, True])
def test_carried_state_equals_recomputation_after_a_long_run(key, directed):
    """After thousands of toggles of both samplers, the degrees, their running sums, the
    number of ties, S = A A and the partner lists equal what the final graph gives afresh,
    and the change statistics from the carried state still equal the generic ones."""
    n = 24
    stats = directed_statistics(n) if directed else undirected_statistics(n)
    moves = toggle_moves(n, stats, directed)
    theta = jnp.asarray(np.linspace(-0.3, 0.2, len(stats))).at[0].set(-1.5)
    k_graph, k_a, k_b, k_dyads = jax.random.split(key, 4)
    state = moves.init(random_graph(k_graph, n, 0.2, directed))
    state = run(moves, moves.tie_no_tie, theta, state, jax.random.normal(k_a, (3000, 3)))
    state = run(moves, moves.toggle, theta, state, jax.random.normal(k_b, (3000, 2)))
    a = np.asarray(state.adjacency)
    if not directed:
        network.check_adjacency(a)
    assert np.all(np.diag(a) == 0) and np.all((a == 0) | (a == 1))
    fresh = moves.init(jnp.asarray(a))
    degrees = a.sum(axis=1).astype(int)
    np.testing.assert_array_equal(state.degrees, degrees)
    np.testing.assert_array_equal(state.cumulative, np.cumsum(degrees))
    assert int(state.ties) == int(a.sum()) // (1 if directed else 2)
    if directed:
        assert state.shared is None
    else:
        np.testing.assert_array_equal(state.shared, (a @ a).astype(int))
    partners, position = np.asarray(state.partners), np.asarray(state.position)
    for v in range(n):
        d = degrees[v]
        assert sorted(partners[v, :d]) == sorted(np.flatnonzero(a[v]))
        assert partners[v, n - 1] == v
        np.testing.assert_array_equal(position[v, partners[v]], np.arange(n))
    assert int(fresh.ties) == int(state.ties)
    i, j = random_dyads(k_dyads, n, 300)
    assert_fast_equals_generic(stats, state, i, j, directed)


@pytest.mark.parametrize("directed", [False, True])
def test_initial_partner_lists_are_the_stable_sort(key, directed):
    """The lists built from running sums equal NumPy's stable sort of each row by kind
    (neighbours, other nodes, the node itself), and ``position`` is their inverse; S = A A."""
    n = 40
    a = np.asarray(random_graph(key, n, 0.3, directed))
    state = toggle_moves(
        n, undirected_statistics(n) if not directed else (network.edges(),), directed
    ).init(jnp.asarray(a))
    kind = (a < 0.5).astype(int) + np.eye(n, dtype=int)
    expected = np.argsort(kind, axis=1, kind="stable")
    np.testing.assert_array_equal(state.partners, expected)
    np.testing.assert_array_equal(state.position, np.argsort(expected, axis=1))
    if not directed:
        np.testing.assert_array_equal(state.shared, (a @ a).astype(int))


def test_directed_toggles_flip_one_direction_only(key):
    """A directed toggle of i → j leaves j → i alone: from the empty graph with a strong
    mutuality term the chains must hold some one-way ties, and the diagonal stays empty."""
    n = 8
    stats = (network.edges(), mutual())
    step = toggle_simulators(n, stats, 400, directed=True)["tie_no_tie"]
    empty = jnp.zeros((n, n))
    noise = jax.random.normal(key, (20, *step.noise_shape(empty)))
    final = jax.vmap(lambda z: step.step({"coefficients": jnp.array([-1.0, 0.5])}, empty, z))(noise)
    assert bool(jnp.all(jnp.diagonal(final, axis1=1, axis2=2) == 0))
    assert float(jnp.sum(jnp.abs(final - jnp.swapaxes(final, 1, 2)))) > 0


@pytest.mark.parametrize("simulator", ["tie_no_tie", "toggle"])
def test_near_empty_and_near_full_graphs_stay_valid(key, simulator):
    """At the ends (no ties to remove, no empty dyad to fill) the sampler stays put or moves
    to a valid graph; one of each is reached with extreme coefficients."""
    n = 5
    stats = (network.edges(), network.triangles())
    step = toggle_simulators(n, stats, 60)[simulator]
    for theta, start in [(-30.0, jnp.zeros((n, n))), (30.0, 1.0 - jnp.eye(n))]:
        z = jax.random.normal(key, step.noise_shape(start))
        out = step.step({"coefficients": jnp.array([theta, 0.0])}, start, z)
        network.check_adjacency(np.asarray(out))
        np.testing.assert_array_equal(out, start)


def test_bad_inputs_name_the_fix():
    stats = (network.edges(),)
    step = toggle_simulators(4, stats, 10)["tie_no_tie"]
    a = jnp.zeros((4, 4))
    with pytest.raises(ValueError, match=r"noise of shape \(10, 3\).*got \(10, 2\).*noise_shape"):
        step.step({"coefficients": jnp.zeros(1)}, a, jnp.zeros((10, 2)))
    with pytest.raises(ValueError, match=r"coefficients must have shape \(1,\).*got shape \(2,\)"):
        step.step({"coefficients": jnp.zeros(2)}, a, jnp.zeros((10, 3)))
    with pytest.raises(TypeError, match=r"directed must be True or False; got 'yes'"):
        toggle_simulators(4, stats, 10, directed="yes")


@pytest.mark.parametrize("in_turn", [True, False])
@pytest.mark.parametrize("simulator", ["tie_no_tie", "toggle"])
def test_vmapped_chains_equal_the_chains_run_one_by_one(key, monkeypatch, simulator, in_turn):
    """Under ``jax.vmap`` (the custom batching rule: chains in turn, or the loop over batched
    state below ``IN_TURN_NODES``), batched or broadcast coefficients, start graphs and noise,
    and nested ``vmap``, give exactly the draws of the single-chain simulator called once per
    chain."""
    n, chains = 12, 3
    monkeypatch.setattr(toggles, "IN_TURN_NODES", n if in_turn else n + 1)
    stats = undirected_statistics(n)
    step = toggle_simulators(n, stats, 150)[simulator]
    k_graph, k_noise, k_theta = jax.random.split(key, 3)
    starts = jnp.stack([random_graph(k, n, 0.3) for k in jax.random.split(k_graph, chains)])
    noise = jax.random.normal(k_noise, (chains, *step.noise_shape(starts[0])))
    theta = jnp.asarray(np.linspace(-0.2, 0.1, len(stats))).at[0].set(-1.0)
    thetas = theta[None, :] + 0.1 * jax.random.normal(k_theta, (chains, len(stats)))

    def one(t, a, z):
        return step.step({"coefficients": t}, a, z)

    single = jax.jit(one)
    cases = [
        (
            jax.vmap(one, (0, 0, 0))(thetas, starts, noise),
            [(thetas[c], starts[c], noise[c]) for c in range(chains)],
        ),
        (
            jax.vmap(one, (None, None, 0))(theta, starts[0], noise),
            [(theta, starts[0], noise[c]) for c in range(chains)],
        ),
        (
            jax.jit(jax.vmap(one, (None, 0, 0)))(theta, starts, noise),
            [(theta, starts[c], noise[c]) for c in range(chains)],
        ),
    ]
    for batched, calls in cases:
        expected = jnp.stack([single(*args) for args in calls])
        np.testing.assert_array_equal(batched, expected)
    nested = jax.vmap(jax.vmap(one, (None, 0, 0)), (0, None, None))(thetas[:2], starts, noise)
    for t in range(2):
        for c in range(chains):
            np.testing.assert_array_equal(nested[t, c], single(thetas[t], starts[c], noise[c]))


def test_toggles_without_partner_lists_take_the_same_path(key):
    """``toggle`` on the state without running sums and partner lists (what its simulator
    carries) makes exactly the moves it makes on the full state; ``tie_no_tie`` refuses it."""
    n = 16
    stats = undirected_statistics(n)
    full, bare = toggle_moves(n, stats), toggle_moves(n, stats, lists=False)
    theta = jnp.asarray(np.linspace(-0.3, 0.2, len(stats))).at[0].set(-1.2)
    k_graph, k_noise = jax.random.split(key)
    a = random_graph(k_graph, n, 0.25)
    noise = jax.random.normal(k_noise, (2000, 2))
    with_lists = run(full, full.toggle, theta, full.init(a), noise)
    without = run(bare, bare.toggle, theta, bare.init(a), noise)
    assert without.partners is None and without.cumulative is None
    np.testing.assert_array_equal(without.adjacency, with_lists.adjacency)
    np.testing.assert_array_equal(without.degrees, with_lists.degrees)
    np.testing.assert_array_equal(without.shared, with_lists.shared)
    assert int(without.ties) == int(with_lists.ties)
    with pytest.raises(ValueError, match="tie_no_tie.*lists=True"):
        bare.tie_no_tie(theta, bare.init(a), jnp.full(3, 0.5))
