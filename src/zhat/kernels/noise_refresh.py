"""Metropolis refreshes of noise blocks, for estimators that are piecewise constant in u.

An estimator built on perfect draws changes only when the draws do, so elliptical slice
sampling mostly shrinks back to its start. These kernels propose noise from its N(0, I) prior
instead and accept on the likelihood ratio min(1, f̂(θ, u')/f̂(θ, u)) (the prior cancels):

- ``IndependentRefresh``: all of a site's noise at once (a Metropolis independence sampler,
  Tierney 1994, Ann. Statist. 22(4));
- ``BlockRefresh``: one randomly chosen block of the noise (e.g. one auxiliary draw of K), the
  rest kept, which keeps consecutive estimates correlated and the acceptance rate high
  (block-wise pseudo-marginal, Tran, Kohn, Quiroz & Villani 2016, arXiv:1603.02485).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax import random

from zhat.kernels._noise import NoiseKernel
from zhat.kernels._shell import AlgorithmState, LogDensityFn

Array = jax.Array

__all__ = ["BlockRefresh", "IndependentRefresh", "RefreshInfo", "build_kernel"]


class RefreshInfo(NamedTuple):
    """Per-site acceptance of the last step."""

    accepted: Array
    accept_prob: Array


def _blocks(size: int, leading: int, num_blocks: int | None) -> int:
    if num_blocks is None:
        num_blocks = leading if leading > 1 else 4
    return max(1, min(int(num_blocks), size))


def build_kernel(
    sites: Sequence[str], shapes: dict[str, tuple[int, ...]], num_blocks: int | None = 1
) -> tuple[Callable, Callable]:
    """Pure ``(init, step)``: each site in turn gets one Metropolis refresh of one block.

    ``num_blocks=1`` refreshes the whole site (independence sampler).
    """
    sites = tuple(sites)
    plan = {}
    for s in sites:
        size = math.prod(shapes[s]) if shapes[s] else 1
        b = _blocks(size, shapes[s][0] if shapes[s] else 1, num_blocks)
        plan[s] = (size, b, math.ceil(size / b))

    def init(z: dict[str, Array], loglik_fn: LogDensityFn) -> AlgorithmState:
        zero = jnp.zeros((len(sites),))
        info = RefreshInfo(jnp.zeros((len(sites),), bool), zero)
        return AlgorithmState(z, jnp.asarray(loglik_fn(z)), info)

    def step(rng_key: Array, state: Any, loglik_fn: LogDensityFn):
        z, loglik = dict(state.z), state.logdensity
        accepted, probs = [], []
        for i, site in enumerate(sites):
            key_block, key_fresh, key_accept = random.split(random.fold_in(rng_key, i), 3)
            size, b, width = plan[site]
            flat = z[site].reshape(-1)
            fresh = random.normal(key_fresh, flat.shape, flat.dtype)
            if b > 1:
                block = random.randint(key_block, (), 0, b)
                in_block = (jnp.arange(size) // width) == block
                fresh = jnp.where(in_block, fresh, flat)
            proposal = {**z, site: fresh.reshape(z[site].shape)}
            new = loglik_fn(proposal)
            log_ratio = jnp.where(jnp.isnan(new), -jnp.inf, new - loglik)
            prob = jnp.minimum(1.0, jnp.exp(log_ratio))
            ok = random.uniform(key_accept) < prob
            z[site] = jnp.where(ok, proposal[site], z[site])
            loglik = jnp.where(ok, new, loglik)
            accepted.append(ok)
            probs.append(prob)
        return AlgorithmState(z, loglik), RefreshInfo(jnp.stack(accepted), jnp.stack(probs))

    return init, step


class _Refresh(NoiseKernel):
    """Shared shell of the two refresh kernels."""

    def __init__(self, model: Callable, num_blocks: int | None) -> None:
        if num_blocks is not None and (not isinstance(num_blocks, int) or num_blocks < 1):
            raise ValueError(f"num_blocks must be a positive integer, got {num_blocks!r}.")
        self._num_blocks = num_blocks
        super().__init__(model)

    def _algorithm(self, model_trace: dict[str, Any], num_warmup: int):
        shapes = {s: tuple(jnp.shape(model_trace[s]["value"])) for s in self._sites}
        return build_kernel(self._sites, shapes, self._num_blocks)

    def get_diagnostics_str(self, state: Any) -> str:
        return f"refresh acc. {float(jnp.mean(state.info.accept_prob)):.2f}"


class IndependentRefresh(_Refresh):
    """Refresh each noise site whole from N(0, I), accepted on the estimator ratio."""

    def __init__(self, model: Callable) -> None:
        super().__init__(model, 1)


class BlockRefresh(_Refresh):
    """Refresh one random block of each noise site (default: one entry of its leading axis,
    e.g. one auxiliary draw of K; or a quarter of it when the leading axis has length 1).

    :param model: the exposed model.
    :param num_blocks: number of blocks each site's noise is cut into.
    """

    def __init__(self, model: Callable, *, num_blocks: int | None = None) -> None:
        super().__init__(model, num_blocks)
