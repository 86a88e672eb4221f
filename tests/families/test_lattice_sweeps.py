"""Lattice simulators and log-potentials against exact references.

- ``neighbour_sum`` on each of its three code paths against a direct edge-list sum.
- Ising, autologistic (plain and centred) and Potts log-potentials, statistics and
  pseudo-likelihoods against their defining formulas (Besag 1974, JRSS B 36(2); Caragea & Kaiser
  2009, JABES 14(3); Besag 1975, The Statistician 24(3)).
- Invariance of heat-bath Gibbs (Geman & Geman 1984, IEEE PAMI 6(6)) and Swendsen–Wang
  (Swendsen & Wang 1987, Phys. Rev. Lett. 58(2)) on small graphs: many independent chains
  started from exact draws (numpy, by enumeration) must still be exact after a few updates; the
  sufficient-statistic means are compared with the transfer matrix or enumeration within 4
  standard errors (chains are independent, so SE = sd/√n).
- Long runs on a 64×64 torus against Onsager's energy and Yang's magnetisation, with ArviZ MCSE.
"""

import arviz as az
import jax
import jax.numpy as jnp
import networkx as nx
import numpy as np
import pytest
from jax.scipy.special import ndtr

from tests.families.lattice_helpers import (
    assert_iid_means,
    configurations,
    exact_draws,
    potts_log_potential,
    potts_statistics,
)
from tests.references import lattice_exact as ref
from zhat.families import lattice
from zhat.families.lattice import sweeps

NUM_CHAINS = 20_000


def direct_neighbour_sum(nb, values: np.ndarray) -> np.ndarray:
    out = np.zeros(nb.num_sites)
    np.add.at(out, nb.edges[:, 0], values[nb.edges[:, 1]])
    np.add.at(out, nb.edges[:, 1], values[nb.edges[:, 0]])
    return out


GRAPHS = {
    "dense grid 5x6": lambda: lattice.grid(5, 6),
    "dense torus 7x5": lambda: lattice.grid(7, 5, "periodic"),
    "dense petersen": lambda: lattice.from_adjacency(nx.petersen_graph()),
    "stencil grid 17x19 free": lambda: lattice.grid(17, 19),
    "stencil grid 1x300 free": lambda: lattice.grid(1, 300),
    "stencil torus 17x18": lambda: lattice.grid(17, 18, "periodic"),
    "stencil torus 19x16": lambda: lattice.grid(19, 16, "periodic"),
    "gather random 5-regular 300": lambda: lattice.from_adjacency(
        nx.random_regular_graph(5, 300, seed=1)
    ),
    "gather grid graph 17x17 as a map": lambda: lattice.from_adjacency(
        nx.convert_node_labels_to_integers(nx.grid_2d_graph(17, 17))
    ),
}


@pytest.mark.parametrize("name", list(GRAPHS))
def test_neighbour_sum_matches_edge_list(name):
    nb = GRAPHS[name]()
    if name.startswith("dense"):
        assert nb.num_sites <= sweeps.DENSE_LIMIT
    else:
        assert nb.num_sites > sweeps.DENSE_LIMIT
        assert (nb.boundary is not None) == name.startswith("stencil")
    rng = np.random.default_rng(11)
    values = rng.normal(size=nb.num_sites)
    got = np.asarray(sweeps.neighbour_sum(nb, jnp.asarray(values)))
    np.testing.assert_allclose(got, direct_neighbour_sum(nb, values), rtol=1e-12, atol=1e-12)
    spins = rng.choice([-1.0, 1.0], size=nb.num_sites)
    got = np.asarray(sweeps.neighbour_sum(nb, jnp.asarray(spins)))
    np.testing.assert_array_equal(got, direct_neighbour_sum(nb, spins))


# --- log-potentials, statistics and pseudo-likelihoods ----------------------------------------
POTENTIAL_GRAPHS = ["dense grid 5x6", "dense petersen", "stencil torus 17x18"]


