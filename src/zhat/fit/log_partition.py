"""log Z(θ) of an unnormalized family by annealed importance sampling and by path sampling.

Both methods walk the straight path θ(t) = θ₀ + t (θ₁ − θ₀), t ∈ [0, 1], from a start θ₀ whose
log Z is known (e.g. coupling 0 on a lattice, where the sites are independent: log Z = N log 2
for a zero-field Ising model, Σ_i log 2cosh h_i with a field h) to the target θ₁. The moves are
the family's simulator (for lattices the heat-bath sweep), driven by normal noise drawn here
from a PRNG key: these are point-estimation routines, not log densities.

Annealed importance sampling (Neal 2001, Statist. Comput. 11(2)). On a schedule
0 = t_0 < t_1 < … < t_T = 1, start from x_0 ~ p(· | θ₀) and, for s = 1..T,

    log w += log g(x; θ(t_s)) − log g(x; θ(t_{s−1})),    then move x by sweeps at θ(t_s).

E[w] = Z(θ₁)/Z(θ₀) exactly when x_0 is an exact draw; the estimate is the log-mean-exp of K
independent weights (vmapped runs), with standard error by the delta method,
se(log Ẑ) = sd(w)/(√K · mean(w)), and the effective sample size (Σ w)²/Σ w² (Kong 1992,
technical report, common practice). The log-mean-exp is biased downwards by about se²/2.
Exactness of x_0: one sweep is exact at a start with independent sites (coupling 0);
otherwise use the family's perfect sampler (``start_draws="perfect"``) or enough sweeps.

Path sampling, or thermodynamic integration (Gelman & Meng 1998, Statist. Sci. 13(2)):

    log Z(θ₁) − log Z(θ₀) = ∫₀¹ E_{θ(t)}[U(x, t)] dt,    U(x, t) = ∂_t log g(x; θ(t)),

with U from forward-mode differentiation of the log-potential, the expectations from
``num_chains`` chains (vmapped) that walk the grid from t = 0 to 1, each warm-started from its
state at the previous grid point, with ``burn_in`` sweeps then ``num_draws`` averaged sweeps at
every point, and the integral by Simpson's rule (or the trapezoid rule) on the grid. Each chain
gives its own estimate of the integral; the chains are independent, so the standard error is
sd(chain estimates)/√C, which accounts for autocorrelation within and between grid points.
The standard error does NOT contain the discretisation error of the rule: ``coarse_difference``
is the same integral from the same draws on every other grid point minus the estimate (about
15× the discretisation error of Simpson's rule, 3× that of the trapezoid rule, on smooth
integrands). Where E_t[U] bends sharply (near a critical point), give a finer grid there, e.g.
:func:`concentrated_grid`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax import lax, random
from jax.scipy.special import logsumexp
from jax.typing import ArrayLike

from zhat.fit.quadrature import coarse_weights, concentrated_grid, rule_weights
from zhat.model.unnormalized import Transition, UnnormalizedDistribution

Array = jax.Array

__all__ = [
    "AnnealedLogZ",
    "PathLogZ",
    "annealed_log_z",
    "concentrated_grid",
    "log_likelihood",
    "path_sampling_log_z",
    "rule_weights",
]


class AnnealedLogZ(NamedTuple):
    """log Z(θ₁) by annealed importance sampling.

    - **log_z** / **error** - the estimate and its Monte Carlo standard error.
    - **ess** - effective sample size of the K weights (K when they are all equal).
    - **log_weights** - the K log weights log w_k = log(Z(θ₁)/Z(θ₀)) estimates.
    """

    log_z: float
    error: float
    ess: float
    log_weights: Array


class PathLogZ(NamedTuple):
    """log Z(θ₁) by path sampling.

    - **log_z** / **error** - the estimate and its Monte Carlo standard error (discretisation
      error not included).
    - **coarse_difference** / **coarse_error** - the rule on every other grid point minus the
      estimate, from the same draws, and its standard error (NaN when the grid cannot be halved).
    - **grid** - the grid of t; **means** / **mean_errors** - E_t[∂_t log g] and its standard
      error (between chains) at each grid point.
    """

    log_z: float
    error: float
    coarse_difference: float
    coarse_error: float
    grid: np.ndarray
    means: np.ndarray
    mean_errors: np.ndarray


# --- shared pieces --------------------------------------------------------------------------
def _require_dist(dist: Any) -> UnnormalizedDistribution:
    if not isinstance(dist, UnnormalizedDistribution):
        raise TypeError(
            "log Z estimation needs a member of an unnormalized family at the target "
            f"parameters, e.g. `lattice.ising(graph, coupling=0.4)`; got {type(dist).__name__}."
        )
    return dist


def _path(dist: UnnormalizedDistribution, start: Mapping[str, Any]):
    """θ(t) as a function of t, checking ``start`` names parameters of the family."""
    if not isinstance(start, Mapping) or not start:
        raise ValueError(
            "start must be a non-empty dict of the parameters at the start of the path, e.g. "
            "{'coupling': 0.0}; the other parameters stay at their target values."
        )
    unknown = sorted(set(start) - set(dist.params))
    if unknown:
        raise ValueError(
            f"start has parameters {unknown} that family '{dist.family.name}' does not have; "
            f"its parameters are {sorted(dist.params)}."
        )
    dtype = jnp.result_type(float)
    target = {k: jnp.asarray(v, dtype) for k, v in dist.params.items()}
    begin = {k: jnp.broadcast_to(jnp.asarray(v, dtype), target[k].shape) for k, v in start.items()}

    def theta(t: Array) -> dict[str, Array]:
        return {k: (begin[k] + t * (v - begin[k]) if k in begin else v) for k, v in target.items()}

    return theta


def _simulator(dist: UnnormalizedDistribution, name: str | None) -> Transition:
    sims = dist.family.simulators
    if not sims:
        raise ValueError(f"Family '{dist.family.name}' has no simulator to move the draws.")
    if name is None:
        return next(iter(sims.values()))
    if name not in sims:
        raise ValueError(
            f"Family '{dist.family.name}' has no simulator {name!r}; it has {sorted(sims)}."
        )
    return sims[name]


def _initial_state(
    dist: UnnormalizedDistribution, init: ArrayLike | None, transition: Transition, params
) -> Array:
    """``init`` (default a feasible state) in the shape and dtype the simulator returns."""
    if init is None:
        init = dist.family.support.feasible_like(jnp.zeros(dist.event_shape))
    x = jnp.asarray(init)
    noise = jax.ShapeDtypeStruct(tuple(transition.noise_shape(x)), jnp.result_type(float))
    out = jax.eval_shape(transition.step, params, x, noise)
    return x.reshape(out.shape).astype(out.dtype)


def _sweeper(transition: Transition, shape: tuple[int, ...]):
    """``(key, params, x, n) -> x`` after n transitions with noise drawn from ``key``."""

    def sweeps(key: Array, params: dict[str, Array], x: Array, n: int) -> Array:
        noise = random.normal(key, (n, *shape))
        step = lambda x, z: (transition.step(params, x, z).astype(x.dtype), None)  # noqa: E731
        return lax.scan(step, x, noise)[0]

    return sweeps


def _positive_int(value: Any, name: str) -> int:
    if not isinstance(value, (int, np.integer)) or value < 1:
        raise ValueError(f"{name} must be a positive integer, got {value!r}.")
    return int(value)


def _check_log_z(start_log_z: Any) -> float:
    if start_log_z is None or not math.isfinite(float(start_log_z)):
        raise ValueError(
            "start_log_z must be the known, finite log Z at the start of the path (e.g. "
            f"N·log 2 for an Ising model at coupling 0 and zero field); got {start_log_z!r}."
        )
    return float(start_log_z)


def _schedule(points: int | ArrayLike, name: str) -> np.ndarray:
    if isinstance(points, (int, np.integer)):
        return np.linspace(0.0, 1.0, _positive_int(points, name) + 1)
    t = np.asarray(points, dtype=float)
    if t.ndim != 1 or t.size < 2 or t[0] != 0.0 or t[-1] != 1.0 or np.any(np.diff(t) <= 0):
        raise ValueError(
            f"{name} must be a number of intervals or an increasing array from 0 to 1 "
            f"(both included); got {np.array2string(t, threshold=6)}."
        )
    return t


# --- annealed importance sampling -----------------------------------------------------------
def annealed_log_z(
    rng_key: Array,
    dist: UnnormalizedDistribution,
    *,
    start: Mapping[str, Any],
    start_log_z: float,
    schedule: int | ArrayLike = 1000,
    num_runs: int = 32,
    sweeps_per_step: int = 1,
    start_draws: str = "simulator",
    start_sweeps: int = 1,
    budget: int = 1024,
    simulator: str | None = None,
    init: ArrayLike | None = None,
) -> AnnealedLogZ:
    """log Z at the parameters of ``dist`` by annealed importance sampling (module docstring).

    :param start: the parameters at the start of the path (the rest stay at ``dist``'s).
    :param start_log_z: the known log Z at the start.
    :param schedule: the number of annealing steps T (equal steps in t), or the increasing
        grid t_0 = 0 < … < t_T = 1.
    :param num_runs: K independent annealing runs.
    :param sweeps_per_step: simulator transitions at each intermediate θ(t_s).
    :param start_draws: ``"simulator"`` (``start_sweeps`` transitions at the start from
        ``init``; exact after one sweep when the sites are independent there) or
        ``"perfect"`` (the family's perfect sampler with ``budget`` sweeps).
    :param simulator: the family simulator for the moves (default its first).
    :param init: the state the start sweeps begin from (default a feasible state).
    """
    dist = _require_dist(dist)
    theta = _path(dist, start)
    log_z0 = _check_log_z(start_log_z)
    t = jnp.asarray(_schedule(schedule, "schedule"), jnp.result_type(float))
    per_step = _positive_int(sweeps_per_step, "sweeps_per_step")
    if _positive_int(num_runs, "num_runs") < 2:
        raise ValueError(f"annealing needs num_runs ≥ 2 for its standard error; got {num_runs}.")
    if start_draws not in ("simulator", "perfect"):
        raise ValueError(f"start_draws must be 'simulator' or 'perfect', got {start_draws!r}.")
    perfect = dist.family.perfect_sampler
    if start_draws == "perfect" and perfect is None:
        raise ValueError(
            f"Family '{dist.family.name}' has no perfect sampler; use start_draws='simulator' "
            "from a start where the simulator mixes at once (e.g. coupling 0)."
        )
    transition = _simulator(dist, simulator)
    x0 = _initial_state(dist, init, transition, theta(jnp.zeros(())))
    sweeps = _sweeper(transition, tuple(transition.noise_shape(x0)))
    log_g = lambda params, x: dist.family.log_potential(x, **params)  # noqa: E731
    first = _positive_int(start_sweeps, "start_sweeps")

    def run(key: Array) -> tuple[Array, Array]:
        key_start, key_moves = random.split(key)
        if start_draws == "perfect":
            noise = random.normal(key_start, perfect.noise_shape(budget))
            x, exact = perfect.draw(theta(t[0]), noise, budget)
        else:
            x, exact = sweeps(key_start, theta(t[0]), x0, first), jnp.array(True)

        def anneal(carry, inputs):
            x, log_w = carry
            i, before, here = inputs
            log_w = log_w + log_g(theta(here), x) - log_g(theta(before), x)
            x = sweeps(random.fold_in(key_moves, i), theta(here), x, per_step)
            return (x, log_w), None

        steps = (jnp.arange(t.size - 1), t[:-1], t[1:])
        (_, log_w), _ = lax.scan(anneal, (x, jnp.zeros((), t.dtype)), steps)
        return log_w, exact

    log_w, exact = jax.jit(jax.vmap(run))(random.split(rng_key, num_runs))
    if not bool(jnp.all(exact)):
        raise ValueError(
            f"{int(jnp.sum(~exact))} of {num_runs} perfect start draws did not coalesce within "
            f"budget={budget} sweeps; raise the budget or start where the sampler is fast."
        )
    return _summarise_weights(log_w, log_z0)


def _summarise_weights(log_w: Array, log_z0: float) -> AnnealedLogZ:
    k = log_w.shape[0]
    if not bool(jnp.all(jnp.isfinite(log_w))):
        raise ValueError("Some annealing weights are not finite: check the start and the path.")
    w = jnp.exp(log_w - jnp.max(log_w))
    mean = jnp.mean(w)
    error = float(jnp.std(w, ddof=1) / (math.sqrt(k) * mean))
    ess = float(jnp.sum(w) ** 2 / jnp.sum(w**2))
    log_z = log_z0 + float(logsumexp(log_w) - math.log(k))
    return AnnealedLogZ(log_z, error, ess, log_w)


# --- path sampling --------------------------------------------------------------------------
def path_sampling_log_z(
    rng_key: Array,
    dist: UnnormalizedDistribution,
    *,
    start: Mapping[str, Any],
    start_log_z: float,
    grid: int | ArrayLike = 32,
    rule: str = "simpson",
    num_chains: int = 16,
    burn_in: int = 100,
    num_draws: int = 200,
    simulator: str | None = None,
    init: ArrayLike | None = None,
) -> PathLogZ:
    """log Z at the parameters of ``dist`` by path sampling (module docstring).

    :param start: the parameters at the start of the path (the rest stay at ``dist``'s).
    :param start_log_z: the known log Z at the start.
    :param grid: the number of equal intervals of [0, 1], or an increasing grid from 0 to 1.
    :param rule: ``"simpson"`` (any spacing; even number of intervals) or ``"trapezoid"``.
    :param num_chains: C independent chains (at least 2, for the standard error).
    :param burn_in: transitions discarded at each grid point (each chain starts from its
        state at the previous point; the first point starts from ``init``).
    :param num_draws: transitions averaged at each grid point.
    """
    dist = _require_dist(dist)
    theta = _path(dist, start)
    log_z0 = _check_log_z(start_log_z)
    t = _schedule(grid, "grid")
    weights = rule_weights(t, rule)
    coarse = coarse_weights(t, rule)
    chains = _positive_int(num_chains, "num_chains")
    if chains < 2:
        raise ValueError("path sampling needs num_chains ≥ 2 for its standard error.")
    burn, draws = int(burn_in), _positive_int(num_draws, "num_draws")
    if burn < 0:
        raise ValueError(f"burn_in must be ≥ 0, got {burn_in!r}.")
    transition = _simulator(dist, simulator)
    x0 = _initial_state(dist, init, transition, theta(jnp.zeros(())))
    shape = tuple(transition.noise_shape(x0))
    sweeps = _sweeper(transition, shape)
    log_g = lambda tt, x: dist.family.log_potential(x, **theta(tt))  # noqa: E731
    tj = jnp.asarray(t, jnp.result_type(float))

    def chain(key: Array) -> Array:
        key_first, key_grid = random.split(key)
        x = sweeps(key_first, theta(tj[0]), x0, 1)

        def point(x, inputs):
            i, here = inputs
            key_burn, key_draws = random.split(random.fold_in(key_grid, i))
            x = sweeps(key_burn, theta(here), x, burn) if burn else x
            slope = lambda x: jax.jvp(lambda s: log_g(s, x), (here,), (jnp.ones_like(here),))[1]  # noqa: E731

            def draw(carry, z):
                x, total = carry
                x = transition.step(theta(here), x, z).astype(x.dtype)
                return (x, total + slope(x)), None

            noise = random.normal(key_draws, (draws, *shape))
            (x, total), _ = lax.scan(draw, (x, jnp.zeros((), tj.dtype)), noise)
            return x, total / draws

        _, means = lax.scan(point, x, (jnp.arange(t.size), tj))
        return means

    means = np.asarray(jax.jit(jax.vmap(chain))(random.split(rng_key, chains)))  # (C, M + 1)
    if not np.all(np.isfinite(means)):
        raise ValueError("Some path-sampling averages are not finite: check the path.")
    per_chain = means @ weights
    error = float(np.std(per_chain, ddof=1) / math.sqrt(chains))
    if coarse is None:
        diff = diff_err = math.nan
    else:
        d = means @ (coarse - weights)
        diff, diff_err = float(np.mean(d)), float(np.std(d, ddof=1) / math.sqrt(chains))
    return PathLogZ(
        log_z=log_z0 + float(np.mean(per_chain)),
        error=error,
        coarse_difference=diff,
        coarse_error=diff_err,
        grid=t,
        means=means.mean(axis=0),
        mean_errors=means.std(axis=0, ddof=1) / math.sqrt(chains),
    )


def log_likelihood(
    dist: UnnormalizedDistribution, y: ArrayLike, estimate: AnnealedLogZ | PathLogZ
) -> tuple[float, float]:
    """log p(y | θ) = log g(y; θ) − log Z(θ) at the parameters of ``dist``, with the Monte
    Carlo standard error of the log Z ``estimate`` (made at the same parameters)."""
    dist = _require_dist(dist)
    if not isinstance(estimate, (AnnealedLogZ, PathLogZ)):
        raise TypeError(
            "estimate must come from annealed_log_z or path_sampling_log_z at the same "
            f"parameters; got {type(estimate).__name__}."
        )
    return float(dist.log_potential(y)) - estimate.log_z, estimate.error
