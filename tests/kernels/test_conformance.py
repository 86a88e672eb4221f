"""The conformance battery every kernel passes (STYLE.md, habits 4 and 8).

For each kernel — elliptical slice alone on a noise-only model, slice sampling, pseudo-marginal
MH, and the ``pseudo_marginal_gibbs`` composite with the elliptical slice noise block behind a
slice or a NUTS θ block — on the exposed latent-Gaussian model of ``tests/latent_gaussian.py``:

- the same key gives the same state jitted and not jitted;
- it works under ``vmap`` and under every chain method NumPyro allows for it, with the same
  draws chain by chain;
- the state keeps its pytree structure, shapes and dtypes across steps (float32 too) and stays
  finite;
- the model is traced a bounded number of times, whatever the number of steps;
- the estimator noise moves between draws, ``zhat.MCMC`` leaves it out of the samples by
  default, and the recorded log estimate belongs to the collected noise;
- ``refresh`` for new model arguments gives the cached densities of a fresh ``init``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
import numpyro.distributions as dist
import pytest
from jax import random
from numpyro.infer import Gibbs
from scipy import special, stats

import zhat
from tests.latent_gaussian import SIGMA, TAU, make_data, model
from zhat.estimators import importance_sampling
from zhat.kernels import (
    EllipticalSlice,
    PseudoMarginalGibbs,
    PseudoMarginalMH,
    Slice,
    pseudo_marginal_gibbs,
)

NUM_DRAWS = 2  # K, importance draws: noise of shape (K, n)
NUM_OBS = 3
FIXED_MU = 0.7


def noise_only_model(y: jax.Array, mu: jax.Array) -> None:
    """The latent-Gaussian factor with μ given: its only latent site is the noise ``z_noise``."""

    def log_joint(z):
        return dist.Normal(mu, TAU).log_prob(z).sum() + dist.Normal(z, SIGMA).log_prob(y).sum()

    zhat.integrate_out("z", log_joint, y.shape, proposal=(mu, TAU))


class Case(NamedTuple):
    """A kernel on a model: how to build it, its model arguments and initial values."""

    build: Callable[[Callable], Any]
    base_model: Callable
    noise_only: bool
    standalone: bool  # a zhat kernel alone (batched keys in ``init``), not a Gibbs composite
    noise_moves: str  # "always", or "on accept" (the noise changes with each acceptance)


CASES = {
    "elliptical slice": Case(EllipticalSlice, noise_only_model, True, True, "always"),
    "slice": Case(Slice, model, False, True, "always"),
    "pseudo-marginal MH": Case(PseudoMarginalMH, model, False, True, "on accept"),
    "gibbs slice + elliptical slice": Case(
        lambda m: pseudo_marginal_gibbs(m, theta_kernel=Slice(m)), model, False, False, "always"
    ),
    "gibbs NUTS + elliptical slice": Case(pseudo_marginal_gibbs, model, False, False, "always"),
}
# The NUTS composite is NumPyro's NUTS ahead of zhat's elliptical slice block. It joins the
# checks of what users meet through the default sampler (dtype, refresh, the noise and its
# collection) and the Geweke test; elsewhere the slice composite runs the same zhat code.
CORE = [name for name in CASES if "NUTS" not in name]
STANDALONE = [name for name, case in CASES.items() if case.standalone]
COMPOSITE = [name for name, case in CASES.items() if not case.standalone]


def data(dtype=jnp.float64) -> jax.Array:
    return jnp.asarray(make_data(NUM_OBS), dtype)


def model_args(case: Case, y: jax.Array) -> tuple:
    return (y, jnp.asarray(FIXED_MU, y.dtype)) if case.noise_only else (y,)


def initial_values(case: Case, key: jax.Array, dtype=jnp.float64) -> dict[str, jax.Array]:
    noise = random.normal(key, (NUM_DRAWS, NUM_OBS), dtype)
    if case.noise_only:
        return {"z_noise": noise}
    return {"mu": jnp.asarray(0.3, dtype), "z_noise": noise}


def setup(name: str, key: jax.Array, dtype=jnp.float64, base: Callable | None = None):
    """Kernel, model arguments and initial state of a case."""
    case = CASES[name]
    exposed = zhat.expose(base or case.base_model, importance_sampling(NUM_DRAWS))
    kernel = case.build(exposed)
    args = model_args(case, data(dtype))
    key_values, key_init = random.split(key)
    state = kernel.init(key_init, 0, initial_values(case, key_values, dtype), args, {})
    return kernel, args, state


def run_steps(kernel, state, args: tuple, num_steps: int):
    for _ in range(num_steps):
        state = kernel.sample(state, args, {})
    return state


def comparable(tree):
    """Key arrays replaced by their raw data, so that states can be compared leaf by leaf."""
    return jax.tree.map(
        lambda x: random.key_data(x) if jnp.issubdtype(x.dtype, jax.dtypes.prng_key) else x, tree
    )


def assert_same_state(a, b) -> None:
    a, b = comparable(a), comparable(b)
    assert jax.tree.structure(a) == jax.tree.structure(b)
    for x, y in zip(jax.tree.leaves(a), jax.tree.leaves(b), strict=True):
        assert x.shape == y.shape and x.dtype == y.dtype
        if jnp.issubdtype(x.dtype, jnp.inexact):
            # common practice: compiled and eager float64 arithmetic agree to rounding error
            np.testing.assert_allclose(np.asarray(x), np.asarray(y), rtol=1e-10, atol=1e-12)
        else:
            np.testing.assert_array_equal(np.asarray(x), np.asarray(y))


# --- jit ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", CORE)
def test_jit_matches_eager(key, name):
    kernel, args, state = setup(name, key)
    eager = run_steps(kernel, state, args, 1)
    jitted = jax.jit(lambda s: run_steps(kernel, s, args, 1))(state)
    assert_same_state(eager, jitted)
    # the step changed the state, so the comparison is not between two copies of it
    moved = [
        not np.array_equal(np.asarray(a), np.asarray(b))
        for a, b in zip(jax.tree.leaves(state), jax.tree.leaves(eager), strict=True)
        if jnp.issubdtype(a.dtype, jnp.inexact)
    ]
    assert any(moved)


# --- vmap and chain methods -----------------------------------------------------------------
@pytest.mark.parametrize("name", [n for n in COMPOSITE if n in CORE])
def test_vmap_matches_single_chains(key, name):
    """``jax.vmap`` over init and steps (the user's own vectorisation) suits the composite too,
    although its ``init`` takes one key at a time."""
    kernel, args, _ = setup(name, key)
    keys = random.split(key, 2)

    def chain(k):
        return run_steps(kernel, kernel.init(k, 0, None, args, {}), args, 2)

    mapped = jax.jit(jax.vmap(chain))(keys)
    for i in range(2):
        assert_same_state(jax.tree.map(lambda x, i=i: x[i], mapped), jax.jit(chain)(keys[i]))


def chain_draws(name: str, key: jax.Array, chain_method: str) -> dict[str, np.ndarray]:
    case = CASES[name]
    exposed = zhat.expose(case.base_model, importance_sampling(NUM_DRAWS))
    mcmc = zhat.MCMC(
        case.build(exposed),
        num_warmup=5,
        num_samples=5,
        num_chains=2,
        chain_method=chain_method,
        progress_bar=False,
        keep_noise=True,
    )
    mcmc.run(key, *model_args(case, data()))
    return jax.tree.map(np.asarray, mcmc.get_samples(group_by_chain=True))


@pytest.mark.parametrize(
    ("name", "methods"),
    [(name, ("vectorized", "parallel")) for name in STANDALONE]
    + [(name, ("parallel", "sequential")) for name in COMPOSITE if name in CORE],
)
def test_chain_methods_give_the_same_chains(key, name, methods):
    """NumPyro splits the key the same way for every chain method, so the chains must agree.
    "vectorized" gives a standalone kernel's ``init`` the batch of keys (one chain per key),
    "parallel" runs each chain alone, so their agreement is that of batched and single chains.
    NumPyro's ``Gibbs`` takes one key per ``init``: composites run "parallel" and "sequential"."""
    first, second = (chain_draws(name, key, method) for method in methods)
    assert first.keys() == second.keys()
    for site in first:
        assert first[site].shape[:2] == (2, 5)
        assert np.isfinite(first[site]).all()
        np.testing.assert_allclose(first[site], second[site], rtol=1e-10, atol=1e-12)
    # two chains, not one chain twice
    assert not np.allclose(first["z_noise"][0], first["z_noise"][1])


def test_vectorized_gibbs_error_names_the_fix(key):
    with pytest.raises(ValueError, match="chain_method"):
        chain_draws("gibbs slice + elliptical slice", key, "vectorized")


# --- structure, dtype, finiteness -----------------------------------------------------------
DTYPE_CASES = [
    pytest.param(name, dtype, id=f"{name}-{dtype.__name__}")
    for name in CASES
    for dtype in (jnp.float64, jnp.float32)
    # NumPyro's NUTS does not keep float32 positions under x64 (outside zhat)
    if not (dtype is jnp.float32 and "NUTS" in name)
]


@pytest.mark.parametrize(("name", "dtype"), DTYPE_CASES)
def test_state_keeps_structure_and_dtype(key, name, dtype):
    kernel, args, state = setup(name, key, dtype)
    step = jax.jit(lambda s: kernel.sample(s, args, {}))
    spec = jax.tree.map(lambda x: (x.shape, x.dtype), state)
    assert all(v.dtype == dtype for v in jax.tree.leaves(state.z))
    for _ in range(3):
        state = step(state)
        assert jax.tree.map(lambda x: (x.shape, x.dtype), state) == spec
        for leaf in jax.tree.leaves(state):
            if jnp.issubdtype(leaf.dtype, jnp.inexact):
                assert np.isfinite(np.asarray(leaf)).all()


# --- tracing --------------------------------------------------------------------------------
class CountingModel:
    """The model, counting its Python-level calls (each one is a trace or an eager run)."""

    def __init__(self, fn: Callable) -> None:
        self.fn, self.calls = fn, 0

    def __call__(self, *args, **kwargs):
        self.calls += 1
        return self.fn(*args, **kwargs)


@pytest.mark.parametrize("name", CORE)
def test_model_traced_a_bounded_number_of_times(key, name):
    """STYLE.md habit 4: a jitted multi-step run traces the model a fixed number of times,
    whatever the number of steps, and a second run of the same function does not retrace."""
    counter = CountingModel(CASES[name].base_model)
    kernel, args, state = setup(name, key, base=counter)
    counts = {}
    for num_steps in (2, 8):
        run = jax.jit(
            lambda s, n=num_steps: jax.lax.scan(
                lambda c, _: (kernel.sample(c, args, {}), None), s, None, length=n
            )[0]
        )
        counter.calls = 0
        new = run(state)
        counts[num_steps] = counter.calls
        run(new)
        assert counter.calls == counts[num_steps], "the jitted run was traced again"
    assert counts[2] == counts[8], counts
    # a step evaluates the log density in a few places (start, loop bodies, refreshes)
    assert 0 < counts[2] <= 20, counts


def test_mcmc_traces_independently_of_the_number_of_samples(key):
    """The same through ``zhat.MCMC`` for the composite (NumPyro's driver, Gibbs' own sweep)."""
    counts = []
    for num_samples in (5, 25):
        counter = CountingModel(model)
        exposed = zhat.expose(counter, importance_sampling(NUM_DRAWS))
        mcmc = zhat.MCMC(
            pseudo_marginal_gibbs(exposed, theta_kernel=Slice(exposed)),
            num_warmup=5,
            num_samples=num_samples,
            progress_bar=False,
        )
        mcmc.run(key, data())
        counts.append(counter.calls)
    assert counts[0] == counts[1], counts


@pytest.mark.parametrize("name", ["slice", "pseudo-marginal MH", "gibbs slice + elliptical slice"])
def test_run_after_warmup_continues_the_warmed_up_chain(key, name):
    """``warmup()`` then ``run()`` (NumPyro's documented way to continue a chain, and what
    saving and resuming relies on) gives the draws of one ``run`` with warmup and sampling."""
    case = CASES[name]
    y = data()
    exposed = zhat.expose(case.base_model, importance_sampling(NUM_DRAWS))
    init = initial_values(case, random.key(3))

    def driver():
        return zhat.MCMC(case.build(exposed), num_warmup=8, num_samples=6, progress_bar=False)

    whole = driver()
    whole.run(key, y, init_params=init)
    split = driver()
    split.warmup(key, y, init_params=init)
    split.run(split.post_warmup_state.rng_key, y)
    for site, draws in whole.get_samples().items():
        np.testing.assert_allclose(split.get_samples()[site], draws, rtol=1e-12)


# --- the noise ------------------------------------------------------------------------------
def closed_form_log_estimate(y: np.ndarray, mu: np.ndarray, noise: np.ndarray) -> np.ndarray:
    """log f̂ of importance sampling with the latent prior as proposal: the weights are the
    likelihoods, log f̂ = log (1/K) Σ_k Π_i N(y_i; μ + τ u_ki, σ²) (the estimator's definition,
    Geweke 1989, Econometrica 57(6))."""
    z = np.asarray(mu)[:, None, None] + TAU * noise
    log_lik = stats.norm.logpdf(np.asarray(y)[None, None, :], z, SIGMA).sum(-1)
    return special.logsumexp(log_lik, axis=-1) - math.log(noise.shape[1])


@pytest.mark.parametrize("name", list(CASES))
def test_noise_moves_and_is_left_out_by_default(key, name):
    case = CASES[name]
    y = data()
    exposed = zhat.expose(case.base_model, importance_sampling(NUM_DRAWS))
    runs = {}
    for keep in (True, False):
        mcmc = zhat.MCMC(
            case.build(exposed), num_warmup=20, num_samples=30, progress_bar=False, keep_noise=keep
        )
        mcmc.run(key, *model_args(case, y))
        runs[keep] = (mcmc.get_samples(), mcmc.get_extra_fields())
    kept, default = runs[True][0], runs[False][0]

    noise = np.asarray(kept["z_noise"])
    assert noise.shape == (30, NUM_DRAWS, NUM_OBS)
    changed = np.any(noise[1:] != noise[:-1], axis=(1, 2))
    if case.noise_moves == "always":
        assert changed.all(), np.flatnonzero(~changed)
    else:
        accepted = np.asarray(runs[True][1]["info.accepted"])[1:]
        assert accepted.any() and not accepted.all(), accepted
        np.testing.assert_array_equal(changed, accepted)

    assert "z_noise" not in default and "z_log_estimate" in default
    assert set(kept) - set(default) == {"z_noise"}
    for site, values in default.items():
        np.testing.assert_array_equal(np.asarray(values), np.asarray(kept[site]), err_msg=site)
    mu = np.full(30, FIXED_MU) if case.noise_only else np.asarray(kept["mu"])
    np.testing.assert_allclose(
        np.asarray(kept["z_log_estimate"]), closed_form_log_estimate(y, mu, noise), rtol=1e-10
    )


# --- refresh and nesting --------------------------------------------------------------------
def cached_densities(kernel, state) -> list[np.ndarray]:
    """What a state caches about its target: log densities, potential energies and gradients."""
    states = state.block_states if isinstance(kernel, PseudoMarginalGibbs) else (state,)
    out = []
    for s in states:
        for field in ("logdensity", "potential_energy", "z_grad"):
            if hasattr(s, field):
                out.extend(np.asarray(x) for x in jax.tree.leaves(getattr(s, field)))
    return out


REFRESH_CASES = list(CASES)


@pytest.mark.parametrize("name", REFRESH_CASES)
def test_refresh_matches_a_fresh_init(key, name):
    kernel, args, state = setup(name, key)
    state = jax.jit(lambda s: run_steps(kernel, s, args, 1))(state)
    new_args = (args[0] + 0.5, *args[1:])
    values = kernel.get_constrain_fn(args, {})(state.z)
    refreshed = kernel.refresh(state, new_args, {})
    fresh = kernel.init(key, 0, values, new_args, {})
    before, after, reference = (cached_densities(kernel, s) for s in (state, refreshed, fresh))
    assert len(after) == len(reference) > 0
    for old, got, want in zip(before, after, reference, strict=True):
        assert not np.allclose(old, want)  # the new data change the target
        np.testing.assert_allclose(got, want, rtol=1e-10)


def test_pseudo_marginal_gibbs_with_explicit_kernels_is_a_gibbs_block():
    exposed = zhat.expose(model, importance_sampling(NUM_DRAWS))
    Gibbs([(pseudo_marginal_gibbs(exposed, theta_kernel=Slice(exposed)), None)])
