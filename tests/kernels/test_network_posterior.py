"""Posterior of random graph coefficients, end to end, against exact posteriors.

Two exact references:

- **Enumeration** (edges + triangles on 7 nodes): every one of the 2^21 labelled graphs is
  enumerated once and tabulated by its statistics (edges, triangles), so that
  Z(θ) = Σ_{(e, t)} N(e, t) e^{θ_1 e + θ_2 t} exactly; the posterior of θ under a Gaussian
  prior is then computed on a fine grid (midpoint quadrature, ``exact_posterior_on_grid``).
- **Closed form** (edges only, on the karate-club network shipped with networkx; Zachary
  1977, J. Anthropol. Res. 33(4)): Z(θ) = (1 + e^θ)^M over the M = n(n−1)/2 dyads (ties are
  independent Bernoulli(σ(θ)); Frank & Strauss 1986, JASA 81(395)); posterior by quadrature.

Samplers: the approximate exchange algorithm (double Metropolis–Hastings, Liang 2010, J. Stat.
Comput. Simul. 80(9)) and ``pseudo_marginal_gibbs`` with the single auxiliary-variable estimator
(Møller et al. 2006, Biometrika 93(2)); both draw auxiliary graphs from a finite run of the
tie/no-tie simulator, so they are APPROXIMATE (no perfect sampler for random graphs). The runs
are long enough (hundreds of toggles per dyad-count on these small graphs) that the
perturbation is far below the Monte Carlo error: the check is within 4 ArviZ MCSE of the exact
mean and sd (2 chains, fixed keys).
"""

import itertools

import arviz as az
import jax
import jax.numpy as jnp
import networkx as nx
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from scipy import special

import zhat
from tests.references import lattice_exact as ref
from zhat.estimators import single_auxiliary
from zhat.families import network
from zhat.kernels import DoubleMetropolisHastings, pseudo_marginal_gibbs

pytestmark = pytest.mark.slow

# --- seven members of an invented chess circle: who plays whom regularly ----------------------
NODES = 7
TIES = [(0, 1), (0, 2), (1, 2), (2, 3), (3, 4), (4, 5), (3, 5), (5, 6), (1, 6)]
PRIOR_SD = 1.5
STATS = (network.edges(), network.triangles())


def circle() -> np.ndarray:
    a = np.zeros((NODES, NODES))
    for i, j in TIES:
        a[i, j] = a[j, i] = 1.0
    return a


