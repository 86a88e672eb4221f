"""Elliptical slice sampling for the standard-normal noise blocks of exposed models.

For a target π(u) ∝ L(u) N(u; 0, I), one step draws ν ~ N(0, I), a level
log y = log L(u) + log U(0, 1), and an angle φ on the ellipse u cos φ + ν sin φ, shrinking the
angle bracket towards φ = 0 until the point lies above the level. The move leaves π invariant,
needs no tuning and always moves when L is continuous in u (Murray, Adams & MacKay 2010,
AISTATS, "Elliptical slice sampling"). Here L(u) = f̂(θ, u) × (terms of the joint not involving
u), so the kernel is the natural u-move of a pseudo-marginal sampler on (θ, u).

Each noise site is updated in turn with the others fixed; each move evaluates the likelihood
at most a fixed number of times (200 by default), after which the site keeps its value, so that
an estimator that is piecewise constant in u cannot hold the loop forever. Assumption: every
site of the block has the N(0, I) prior that :func:`zhat.expose` gives noise sites; the kernel
refuses other sites.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax import lax, random

from zhat.kernels._noise import NoiseKernel
from zhat.kernels._shell import AlgorithmState, LogDensityFn

Array = jax.Array

__all__ = ["EllipticalSlice", "EllipticalSliceInfo", "build_kernel"]


class EllipticalSliceInfo(NamedTuple):
    """Diagnostics of one sweep: slice evaluations per site (1 means accepted at once)."""

    subiter: Array


MAX_EVALUATIONS = 200  # per site and step; then the site keeps its value (see _slice_move)


def build_kernel(
    sites: Sequence[str], max_evaluations: int = MAX_EVALUATIONS
) -> tuple[Callable, Callable]:
    """Pure ``(init, step)`` for one elliptical slice move per site of ``sites``, in order.

    ``logdensity_fn`` passed to them is the log *likelihood* of the block: the log joint with
    the N(0, I) prior of the sites removed. Positions keep the site's dtype (the likelihood is
    evaluated at the value as stored). Each move evaluates the likelihood at most
    ``max_evaluations`` times (see :func:`_slice_move`).
    """
    if isinstance(max_evaluations, bool) or not isinstance(max_evaluations, int):
        raise TypeError(f"max_evaluations must be a whole number; got {max_evaluations!r}.")
    if max_evaluations < 1:
        raise ValueError(f"max_evaluations must be at least 1; got {max_evaluations}.")
    sites = tuple(sites)

    def init(z: dict[str, Array], loglik_fn: LogDensityFn) -> AlgorithmState:
        info = EllipticalSliceInfo(jnp.zeros((len(sites),), jnp.int32))
        return AlgorithmState(z, jnp.asarray(loglik_fn(z)), info)

    def step(rng_key: Array, state: Any, loglik_fn: LogDensityFn) -> tuple[AlgorithmState, Any]:
        z, loglik = dict(state.z), jnp.asarray(state.logdensity)
        counts = []
        for i, site in enumerate(sites):
            value = z[site]

            def site_loglik(v: Array, site: str = site, dtype=loglik.dtype) -> Array:
                return jnp.asarray(loglik_fn({**z, site: v})).astype(dtype)

            z[site], loglik, count = _slice_move(
                random.fold_in(rng_key, i), value, loglik, site_loglik, max_evaluations
            )
            counts.append(count)
        return AlgorithmState(z, loglik, None), EllipticalSliceInfo(jnp.stack(counts))

    return init, step


def _slice_move(
    key: Array, u: Array, loglik: Array, site_loglik: Callable, max_evaluations: int
) -> tuple[Array, Array, Array]:
    """One elliptical slice move of ``u`` (prior N(0, I)); (new u, its log likelihood, the
    number of likelihood evaluations).

    Murray, Adams & MacKay (2010), Fig. 2: ν ~ N(0, I), level log y = log L(u) + log U, an
    angle φ ~ U(0, 2π) with the bracket [φ − 2π, φ]; the point u cos φ + ν sin φ is accepted
    if its log likelihood exceeds the level, else the bracket shrinks to the side of 0 that
    holds φ and φ is drawn again in it. The bracket closes in on φ = 0, the current point, so
    for a likelihood continuous in u the loop ends. For an estimator that is piecewise constant
    in u it ends too, provided the likelihood recomputed at (nearly) the current point is not
    below the level, which rounding can break when U is within rounding of 1 (the level is then
    the current value itself); and at a point of zero likelihood (an estimate of 0) no point
    near it is accepted at all. So the loop stops after ``max_evaluations`` evaluations, and u
    then keeps its value: a move from u to u' is found at the k-th evaluation exactly when the
    reverse move from u' (with the same angles) is, so stopping after a fixed number leaves
    the move reversible. A NaN likelihood is never accepted.
    """
    k_nu, k_level, k_angle, k_shrink = random.split(key, 4)
    dtype = u.dtype
    nu = random.normal(k_nu, u.shape, dtype)
    level = loglik + jnp.log(random.uniform(k_level, (), loglik.dtype))
    two_pi = 2.0 * jnp.pi
    phi = random.uniform(k_angle, (), loglik.dtype, 0.0, two_pi)

    def point(phi: Array) -> Array:
        return u * jnp.cos(phi).astype(dtype) + nu * jnp.sin(phi).astype(dtype)

    def proposal(phi: Array) -> tuple[Array, Array]:
        x = point(phi)
        return x, site_loglik(x)

    x, ll = proposal(phi)

    def rejected(carry) -> Array:
        _, ll, _, _, _, count = carry
        return ~(ll > level) & (count < max_evaluations)

    def shrink(carry):
        _, _, phi, low, high, count = carry
        low = jnp.where(phi < 0, phi, low)
        high = jnp.where(phi > 0, phi, high)
        phi = random.uniform(random.fold_in(k_shrink, count), (), loglik.dtype, low, high)
        x, ll = proposal(phi)
        return x, ll, phi, low, high, count + 1

    start = (x, ll, phi, phi - two_pi, phi, jnp.ones((), jnp.int32))
    x, ll, *_, count = lax.while_loop(rejected, shrink, start)
    accepted = ll > level
    return jnp.where(accepted, x, u), jnp.where(accepted, ll, loglik), count


class EllipticalSlice(NoiseKernel):
    """Elliptical slice sampling of noise sites; a block kernel for NumPyro's ``Gibbs``.

    :param model: the exposed model (``zhat.expose(model)``).

    Use it as ``Gibbs([(NUTS(exposed), None), (EllipticalSlice(exposed), zhat.noise_sites)])``
    or through :func:`zhat.kernels.pseudo_marginal_gibbs`.
    """

    def _algorithm(self, model_trace: dict[str, Any], num_warmup: int) -> tuple[Callable, Callable]:
        return build_kernel(self._sites)

    def get_diagnostics_str(self, state: Any) -> str:
        return f"ess evals {jnp.asarray(state.info.subiter).tolist()}"