def conditional_log_prob(log_potential, x: np.ndarray, labels) -> np.ndarray:
    """log p(x_i | x_{-i}) for every site from the joint log-potential (the definition)."""
    out = np.empty(x.shape[0])
    for i in range(x.shape[0]):
        variants = np.repeat(x[None, :], len(labels), axis=0)
        variants[:, i] = labels
        lw = log_potential(variants)
        own = labels.index(x[i])
        out[i] = lw[own] - np.logaddexp.reduce(lw)
    return out


@pytest.mark.parametrize("name", POTENTIAL_GRAPHS)
def test_ising_potential_statistics_pseudo_likelihood(name):
    nb = GRAPHS[name]()
    rng = np.random.default_rng(2)
    field = rng.normal(scale=0.5, size=nb.num_sites)
    coupling = 0.37
    dist = lattice.ising(nb, field=field.reshape(nb.shape), coupling=coupling)
    log_g = ref.ising_log_potential(nb.edges, coupling, field)
    for _ in range(3):
        s = rng.choice([-1.0, 1.0], size=nb.num_sites)
        x = jnp.asarray(s.reshape(nb.shape))
        # the convention of lattice_exact: log g = Σ h_i s_i + K Σ_edges s_i s_j
        np.testing.assert_allclose(float(dist.log_potential(x)), log_g(s[None])[0], rtol=1e-12)
        stats = ref.ising_statistics(s[None], nb.edges)[0]
        np.testing.assert_allclose(np.asarray(dist.statistics(x)), stats, rtol=1e-12)
        if nb.num_sites <= 30:
            # Besag (1975): the pseudo-likelihood is Σ_i log p(s_i | s_{-i})
            expect = conditional_log_prob(log_g, s, [-1.0, 1.0]).sum()
            pseudo = dist.family.pseudo_log_likelihood(x, **dist.params)
            np.testing.assert_allclose(float(pseudo), expect, rtol=1e-10)


def autologistic_site_terms(nb, coupling, covariates, coefficients, centred):
    eta = covariates @ coefficients
    if not centred:
        return eta
    # Caragea & Kaiser (2009): a_i = η_i − J Σ_{j~i} σ(η_j)
    return eta - coupling * direct_neighbour_sum(nb, 1.0 / (1.0 + np.exp(-eta)))


@pytest.mark.parametrize("centred", [False, True])
@pytest.mark.parametrize("name", POTENTIAL_GRAPHS)
def test_autologistic_potential_and_pseudo_likelihood(name, centred):
    nb = GRAPHS[name]()
    rng = np.random.default_rng(3)
    covariates = np.stack([np.ones(nb.num_sites), rng.normal(size=nb.num_sites)], axis=1)
    coefficients = np.array([-0.4, 0.8])
    coupling = 0.9
    dist = lattice.autologistic(nb, coupling, covariates, coefficients, centred=centred)
    a = autologistic_site_terms(nb, coupling, covariates, coefficients, centred)
    # Besag (1974): log g(x) = Σ a_i x_i + J Σ_edges x_i x_j on labels {0, 1}
    log_g = ref.ising_log_potential(nb.edges, coupling, a)
    for _ in range(3):
        x = rng.choice([0.0, 1.0], size=nb.num_sites)
        got = float(dist.log_potential(jnp.asarray(x.reshape(nb.shape))))
        np.testing.assert_allclose(got, log_g(x[None])[0], rtol=1e-12)
        if nb.num_sites <= 30:
            expect = conditional_log_prob(log_g, x, [0.0, 1.0]).sum()
            pseudo = dist.family.pseudo_log_likelihood(jnp.asarray(x), **dist.params)
            np.testing.assert_allclose(float(pseudo), expect, rtol=1e-10)
    if centred:
        # the centred form keeps η as the marginal logit at J → 0 (Caragea & Kaiser 2009):
        # at J = 0 it is plain logistic regression, log g = Σ η_i x_i
        zero = lattice.autologistic(nb, 0.0, covariates, coefficients, centred=True)
        x = rng.choice([0.0, 1.0], size=nb.num_sites)
        eta = covariates @ coefficients
        np.testing.assert_allclose(float(zero.log_potential(jnp.asarray(x))), eta @ x, rtol=1e-12)


