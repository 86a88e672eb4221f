"""Geweke's joint-distribution test of the kernels.

Reference: Geweke (2004), "Getting it right: joint distribution tests of posterior simulators",
JASA 99(467). Two simulators of one joint distribution h(θ, u, y) of parameters, estimator
noise and data are compared:

- marginal-conditional: independent draws, (θ, u) from their marginal and y from h(y | θ, u);
- successive-conditional: one transition of the kernel under test, which targets h(θ, u | y),
  alternated with a fresh draw y ~ h(y | θ, u).

If the kernel leaves h(θ, u | y) invariant both simulators have h as their distribution, so
every test function g has the same mean under both; z = (ḡ_sc − ḡ_mc) / √(mcse_sc² + se_mc²)
is then approximately standard normal (Geweke 2004, §2–3). The check is |z| < 4 for every
function, with a fixed key; the successive-conditional chain starts from a draw of h, so it
needs no burn-in. The Monte Carlo standard error of the chain is ArviZ's ``mcse`` of the mean.

The joint for a pseudo-marginal target. The latent-Gaussian model of ``tests/latent_gaussian.py``
(μ ~ N(0, s0²), z_i ~ N(μ, τ²), y_i ~ N(z_i, σ²)) is exposed with the importance-sampling
estimator whose proposal is the latent prior, so

    f̂(μ, u; y) = (1/K) Σ_k Π_i N(y_i; μ + τ u_ki, σ²),

a K-component mixture density in y. Hence h(μ, u, y) = p(μ) N(u; 0, I) f̂(μ, u; y) is a proper
joint whose (μ, u)-marginal is p(μ) N(u; 0, I), whose conditional h(μ, u | y) is exactly the
exposed target the kernels sample, and whose y-step picks a component k uniformly and draws
y ~ N(μ + τ u_k, σ² I). Its (μ, y)-marginal is p(μ) E_u f̂ = p(μ) p(y | μ), the model's own
joint, because the estimator is unbiased (checked on the simulator below). The kernels see
h(μ, u | y) only through the exposed model, so an error in ``expose``, in the estimator's log f̂
or in the kernel shows up as a disagreement between the two simulators.
Drawing y ~ p(y | μ) while keeping u is *not* a step of any such joint (u still carries
information about the previous y) and gives a wrong stationary law even for correct kernels;
the y-step must condition on u.

Because the data change at every step, the test drives the kernels directly, with the data as
a model argument: after each new y the kernel's cached log density is recomputed with
``refresh`` (for ``pseudo_marginal_gibbs``: every block against its siblings' values, see
:func:`refresh`), then one ``sample`` step runs; all steps sit in one ``lax.scan``.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import arviz as az
import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from jax import random
from numpyro.infer.gibbs import with_conditioning

import zhat
from tests.latent_gaussian import S0, SIGMA, TAU, model
from zhat.estimators import importance_sampling
from zhat.kernels import (
    EllipticalSlice,
    PseudoMarginalGibbs,
    PseudoMarginalMH,
    Slice,
    pseudo_marginal_gibbs,
)

NUM_OBS = 3  # n, data points
NUM_DRAWS = 4  # K, importance draws
FIXED_MU = 0.7  # μ of the noise-only model
THRESHOLD = 4.0  # |z| bound per test function (Geweke 2004, §3: z is asymptotically N(0, 1))
NUM_MARGINAL = 40_000  # independent marginal-conditional draws

TestFunctions = Callable[[dict[str, np.ndarray]], dict[str, np.ndarray]]


# --- models and their data simulators -----------------------------------------------------
def noise_only_model(y: jax.Array, mu: jax.Array) -> None:
    """The latent-Gaussian factor with μ given: its only latent site is the noise ``z_noise``."""

    def log_joint(z):
        return dist.Normal(mu, TAU).log_prob(z).sum() + dist.Normal(z, SIGMA).log_prob(y).sum()

    zhat.integrate_out("z", log_joint, y.shape, proposal=(mu, TAU))


def location_scale_model(y: jax.Array) -> None:
    """A small parameter model with no noise: a real and a positive parameter, y_i ~ N(loc, scale²).
    The positive parameter makes the slice sampler work through a log transform and its Jacobian."""
    loc = numpyro.sample("loc", dist.Normal(0.0, 1.0))
    scale = numpyro.sample("scale", dist.Gamma(4.0, 4.0))
    numpyro.sample("y", dist.Normal(loc, scale), obs=y)


def draw_mixture_data(key: jax.Array, mu: jax.Array, noise: jax.Array) -> jax.Array:
    """y ~ f̂(μ, u; ·): component k uniform on 0..K−1, then y ~ N(μ + τ u_k, σ² I)."""
    key_component, key_obs = random.split(key)
    k = random.randint(key_component, (), 0, noise.shape[0])
    return mu + TAU * noise[k] + SIGMA * random.normal(key_obs, noise.shape[1:])


def latent_prior(key: jax.Array) -> dict[str, jax.Array]:
    key_mu, key_noise = random.split(key)
    return {
        "mu": S0 * random.normal(key_mu),
        "z_noise": random.normal(key_noise, (NUM_DRAWS, NUM_OBS)),
    }


def noise_prior(key: jax.Array) -> dict[str, jax.Array]:
    return {"z_noise": random.normal(key, (NUM_DRAWS, NUM_OBS))}


def location_scale_prior(key: jax.Array) -> dict[str, jax.Array]:
    key_loc, key_scale = random.split(key)
    return {
        "loc": dist.Normal(0.0, 1.0).sample(key_loc),
        "scale": dist.Gamma(4.0, 4.0).sample(key_scale),
    }


class Problem:
    """A joint h(θ, u, y): prior draw of the latent sites, the y-step, and model arguments."""

    def __init__(
        self,
        prior: Callable[[jax.Array], dict[str, jax.Array]],
        draw_data: Callable[[jax.Array, dict[str, jax.Array]], jax.Array],
        model_args: Callable[[jax.Array], tuple],
        functions: TestFunctions,
    ) -> None:
        self.prior, self.draw_data = prior, draw_data
        self.model_args, self.functions = model_args, functions


def latent_functions(d: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    mu, y, u = d["mu"], d["y"], d["z_noise"]
    ybar = y.mean(-1)
    return {
        "mu": mu,
        "mu^2": mu**2,
        "ybar": ybar,
        "mu*ybar": mu * ybar,
        "mean u^2": (u**2).mean((-2, -1)),
        "mean u*y": (u * y[:, None, :]).mean((-2, -1)),
    }


def noise_functions(d: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    y, u = d["y"], d["z_noise"]
    return {
        "mean u": u.mean((-2, -1)),
        "mean u^2": (u**2).mean((-2, -1)),
        "u_00": u[:, 0, 0],
        "ybar": y.mean(-1),
        "mean y^2": (y**2).mean(-1),
        "mean u*y": (u * y[:, None, :]).mean((-2, -1)),
    }


def location_scale_functions(d: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    loc, scale, y = d["loc"], d["scale"], d["y"]
    ybar = y.mean(-1)
    return {
        "loc": loc,
        "loc^2": loc**2,
        "scale": scale,
        "scale^2": scale**2,
        "ybar": ybar,
        "loc*ybar": loc * ybar,
        "sample var": y.var(-1, ddof=1),
    }


LATENT = Problem(
    latent_prior,
    lambda key, v: draw_mixture_data(key, v["mu"], v["z_noise"]),
    lambda y: (y,),
    latent_functions,
)
NOISE_ONLY = Problem(
    noise_prior,
    lambda key, v: draw_mixture_data(key, jnp.asarray(FIXED_MU), v["z_noise"]),
    lambda y: (y, jnp.asarray(FIXED_MU)),
    noise_functions,
)
LOCATION_SCALE = Problem(
    location_scale_prior,
    lambda key, v: v["loc"] + v["scale"] * random.normal(key, (NUM_OBS,)),
    lambda y: (y,),
    location_scale_functions,
)


# --- the two simulators ---------------------------------------------------------------------
def refresh(kernel, state, model_args: tuple):
    """Recompute every cached density of ``state`` for new model arguments.

    ``PseudoMarginalGibbs.refresh`` is NumPyro's ``Gibbs.refresh``, the identity: ``Gibbs.sample``
    refreshes a block only after a sibling moved, never for new model arguments (see
    ``test_conformance.py::test_refresh_matches_a_fresh_init``). So each block is refreshed
    here, conditioned on its siblings' current constrained values, as ``Gibbs.sample`` does.
    """
    if not isinstance(kernel, PseudoMarginalGibbs):
        return kernel.refresh(state, model_args, {})
    blocks = [block for block, _ in kernel.gibbs.blocks]
    owned = []
    for block, block_state in zip(blocks, state.block_states, strict=True):
        z = getattr(block_state, block.sample_field)
        values = block.get_constrain_fn(model_args, {})(z)
        owned.append({name: values[name] for name in z})
    new_states = []
    for i, (block, block_state) in enumerate(zip(blocks, state.block_states, strict=True)):
        siblings = {k: v for j, vals in enumerate(owned) if j != i for k, v in vals.items()}
        kwargs = with_conditioning({}, siblings)
        new_states.append(block.refresh(block_state, model_args, kwargs))
    return state._replace(block_states=tuple(new_states))


def marginal_conditional(problem: Problem, key: jax.Array, num: int) -> dict[str, np.ndarray]:
    """Independent draws of h: latent sites from their marginal, then the y-step."""

    def one(key):
        key_prior, key_data = random.split(key)
        values = problem.prior(key_prior)
        return {**values, "y": problem.draw_data(key_data, values)}

    return jax.tree.map(np.asarray, jax.jit(jax.vmap(one))(random.split(key, num)))


def successive_conditional(
    problem: Problem, kernel, key: jax.Array, num_steps: int, *, with_refresh: bool = True
) -> dict[str, np.ndarray]:
    """Geweke's successive-conditional simulator: y-step, refresh, one kernel transition."""
    key_prior, key_data, key_init, key_run = random.split(key, 4)
    values = problem.prior(key_prior)
    y = problem.draw_data(key_data, values)
    state = kernel.init(key_init, 0, values, problem.model_args(y), {})
    constrain = kernel.get_constrain_fn(problem.model_args(y), {})

    def body(state, key):
        values = constrain(state.z)
        y = problem.draw_data(key, values)
        args = problem.model_args(y)
        if with_refresh:
            state = refresh(kernel, state, args)
        state = kernel.sample(state, args, {})
        return state, {**values, "y": y}

    run = jax.jit(lambda state, keys: jax.lax.scan(body, state, keys)[1])
    return jax.tree.map(np.asarray, run(state, random.split(key_run, num_steps)))


