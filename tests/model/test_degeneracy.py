"""The degeneracy guard: simulations that collapse to the empty or complete graph stop a fit, an
estimator's reference point and the approximate exchange kernel with a clear error.

A random graph model with a large positive triangle coefficient puts nearly all its mass on
the complete graph (Handcock 2003, CSSS working paper 39; Schweinberger 2011, JASA 106(496);
both from memory): started from a sparse graph, the tie/no-tie simulator fills it within a
few sweeps. An edges-only model at θ = logit(density) simulates graphs of the observed
density (ties are independent Bernoulli(σ(θ)); common practice), so nothing stops it.
"""

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from numpyro.handlers import seed, trace
from scipy import special

import zhat
from zhat import fit
from zhat.estimators import single_auxiliary
from zhat.families import network
from zhat.kernels import DoubleMetropolisHastings
from zhat.model import DegenerateModelError
from zhat.model.degeneracy import check_collapse, simulate_and_check

N = 20
STATS = [network.edges(), network.triangles()]
FILLING = np.array([0.0, 1.0])  # every triangle adds 1 to the log potential


def sparse_graph(density=0.15, seed=5):
    rng = np.random.default_rng(seed)
    upper = np.triu(rng.random((N, N)) < density, 1).astype(float)
    return upper + upper.T


def test_collapse_to_the_complete_graph_is_reported():
    y = sparse_graph()
    d = network.model(N, STATS, jnp.asarray(FILLING))
    with pytest.raises(DegenerateModelError, match=r"collapsed to the complete graph.*weighted"):
        simulate_and_check(d, y, "a test point")


def test_edges_only_at_the_observed_density_passes():
    y = sparse_graph()
    density = y.sum() / (N * (N - 1))
    d = network.model(N, [network.edges()], jnp.asarray([special.logit(density)]))
    simulate_and_check(d, y, "a test point")  # no error


def test_rule_needs_half_the_draws_and_an_observed_graph_away_from_the_end():
    d = network.model(N, [network.edges()], jnp.zeros(1))
    y = sparse_graph()
    empty = np.zeros((8, N, N))
    mixed = np.concatenate([empty[:3], np.broadcast_to(y, (5, N, N))])
    with pytest.raises(DegenerateModelError, match=r"8 of 8 .* collapsed to the empty graph"):
        check_collapse(d, y, empty, "a test point")
    check_collapse(d, y, mixed, "a test point")  # 3 of 8 collapsed: under half
    nearly_empty = np.zeros((N, N))
    nearly_empty[0, 1] = nearly_empty[1, 0] = 1.0  # density 0.005: the data are at the end
    check_collapse(d, nearly_empty, empty, "a test point")


def test_stochastic_approximation_stops_at_a_degenerate_start():
    y = sparse_graph()
    d = network.model(N, STATS, jnp.zeros(2))
    with pytest.raises(DegenerateModelError, match=r"at the start .*complete graph"):
        fit.stochastic_approximation(
            jax.random.key(0),
            d,
            y,
            start={"coefficients": FILLING},
            steps=20,
            burn_in=20,
            final_draws=10,
        )


def filling_model(y):
    theta = numpyro.sample("theta", dist.Normal(0.0, 0.1).expand([2]).to_event(1))
    numpyro.sample("g", network.model(N, STATS, theta + jnp.asarray(FILLING)), obs=y)


def test_double_metropolis_hastings_stops_before_sampling():
    y = jnp.asarray(sparse_graph())
    mcmc = zhat.MCMC(
        DoubleMetropolisHastings(filling_model, sweeps=2, simulator="tie_no_tie"),
        num_warmup=5,
        num_samples=5,
        progress_bar=False,
    )
    with pytest.raises(DegenerateModelError, match=r"chain's start \(site 'g'\)"):
        mcmc.run(jax.random.key(1), y, init_params={"theta": jnp.zeros(2)})


def test_estimator_reference_point_is_checked():
    """An estimator drawing from a simulator checks its reference point once, when the model
    is first traced. Here the maximum pseudo-likelihood point of edges + triangles on a sparse
    random graph is itself degenerate (it is known to land there often: van Duijn, Gile &
    Handcock 2009, Social Networks 31(1), from memory); an edges-only model's reference is fine."""
    y = jnp.asarray(sparse_graph())

    def model(y, stats):
        theta = numpyro.sample("theta", dist.Normal(0.0, 1.0).expand([len(stats)]).to_event(1))
        numpyro.sample("g", network.model(N, stats, theta), obs=y)

    given = single_auxiliary(sampler="tie_no_tie", sweeps=2, reference={"coefficients": FILLING})
    fitted = single_auxiliary(sampler="tie_no_tie", sweeps=2)  # pseudo-likelihood reference
    for estimator, where in ((given, "point"), (fitted, r"point \(maximum pseudo-likelihood\)")):
        with pytest.raises(DegenerateModelError, match=rf"reference {where}.*complete graph"):
            trace(seed(zhat.expose(model, estimator), jax.random.key(2))).get_trace(y, STATS)
    edges_only = single_auxiliary(sampler="tie_no_tie", sweeps=2)
    tr = trace(seed(zhat.expose(model, edges_only), jax.random.key(2))).get_trace(
        y, [network.edges()]
    )
    assert np.isfinite(float(tr["g_log_estimate"]["value"]))