@pytest.mark.parametrize("name", POTENTIAL_GRAPHS)
def test_potts_potential_statistics_pseudo_likelihood(name):
    nb = GRAPHS[name]()
    q = 3
    rng = np.random.default_rng(4)
    field = rng.normal(scale=0.5, size=(nb.num_sites, q))
    coupling = 0.6
    dist = lattice.potts(nb, coupling, q=q, field=field)
    log_g = potts_log_potential(nb.edges, coupling, field)
    stats_fn = potts_statistics(nb.edges, q)
    for _ in range(3):
        x = rng.integers(0, q, size=nb.num_sites)
        xj = jnp.asarray(x.reshape(nb.shape))
        np.testing.assert_allclose(float(dist.log_potential(xj)), log_g(x[None])[0], rtol=1e-12)
        np.testing.assert_allclose(np.asarray(dist.statistics(xj)), stats_fn(x[None])[0])
        if nb.num_sites <= 30:
            expect = conditional_log_prob(log_g, x.astype(float), [0.0, 1.0, 2.0]).sum()
            pseudo = dist.family.pseudo_log_likelihood(xj, **dist.params)
            np.testing.assert_allclose(float(pseudo), expect, rtol=1e-10)


# --- invariance of the Ising updates on a 3×3 grid ---------------------------------------------
def ising_exact_start(rows, cols, field, coupling, size, seed):
    nb = lattice.grid(rows, cols)
    log_g = ref.ising_log_potential(nb.edges, coupling, field)
    draws = exact_draws(np.random.default_rng(seed), log_g, rows * cols, size)
    return nb, jnp.asarray(draws)


def ising_stats(nb, s):
    return jnp.stack([jnp.sum(s), 0.5 * jnp.sum(s * sweeps.neighbour_sum(nb, s))])


FIELDS = {
    "uniform field": 0.25,
    "site-varying field": np.array([[0.6, -0.3, 0.1], [0.0, -0.8, 0.4], [0.3, 0.2, -0.5]]),
}


@pytest.mark.parametrize("coupling", [0.45, -0.35])
@pytest.mark.parametrize("field_name", list(FIELDS))
def test_heat_bath_leaves_exact_distribution_invariant(key, field_name, coupling):
    field = FIELDS[field_name]
    nb, start = ising_exact_start(3, 3, field, coupling, NUM_CHAINS, seed=5)
    h = jnp.broadcast_to(jnp.asarray(field, jnp.float64).reshape(-1), (9,))
    noise = jax.random.normal(key, (NUM_CHAINS, 3, 9))

    @jax.jit
    @jax.vmap
    def run(s, z):
        return ising_stats(nb, lattice.gibbs_sweeps(nb, s, h, jnp.asarray(coupling), z))

    exact = ref.transfer_matrix_moments(3, 3, coupling, field, "free")
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: transfer-matrix exact moments
    assert_iid_means(np.asarray(run(start, noise)), exact.mean, "heat bath from exact draws")