def geweke_z(problem: Problem, kernel, key: jax.Array, num_steps: int, **kw) -> dict[str, float]:
    """z-statistic of every test function (Geweke 2004, §3), with ArviZ's MCSE for the chain."""
    key_sc, key_mc = random.split(key)
    chain = problem.functions(successive_conditional(problem, kernel, key_sc, num_steps, **kw))
    independent = problem.functions(marginal_conditional(problem, key_mc, NUM_MARGINAL))
    out = {}
    for name, g in chain.items():
        assert np.isfinite(g).all(), name
        se_chain = float(az.mcse(g[None, :], method="mean"))
        reference = independent[name]
        se_reference = float(reference.std(ddof=1)) / math.sqrt(reference.size)
        out[name] = (float(g.mean()) - float(reference.mean())) / math.hypot(se_chain, se_reference)
    return out


def assert_geweke(z: dict[str, float]) -> None:
    # Geweke (2004), §3: under a correct simulator each z is asymptotically N(0, 1)
    bad = {name: round(value, 2) for name, value in z.items() if not abs(value) < THRESHOLD}
    everything = {name: round(value, 2) for name, value in z.items()}
    assert not bad, f"Geweke test failed for {bad}; all z: {everything}"


# --- the tests --------------------------------------------------------------------------------
def test_marginal_conditional_simulator_is_the_model(key):
    """The y-step conditions on u, yet (μ, y) has the model's law: y_i | μ ~ N(μ, τ² + σ²)
    independently (closed form of the Gaussian convolution, as in tests/latent_gaussian.py), so
    E ȳ = 0, Var ȳ = s0² + (τ² + σ²)/n, E y_i² = s0² + τ² + σ², E μ ȳ = s0²."""
    draws = marginal_conditional(LATENT, random.fold_in(key, 0), NUM_MARGINAL)
    mu, y = draws["mu"], draws["y"]
    v = TAU**2 + SIGMA**2
    checks = {
        "ybar": (y.mean(-1), 0.0),
        "ybar^2": (y.mean(-1) ** 2, S0**2 + v / NUM_OBS),
        "mean y^2": ((y**2).mean(-1), S0**2 + v),
        "mu*ybar": (mu * y.mean(-1), S0**2),
    }
    for name, (g, exact) in checks.items():
        se = float(g.std(ddof=1)) / math.sqrt(g.size)
        assert abs(float(g.mean()) - exact) < THRESHOLD * se, (name, float(g.mean()), exact, se)


