"""Slice sampling for parameter blocks (Neal 2003, Ann. Statist. 31(3), "Slice sampling").

One step is either a sweep of univariate slice updates over every unconstrained coordinate
(``method="coordinate"``, slice-within-Gibbs) or one univariate slice along a random direction
(``method="direction"``, hit-and-run). Brackets are found by doubling (with Neal's Fig. 6
acceptance test) or stepping out, then shrunk. Slice sampling needs no gradient, so it suits
estimators whose log f̂ is only piecewise smooth in θ. The kernel wraps BlackJAX's slice
samplers; it works in the unconstrained space of the block's sites (log-Jacobians included).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp

from zhat.kernels._shell import AlgorithmState, LogDensityFn, ModelKernel

Array = jax.Array

__all__ = ["Slice", "SliceInfo", "build_kernel"]

_INTERVALS = ("doubling", "stepping_out")


class SliceInfo(NamedTuple):
    """Diagnostics of one step: interval expansions and shrinkage evaluations."""

    num_expansions: Array
    num_shrink: Array


def build_kernel(
    method: str = "coordinate",
    width: float = 1.0,
    interval: str = "doubling",
    max_expansions: int = 10,
    max_shrinkage: int = 100,
) -> tuple[Callable, Callable]:
    """Pure ``(init, step)`` of the slice sampler over a dict of unconstrained values."""
    # imported here: importing BlackJAX starts JAX's backend, which zhat.compile_small_loops
    # must come before
    import blackjax.mcmc.slice as bslice

    if method not in ("coordinate", "direction"):
        raise ValueError(f"Slice method must be 'coordinate' or 'direction', got {method!r}.")
    if interval not in _INTERVALS:
        raise ValueError(f"Slice interval must be one of {sorted(_INTERVALS)}, got {interval!r}.")
    if not width > 0:
        raise ValueError(f"Slice width must be positive, got {width!r}.")
    if method == "coordinate":
        kernel = bslice.build_coordinate_kernel(
            interval=getattr(bslice, interval),
            initial_widths=width,
            max_expansions=max_expansions,
            max_shrinkage=max_shrinkage,
        )
        run = kernel
    else:
        kernel = bslice.build_kernel(getattr(bslice, interval), max_expansions, max_shrinkage)

        def run(key: Array, state: Any, fn: LogDensityFn):
            return kernel(key, state, fn, bslice.direction_proposal(), width)

    def init(z: dict[str, Array], logdensity_fn: LogDensityFn) -> AlgorithmState:
        zero = jnp.zeros((), jnp.int32)
        return AlgorithmState(z, jnp.asarray(logdensity_fn(z)), SliceInfo(zero, zero))

    def step(rng_key: Array, state: Any, logdensity_fn: LogDensityFn):
        new, info = run(rng_key, bslice.SliceState(state.z, state.logdensity), logdensity_fn)
        out = SliceInfo(
            jnp.asarray(info.num_expansions, jnp.int32), jnp.asarray(info.num_shrink, jnp.int32)
        )
        return AlgorithmState(new.position, new.logdensity, None), out

    return init, step


class Slice(ModelKernel):
    """Slice sampling of a parameter block; runs alone or as a block of NumPyro's ``Gibbs``.

    :param model: the (exposed) model.
    :param method: ``"coordinate"`` (sweep every coordinate) or ``"direction"`` (random line).
    :param width: initial bracket width in unconstrained units.
    :param interval: ``"doubling"`` or ``"stepping_out"``.
    :param max_expansions: cap on bracket expansions per slice.
    :param max_shrinkage: cap on shrinkage evaluations per slice (the chain stays put beyond it).
    """

    def __init__(
        self,
        model: Callable,
        *,
        method: str = "coordinate",
        width: float = 1.0,
        interval: str = "doubling",
        max_expansions: int = 10,
        max_shrinkage: int = 100,
    ) -> None:
        self._options = dict(
            method=method,
            width=width,
            interval=interval,
            max_expansions=max_expansions,
            max_shrinkage=max_shrinkage,
        )
        build_kernel(**self._options)  # validate options now, not at init
        super().__init__(model)

    def _algorithm(self, model_trace: dict[str, Any], num_warmup: int) -> tuple[Callable, Callable]:
        return build_kernel(**self._options)

    def get_diagnostics_str(self, state: Any) -> str:
        return f"{int(jnp.sum(state.info.num_shrink))} shrink evals"