def test_heat_bath_converges_from_all_plus(key):
    """Long enough: 60 sweeps from all +1 reach the exact distribution (3×3, strong field)."""
    field, coupling = FIELDS["site-varying field"], 0.4
    nb = lattice.grid(3, 3)
    h = jnp.asarray(field.reshape(-1))
    noise = jax.random.normal(jax.random.fold_in(key, 1), (NUM_CHAINS // 2, 60, 9))

    @jax.jit
    @jax.vmap
    def run(z):
        return ising_stats(nb, lattice.gibbs_sweeps(nb, jnp.ones(9), h, jnp.asarray(coupling), z))

    exact = ref.transfer_matrix_moments(3, 3, coupling, field, "free")
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: transfer-matrix exact moments
    assert_iid_means(np.asarray(run(noise)), exact.mean, "heat bath from all +1")


@pytest.mark.parametrize("field_name", list(FIELDS))
def test_swendsen_wang_leaves_exact_distribution_invariant(key, field_name):
    field, coupling = FIELDS[field_name], 0.5
    nb, start = ising_exact_start(3, 3, field, coupling, NUM_CHAINS, seed=6)
    h = jnp.broadcast_to(jnp.asarray(field, jnp.float64).reshape(-1), (9,))
    noise = jax.random.normal(jax.random.fold_in(key, 2), (NUM_CHAINS, 3, nb.num_edges + 9))

    @jax.jit
    @jax.vmap
    def run(s, z):
        step = lambda s, zz: (sweeps.swendsen_wang(nb, s, h, jnp.asarray(coupling), zz), None)
        return ising_stats(nb, jax.lax.scan(step, s, z)[0])

    exact = ref.transfer_matrix_moments(3, 3, coupling, field, "free")
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: transfer-matrix exact moments
    assert_iid_means(np.asarray(run(start, noise)), exact.mean, "Swendsen-Wang")


def test_family_swendsen_wang_transition_with_negative_coupling(key):
    """The family's simulators are documented to leave p(· | θ) invariant for its parameters;
    an antiferromagnetic coupling on the bipartite 3×3 grid is a valid Ising parameter (and the
    perfect sampler handles it), so the "swendsen_wang" transition must keep it exact too."""
    coupling, field = -0.4, 0.1
    nb, start = ising_exact_start(3, 3, field, coupling, NUM_CHAINS, seed=13)
    dist = lattice.ising(nb, field=field, coupling=coupling)
    transition = dist.family.simulators["swendsen_wang"]
    shape = transition.noise_shape(start[0])
    noise = jax.random.normal(jax.random.fold_in(key, 9), (NUM_CHAINS, *shape))
    run = jax.jit(jax.vmap(lambda s, z: ising_stats(nb, transition.step(dist.params, s, z))))
    exact = ref.transfer_matrix_moments(3, 3, coupling, field, "free")
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: transfer-matrix exact moments
    assert_iid_means(np.asarray(run(start, noise)), exact.mean, "SW, negative coupling")


def test_swendsen_wang_on_torus_with_odd_cycles(key):
    """SW on the 3×3 torus (odd cycles, 4 colours) against enumeration (512 states)."""
    nb = lattice.grid(3, 3, "periodic")
    field, coupling = 0.15, 0.4
    log_g = ref.ising_log_potential(nb.edges, coupling, field)
    start = jnp.asarray(exact_draws(np.random.default_rng(7), log_g, 9, NUM_CHAINS))
    h = jnp.full((9,), field)
    noise = jax.random.normal(jax.random.fold_in(key, 3), (NUM_CHAINS, 3, nb.num_edges + 9))

    @jax.jit
    @jax.vmap
    def run(s, z):
        step = lambda s, zz: (sweeps.swendsen_wang(nb, s, h, jnp.asarray(coupling), zz), None)
        return ising_stats(nb, jax.lax.scan(step, s, z)[0])

    stats = lambda c: ref.ising_statistics(c, nb.edges)
    exact = ref.enumerate_moments(stats, log_g, 9)
    # brute-force enumeration of all 2^9 states (exact)
    assert_iid_means(np.asarray(run(start, noise)), exact.mean, "Swendsen-Wang on a torus")


@pytest.mark.parametrize("simulator", ["gibbs", "swendsen_wang"])
@pytest.mark.parametrize("centred", [False, True])
def test_autologistic_simulators_invariant(key, simulator, centred):
    """The family's transitions (spin mapping inside) keep the 0/1 autologistic law exact."""
    nb = lattice.grid(3, 3)
    rng = np.random.default_rng(8)
    covariates = np.stack([np.ones(9), rng.normal(size=9)], axis=1)
    coefficients, coupling = np.array([-0.3, 0.7]), 0.8
    dist = lattice.autologistic(nb, coupling, covariates, coefficients, centred=centred)
    a = autologistic_site_terms(nb, coupling, covariates, coefficients, centred)
    log_g = ref.ising_log_potential(nb.edges, coupling, a)
    start = jnp.asarray(exact_draws(rng, log_g, 9, NUM_CHAINS, labels=(0, 1)))
    transition = dist.family.simulators[simulator]
    shape = transition.noise_shape(start[0])
    noise = jax.random.normal(jax.random.fold_in(key, 4), (NUM_CHAINS, 3, *shape))

    @jax.jit
    @jax.vmap
    def run(x, z):
        step = lambda x, zz: (transition.step(dist.params, x, zz), None)
        x = jax.lax.scan(step, x, z)[0]
        return jnp.stack([jnp.sum(x), 0.5 * jnp.sum(x * sweeps.neighbour_sum(nb, x))])

    exact = ref.transfer_matrix_moments(3, 3, coupling, a.reshape(3, 3), "free", labels=(0, 1))
    # Kramers & Wannier (1941), Phys. Rev. 60, 252: transfer matrix on labels {0, 1}
    assert_iid_means(np.asarray(run(start, noise)), exact.mean, f"autologistic {simulator}")


# --- Potts, q = 3 --------------------------------------------------------------------------------
@pytest.mark.parametrize("simulator", ["gibbs", "swendsen_wang"])
def test_potts_simulators_invariant_on_petersen(key, simulator):
    nb = lattice.from_adjacency(nx.petersen_graph())  # 3 colour classes, odd cycles
    q, coupling = 3, 0.7
    field = np.array([0.3, -0.2, 0.0])
    dist = lattice.potts(nb, coupling, q=q, field=field)
    log_g = potts_log_potential(nb.edges, coupling, field)
    stats_fn = potts_statistics(nb.edges, q)
    rng = np.random.default_rng(9)
    start = jnp.asarray(exact_draws(rng, log_g, 10, NUM_CHAINS, labels=(0, 1, 2)), jnp.int32)
    transition = dist.family.simulators[simulator]
    shape = transition.noise_shape(start[0])
    noise = jax.random.normal(jax.random.fold_in(key, 5), (NUM_CHAINS, 3, *shape))

    @jax.jit
    @jax.vmap
    def run(x, z):
        step = lambda x, zz: (transition.step(dist.params, x, zz), None)
        return dist.family.statistics(jax.lax.scan(step, x, z)[0])

    exact = ref.enumerate_moments(stats_fn, log_g, 10, labels=(0, 1, 2))
    # brute-force enumeration of all 3^10 states (exact)
    got = np.asarray(run(start, noise))
    assert_iid_means(got, exact.mean, f"Potts {simulator}")


def test_potts_gibbs_converges_with_site_field(key):
    """Heat bath from all-0 on a 3×3 grid with an (N, q) field, against enumeration (3^9)."""
    nb = lattice.grid(3, 3)
    q, coupling = 3, 0.5
    field = np.random.default_rng(10).normal(scale=0.6, size=(9, q))
    log_g = potts_log_potential(nb.edges, coupling, field)
    f = jnp.asarray(field)
    noise = jax.random.normal(jax.random.fold_in(key, 6), (NUM_CHAINS // 2, 40, 9))

    @jax.jit
    @jax.vmap
    def run(z):
        x = sweeps.potts_gibbs_sweeps(nb, jnp.zeros(9, jnp.int32), f, jnp.asarray(coupling), z)
        return lattice.potts(nb, coupling, q=q, field=field).family.statistics(x)

    exact = ref.enumerate_moments(potts_statistics(nb.edges, q), log_g, 9, labels=(0, 1, 2))
    # brute-force enumeration of all 3^9 states (exact)
    assert_iid_means(np.asarray(run(noise)), exact.mean, "Potts heat bath with a site field")


def test_enumeration_order_matches_reference():
    """The helpers' configuration order is the reference's (so exact draws are of g/Z)."""
    configs = configurations(3, (0, 1, 2))
    assert configs.shape == (27, 3)
    np.testing.assert_array_equal(configs[5], [2.0, 1.0, 0.0])  # 5 = 2 + 1·3


# --- large torus: Onsager and Yang ------------------------------------------------------------
SIDE = 64


def torus_run(key, coupling, start, burn, draws, update):
    """Energy per site −Σ_edges s_i s_j / N and |Σ s_i| / N after every update, zero field."""
    nb = lattice.grid(SIDE, SIDE, "periodic")
    n = nb.num_sites
    h = jnp.zeros((n,))

    def observe(s):
        return -0.5 * jnp.sum(s * sweeps.neighbour_sum(nb, s)) / n, jnp.abs(jnp.mean(s))

    def body(s, k):
        if update == "gibbs":
            s = sweeps.heat_bath_sweep(nb, s, h, coupling, ndtr(jax.random.normal(k, (n,))))
        else:
            s = sweeps.swendsen_wang(nb, s, h, coupling, jax.random.normal(k, (nb.num_edges + n,)))
        return s, observe(s)

    def chain(k):
        k_start, k_run = jax.random.split(k)
        s0 = start(k_start, n)
        keys = jax.random.split(k_run, burn + draws)
        s, _ = jax.lax.scan(body, s0, keys[:burn])
        return jax.lax.scan(body, s, keys[burn:])[1]

    energy, magnetisation = jax.jit(jax.vmap(chain))(jax.random.split(key, 4))
    return np.asarray(energy), np.asarray(magnetisation)


def random_spins(k, n):
    return jnp.where(jax.random.uniform(k, (n,)) < 0.5, 1.0, -1.0)


def within_mcse(draws: np.ndarray, exact: float, what: str) -> None:
    """|mean − exact| < 4 MCSE (ArviZ ``mcse`` of the mean over (chain, draw))."""
    mcse = float(az.mcse(draws, method="mean"))
    assert float(az.rhat(draws)) < 1.05, what
    assert abs(float(draws.mean()) - exact) < 4 * mcse, (what, draws.mean(), exact, mcse)


@pytest.mark.parametrize(
    "coupling,update",
    [(0.3, "gibbs"), (0.35, "gibbs"), pytest.param(0.35, "sw", marks=pytest.mark.slow)],
)
def test_energy_on_large_torus_matches_onsager(key, coupling, update):
    """Energy per site on a 64×64 torus vs the infinite lattice.

    Finite-size effects: above the critical temperature (K < K_c ≈ 0.4407) correlations decay
    like exp(−r/ξ) with 1/ξ = −ln tanh K − 2K (Onsager 1944, the exact high-temperature
    correlation length, from memory), ξ ≈ 1.6 at K = 0.3 and 2.6 at K = 0.35, so the torus of
    side 64 differs from the infinite lattice by terms of order exp(−64/ξ) < 1e-10. The check
    below confirms it with Kaufman's exact torus partition function: its energy (a central
    difference of log Z) agrees with Onsager's to < 1e-6, far below the MCSE (~1e-3).
    """
    burn, draws = (150, 600) if update == "gibbs" else (50, 300)
    energy, _ = torus_run(jax.random.fold_in(key, 7), coupling, random_spins, burn, draws, update)
    # Onsager (1944), Phys. Rev. 65, 117: exact internal energy per site, infinite lattice
    onsager = float(ref.onsager_energy_per_site(coupling))
    eps = 1e-4
    # Kaufman (1949), Phys. Rev. 76, 1232: exact torus log Z; u = −(d log Z/dK)/N
    log_z = lambda k: ref.kaufman_log_z(SIDE, SIDE, k)
    kaufman = -(log_z(coupling + eps) - log_z(coupling - eps)) / (2 * eps * SIDE**2)
    assert abs(kaufman - onsager) < 1e-6
    within_mcse(energy, onsager, f"energy per site, K={coupling}, {update}")


def test_magnetisation_in_ordered_phase_matches_yang(key):
    """|magnetisation| per site at K = 0.6 on a 64×64 torus started all +1.

    Below the critical temperature the finite torus keeps the sign it starts with: a flip needs
    two domain walls across the torus, costing about 2·σ·64 in log-probability with surface
    tension σ = 2(K − K*) ≈ 0.58 (K* the dual coupling, tanh K* = e^{−2K}; Onsager 1944, from
    memory), a barrier near e^{-74} that heat-bath sweeps never cross. Within the phase the
    correlation length is about one site, so finite-size corrections are exponentially small.
    """
    ones = lambda k, n: jnp.ones((n,))
    _, magnetisation = torus_run(jax.random.fold_in(key, 8), 0.6, ones, 100, 600, "gibbs")
    # Yang (1952), Phys. Rev. 85, 808: spontaneous magnetisation (1 − sinh(2K)^−4)^(1/8)
    within_mcse(magnetisation, float(ref.yang_magnetisation(0.6)), "|m| at K = 0.6")


FAST_SWEEP_GRAPHS = {
    "grid 6x8 free (sublattice arrays)": lambda: lattice.grid(6, 8),
    "torus 6x8 (sublattice arrays)": lambda: lattice.grid(6, 8, "periodic"),
    "grid 5x8 free (sublattice arrays, odd rows)": lambda: lattice.grid(5, 8),
    "torus 20x18 (sublattice arrays, stencil sums)": lambda: lattice.grid(20, 18, "periodic"),
    "grid 1x6 free (sublattice arrays, one row)": lambda: lattice.grid(1, 6),
    "grid 5x7 free (colour classes)": lambda: lattice.grid(5, 7),
    "torus 7x5 (colour classes, not bipartite)": lambda: lattice.grid(7, 5, "periodic"),
    "petersen (colour classes, dense)": lambda: lattice.from_adjacency(nx.petersen_graph()),
    "random 5-regular 300 (colour classes, gather)": lambda: lattice.from_adjacency(
        nx.random_regular_graph(5, 300, seed=1)
    ),
}


def by_site(nb, row):
    """A noise row (noise_order) rearranged by site, as heat_bath_sweep takes it."""
    from zhat.families.lattice.spin_sweep import noise_order

    return jnp.zeros_like(row).at[jnp.asarray(noise_order(nb))].set(row)


def plain_sweeps(nb, s, h, coupling, uniforms):
    """The plain colour-class reference, one sweep per row of uniforms (rows by site)."""
    for u in uniforms:
        s = sweeps.heat_bath_sweep(nb, s, jnp.broadcast_to(h, s.shape), coupling, u)
    return s


def test_noise_order_on_a_chequerboard_grid():
    """Noise entries drive colour 0 in row-major order, then colour 1 (docstring example)."""
    from zhat.families.lattice.spin_sweep import noise_order

    # 2 × 4 grid, colour (r + c) mod 2: row 0 is 0 1 0 1, row 1 is 1 0 1 0
    np.testing.assert_array_equal(noise_order(lattice.grid(2, 4)), [0, 2, 5, 7, 1, 3, 4, 6])
    # an odd torus is coloured greedily; the order is still by colour, then by site
    nb = lattice.grid(5, 5, "periodic")
    order = noise_order(nb)
    assert sorted(order.tolist()) == list(range(25))
    keys = np.stack([np.asarray(nb.colours)[order], order], axis=1)
    assert (np.diff(keys[:, 0]) >= 0).all()
    assert all((np.diff(order[keys[:, 0] == c]) > 0).all() for c in range(nb.num_colours))


@pytest.mark.parametrize("graph", FAST_SWEEP_GRAPHS)
@pytest.mark.parametrize("field_kind", ["scalar", "per site"])
@pytest.mark.parametrize("coupling", [0.4, -0.3])
def test_fast_sweep_is_the_colour_class_sweep(key, graph, field_kind, coupling):
    """The levels-and-layout sweep computes the same spins as the plain colour-class sweep
    with U = Φ(z) from the same noise (each noise entry given to its site by noise_order):
    Φ is increasing, so U < p ⇔ z < Φ⁻¹(p); common practice. Also with the sublattice flip
    of coupling from the past, and with uniform noise."""
    from zhat.families.lattice.spin_sweep import spin_sweep

    nb = FAST_SWEEP_GRAPHS[graph]()
    n = nb.num_sites
    k_start, k_noise, k_field = jax.random.split(key, 3)
    s = jnp.where(jax.random.bernoulli(k_start, 0.5, (n,)), 1.0, -1.0)
    z = jax.random.normal(k_noise, (4, n))
    h = jnp.asarray(0.1) if field_kind == "scalar" else 0.3 * jax.random.normal(k_field, (n,))
    j = jnp.asarray(coupling)
    uniforms = [by_site(nb, ndtr(row)) for row in z]
    plain = plain_sweeps(nb, s, h, j, uniforms)
    assert not np.array_equal(plain, s)
    np.testing.assert_array_equal(lattice.gibbs_sweeps(nb, s, h, j, z), plain)
    np.testing.assert_array_equal(
        jax.jit(lattice.gibbs_sweeps, static_argnums=0)(nb, s, h, j, z), plain
    )
    if not nb.bipartite:
        return
    signs = jnp.asarray([1.0, -1.0])  # the sublattice flip of coupling from the past
    flipped = jnp.broadcast_to(h, (n,)) * signs[jnp.asarray(nb.sides)]
    plain = plain_sweeps(nb, s, flipped, j, uniforms)
    for uniform, rows in [(False, z), (True, ndtr(z))]:
        plan = spin_sweep(nb, h, j, signs, uniform=uniform)
        state = plan.to_state(s)
        for row in rows:
            state = plan.sweep(state, plan.to_noise(row))
        np.testing.assert_array_equal(plan.from_state(state), plain)


@pytest.mark.parametrize(
    "graph",
    [
        "grid 6x8 free (sublattice arrays)",
        "torus 6x8 (sublattice arrays)",
        "grid 5x7 free (colour classes)",
    ],
)
def test_fast_sweep_under_vmap_and_leading_axes(key, graph):
    """Chains batched by vmap, and noise and states with explicit leading axes, give each
    chain's own result (the layouts keep leading axes)."""
    from zhat.families.lattice.spin_sweep import spin_sweep

    nb = FAST_SWEEP_GRAPHS[graph]()
    n = nb.num_sites
    k_start, k_noise = jax.random.split(key)
    s = jnp.where(jax.random.bernoulli(k_start, 0.5, (3, n)), 1.0, -1.0)
    z = jax.random.normal(k_noise, (3, 4, n))
    h, j = jnp.asarray(-0.2), jnp.asarray(0.5)
    one_by_one = jnp.stack([lattice.gibbs_sweeps(nb, s[c], h, j, z[c]) for c in range(3)])
    batched = jax.vmap(lambda s, z: lattice.gibbs_sweeps(nb, s, h, j, z))(s, z)
    np.testing.assert_array_equal(batched, one_by_one)
    np.testing.assert_array_equal(lattice.gibbs_sweeps(nb, s, h, j, z), one_by_one)
    with pytest.raises(ValueError, match="needs shape"):
        lattice.gibbs_sweeps(nb, s, h, j, z[0])
    plan = spin_sweep(nb, h, j)
    state = plan.to_state(s)  # (3, ...) states, (3, 4, ...) levels
    levels = plan.to_noise(z)
    for t in range(4):
        state = jax.vmap(plan.sweep)(state, levels[:, t])
    np.testing.assert_array_equal(plan.from_state(state), one_by_one)