def test_geweke_elliptical_slice_noise_block(key):
    """Elliptical slice on the noise alone (μ given): h(u, y) = N(u; 0, I) f̂(μ, u; y)."""
    exposed = zhat.expose(noise_only_model, importance_sampling(NUM_DRAWS))
    z = geweke_z(NOISE_ONLY, EllipticalSlice(exposed), random.fold_in(key, 1), 20_000)
    assert_geweke(z)


GIBBS = {
    "slice + elliptical slice": lambda m: pseudo_marginal_gibbs(m, theta_kernel=Slice(m)),
    "NUTS + elliptical slice": lambda m: pseudo_marginal_gibbs(m),
}


@pytest.mark.parametrize(
    "name",
    [
        "slice + elliptical slice",
        pytest.param("NUTS + elliptical slice", marks=pytest.mark.slow),
    ],
)
def test_geweke_pseudo_marginal_gibbs(key, name):
    """The full pseudo-marginal target: θ block, then the elliptical slice noise block."""
    exposed = zhat.expose(model, importance_sampling(NUM_DRAWS))
    z = geweke_z(LATENT, GIBBS[name](exposed), random.fold_in(key, 2), 20_000)
    assert_geweke(z)


@pytest.mark.parametrize(
    "options",
    [
        {"method": "coordinate", "interval": "doubling"},
        {"method": "direction", "interval": "stepping_out"},
    ],
    ids=["coordinate-doubling", "direction-stepping_out"],
)
def test_geweke_slice(key, options):
    """Slice sampling of a small parameter model with a positive parameter (no noise)."""
    kernel = Slice(location_scale_model, **options)
    z = geweke_z(LOCATION_SCALE, kernel, random.fold_in(key, 3), 20_000)
    assert_geweke(z)