def statistic_table(n: int) -> tuple[np.ndarray, np.ndarray]:
    """(edges, triangles) of every labelled graph on n nodes, as distinct rows and counts.

    Graphs are the integers 0..2^M − 1, bit k the k-th dyad of the upper triangle; a triangle
    on nodes a < b < c is present when its three dyad bits are all set (exhaustive
    enumeration, exact)."""
    rows, cols = np.triu_indices(n, 1)
    bit = {(int(i), int(j)): k for k, (i, j) in enumerate(zip(rows, cols, strict=True))}
    graphs = np.arange(2**rows.size, dtype=np.uint32)
    edges = np.bitwise_count(graphs).astype(np.int64)
    triangles = np.zeros(graphs.size, np.int64)
    for a, b, c in itertools.combinations(range(n), 3):
        mask = np.uint32((1 << bit[a, b]) | (1 << bit[a, c]) | (1 << bit[b, c]))
        triangles += (graphs & mask) == mask
    keys, counts = np.unique(edges * 64 + triangles, return_counts=True)
    return np.stack([keys // 64, keys % 64], axis=1).astype(float), counts


def exact_circle_posterior(y):
    table, counts = statistic_table(NODES)
    assert counts.sum() == 2**21
    # the table agrees with networkx's counts on the observed graph (networkx.triangles)
    g = nx.from_numpy_array(y)
    t_obs = np.array([g.number_of_edges(), sum(nx.triangles(g).values()) / 3])
    assert t_obs.tolist() == [9, 2]
    log_counts = np.log(counts)

    def log_z(theta):
        return float(special.logsumexp(log_counts + table @ theta))

    # the empty graph alone has statistics (0, 0): Z(0) = 2^21
    assert abs(log_z(np.zeros(2)) - 21 * np.log(2)) < 1e-12
    edges_grid = np.linspace(-6.0, 6.0, 241)
    tri_grid = np.linspace(-6.0, 6.0, 241)
    grid = np.stack(np.meshgrid(edges_grid, tri_grid, indexing="ij"), -1).reshape(-1, 2)
    post = ref.exact_posterior_on_grid(
        t_obs, log_z, grid, lambda theta: -0.5 * float(theta @ theta) / PRIOR_SD**2
    )
    ref.check_grid_edges(post, tol=1e-6)
    return post.mean, post.sd


def circle_model(y):
    theta = numpyro.sample("theta", dist.Normal(0.0, PRIOR_SD).expand([2]).to_event(1))
    numpyro.sample("g", network.model(NODES, list(STATS), theta), obs=y)


def run(kernel, *args, num_warmup=500, num_samples=2500, seed=0):
    mcmc = zhat.MCMC(
        kernel,
        num_warmup=num_warmup,
        num_samples=num_samples,
        num_chains=2,
        chain_method="sequential",
        progress_bar=False,
    )
    mcmc.run(jax.random.fold_in(jax.random.key(20261202), seed), *args)
    return mcmc.get_samples(group_by_chain=True)


def assert_matches(draws, mean, sd, what, power=0.15):
    """Each coordinate's mean and sd within 4 ArviZ MCSE of the exact ones."""
    draws = np.asarray(draws)
    draws = draws[..., None] if draws.ndim == 2 else draws
    for k in range(draws.shape[-1]):
        data = az.convert_to_dataset(draws[..., k])
        se_mean = float(az.mcse(data, method="mean").to_array().squeeze())
        se_sd = float(az.mcse(data, method="sd").to_array().squeeze())
        assert float(az.rhat(data).to_array().squeeze()) < 1.05, (what, k)
        got_mean, got_sd = float(draws[..., k].mean()), float(draws[..., k].std())
        assert abs(got_mean - mean[k]) < 4 * se_mean, (what, k, got_mean, mean[k], se_mean)
        assert abs(got_sd - sd[k]) < 4 * se_sd, (what, k, got_sd, sd[k], se_sd)
        # power: the check pins the mean to a fraction of the posterior sd
        assert se_mean < power * sd[k], (what, k, se_mean, sd[k])


CIRCLE_SAMPLERS = {
    # 10 (exchange) or 8 (estimator) simulator calls of 21 toggles each per auxiliary graph
    "double Metropolis-Hastings": lambda m: DoubleMetropolisHastings(
        m, sweeps=10, simulator="tie_no_tie"
    ),
    "pseudo-marginal Gibbs, single auxiliary": lambda m: pseudo_marginal_gibbs(
        zhat.expose(m, single_auxiliary(num_draws=2, sampler="tie_no_tie", sweeps=8))
    ),
}


@pytest.mark.parametrize("name", list(CIRCLE_SAMPLERS))
def test_edges_and_triangles_posterior_matches_enumeration(name):
    y = circle()
    mean, sd = exact_circle_posterior(y)
    kernel = CIRCLE_SAMPLERS[name](circle_model)
    samples = run(kernel, jnp.asarray(y), seed=len(name))
    # exact posterior: enumeration of all 2^21 graphs on 7 nodes, quadrature on a grid
    assert_matches(samples["theta"], mean, sd, name)


# --- the karate-club network, edges only: closed form ----------------------------------------
def karate():
    return network.adjacency(nx.karate_club_graph())


def exact_edges_posterior(y, prior_sd):
    n = y.shape[0]
    m = n * (n - 1) // 2
    ties = y.sum() / 2
    grid = np.linspace(-4.0, 0.0, 4001)
    post = ref.exact_posterior_on_grid(
        [ties],
        lambda theta: m * np.logaddexp(0.0, theta[0]),  # Z = (1 + e^θ)^M
        grid,
        lambda theta: -0.5 * (theta[0] / prior_sd) ** 2,
    )
    ref.check_grid_edges(post)
    return post.mean, post.sd


def karate_model(y):
    theta = numpyro.sample("theta", dist.Normal(0.0, 3.0))
    numpyro.sample("g", network.model(y.shape[0], [network.edges()], theta[None]), obs=y)


def test_karate_club_edges_only_posterior_matches_closed_form():
    y = karate()
    mean, sd = exact_edges_posterior(y, 3.0)
    kernel = DoubleMetropolisHastings(karate_model, sweeps=3, simulator="tie_no_tie")
    assert kernel.exact is False
    samples = run(kernel, jnp.asarray(y), num_samples=2000, seed=7)
    # exact posterior from the closed form Z = (1 + e^θ)^M (Frank & Strauss 1986)
    assert_matches(samples["theta"], mean, sd, "karate club, double MH")
