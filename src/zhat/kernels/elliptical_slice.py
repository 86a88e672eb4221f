"""Elliptical slice sampling for the standard-normal noise blocks of exposed models.

For a target π(u) ∝ L(u) N(u; 0, I), one step draws ν ~ N(0, I), a level
log y = log L(u) + log U(0, 1), and an angle φ on the ellipse u cos φ + ν sin φ, shrinking the
angle bracket towards φ = 0 until the point lies above the level. The move leaves π invariant,
needs no tuning and always moves when L is continuous in u (Murray, Adams & MacKay 2010,
AISTATS, "Elliptical slice sampling"). Here L(u) = f̂(θ, u) × (terms of the joint not involving
u), so the kernel is the natural u-move of a pseudo-marginal sampler on (θ, u).

This wraps BlackJAX's ``elliptical_slice``; each noise site is updated in turn with the others
fixed. Assumption: every site of the block has the N(0, I) prior that :func:`zhat.expose` gives
noise sites; the kernel refuses other sites.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax import random

from zhat.kernels._noise import NoiseKernel
from zhat.kernels._shell import AlgorithmState, LogDensityFn

Array = jax.Array

__all__ = ["EllipticalSlice", "EllipticalSliceInfo", "build_kernel"]


class EllipticalSliceInfo(NamedTuple):
    """Diagnostics of one sweep: slice evaluations per site (1 means accepted at once)."""

    subiter: Array


def build_kernel(sites: Sequence[str]) -> tuple[Callable, Callable]:
    """Pure ``(init, step)`` for one elliptical slice move per site of ``sites``, in order.

    ``logdensity_fn`` passed to them is the log *likelihood* of the block: the log joint with
    the N(0, I) prior of the sites removed. The shrinking bracket always ends at the current
    point, so the loop terminates when the likelihood is continuous in the noise (Murray, Adams
    & MacKay 2010); positions keep the site's dtype (the likelihood is evaluated at the value
    as stored). A site whose current likelihood is zero (or NaN) is left where it is.
    """
    # imported here: importing BlackJAX starts JAX's backend, which zhat.compile_small_loops
    # must come before
    import blackjax.mcmc.elliptical_slice as ess

    sites = tuple(sites)

    def init(z: dict[str, Array], loglik_fn: LogDensityFn) -> AlgorithmState:
        info = EllipticalSliceInfo(jnp.zeros((len(sites),), jnp.int32))
        return AlgorithmState(z, jnp.asarray(loglik_fn(z)), info)

    def step(rng_key: Array, state: Any, loglik_fn: LogDensityFn) -> tuple[AlgorithmState, Any]:
        z, loglik = dict(state.z), state.logdensity
        counts = []
        for i, site in enumerate(sites):
            value = z[site]
            kernel = ess.build_kernel(
                jnp.ones((value.size,), value.dtype), jnp.zeros((), value.dtype)
            )

            def site_loglik(v: Array, site: str = site, dtype=value.dtype) -> Array:
                return loglik_fn({**z, site: v.astype(dtype)}).astype(state.logdensity.dtype)

            def move(key, value=value, loglik=loglik, kernel=kernel, site_loglik=site_loglik):
                new, info = kernel(key, ess.EllipSliceState(value, loglik), site_loglik)
                return (
                    new.position.astype(value.dtype),
                    jnp.asarray(new.logdensity, loglik.dtype),
                    jnp.asarray(info.subiter, jnp.int32),
                )

            def stay(key, value=value, loglik=loglik):
                return value, loglik, jnp.zeros((), jnp.int32)

            # At a point of zero likelihood (an estimate that came out 0, or NaN) the slice
            # level is -inf or NaN and the bracket would shrink forever without accepting:
            # such a point keeps its value (the move is the identity there).
            value, new_loglik, subiter = jax.lax.cond(
                jnp.isfinite(loglik), move, stay, random.fold_in(rng_key, i)
            )
            z[site] = value
            loglik = jnp.asarray(new_loglik).astype(state.logdensity.dtype)
            counts.append(jnp.asarray(subiter, jnp.int32))
        return AlgorithmState(z, loglik, None), EllipticalSliceInfo(jnp.stack(counts))

    return init, step


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