@pytest.mark.parametrize("correlation", [0.0, 0.9], ids=["standard", "correlated"])
def test_geweke_pseudo_marginal_mh(key, correlation):
    """Pseudo-marginal MH without warmup (so no adaptation): standard and Crank–Nicolson noise."""
    exposed = zhat.expose(model, importance_sampling(NUM_DRAWS))
    kernel = PseudoMarginalMH(exposed, correlation=correlation, proposal_scale=0.4)
    z = geweke_z(LATENT, kernel, random.fold_in(key, 4), 40_000)
    assert_geweke(z)


class PriorCountedTwice(EllipticalSlice):
    """A deliberately wrong noise kernel: elliptical slice given the full log joint as its
    likelihood, so the N(0, I) prior of the noise enters twice (target ∝ N(u)² f̂)."""

    def _block_logdensity(self, model_args, model_kwargs, full):
        return full


def test_geweke_detects_a_wrong_noise_kernel(key):
    """The test has power: the same run as the noise-block test, with the prior counted twice."""
    exposed = zhat.expose(noise_only_model, importance_sampling(NUM_DRAWS))
    z = geweke_z(NOISE_ONLY, PriorCountedTwice(exposed), random.fold_in(key, 1), 20_000)
    assert max(abs(v) for v in z.values()) > THRESHOLD, z


def test_geweke_detects_data_drawn_without_the_noise(key):
    """Why the y-step conditions on u: with y ~ p(y | μ) and u kept, even correct pseudo-marginal
    MH has a wrong stationary law (the module docstring), and the test says so."""
    naive = Problem(
        latent_prior,
        lambda key, v: v["mu"] + math.sqrt(TAU**2 + SIGMA**2) * random.normal(key, (NUM_OBS,)),
        lambda y: (y,),
        latent_functions,
    )
    exposed = zhat.expose(model, importance_sampling(NUM_DRAWS))
    kernel = PseudoMarginalMH(exposed, proposal_scale=0.4)
    z = geweke_z(naive, kernel, random.fold_in(key, 4), 40_000)
    assert max(abs(v) for v in z.values()) > THRESHOLD, z
