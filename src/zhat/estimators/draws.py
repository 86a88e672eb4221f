"""Auxiliary draws from a family, exact or approximate, as functions of explicit noise."""

from __future__ import annotations

import math

import jax
import jax.numpy as jnp
from jax import lax

from zhat.model.unnormalized import UnnormalizedDistribution

Array = jax.Array

__all__ = ["AuxiliaryDraws"]


class AuxiliaryDraws:
    """How an auxiliary draw x ~ p(· | θ) is obtained from explicit noise.

    ``sampler="perfect"``: the family's perfect sampler with a budget of ``budget`` sweeps
    (exact when it coalesces); otherwise the named family simulator run for ``sweeps``
    transitions from the observed data (approximate).
    """

    def __init__(self, sampler: str, sweeps: int, budget: int, what: str) -> None:
        if not isinstance(sweeps, int) or sweeps < 1:
            raise ValueError(f"sweeps must be a positive integer, got {sweeps!r}.")
        if not isinstance(budget, int) or budget < 1:
            raise ValueError(f"budget must be a positive integer, got {budget!r}.")
        self.sampler, self.sweeps, self.budget, self.what = sampler, sweeps, budget, what

    @property
    def exact(self) -> bool:
        return self.sampler == "perfect"

    def check(self, dist: UnnormalizedDistribution) -> None:
        family = dist.family
        if self.exact and family.perfect_sampler is None:
            raise ValueError(
                f"{self.what}(sampler='perfect'): family '{family.name}' has no perfect sampler. "
                f"Use a simulator instead (one of {sorted(family.simulators)}), which makes the "
                "estimator approximate."
            )
        if not self.exact and self.sampler not in family.simulators:
            raise ValueError(
                f"{self.what}: family '{family.name}' has no simulator '{self.sampler}'; it has "
                f"{sorted(family.simulators)} and "
                f"{'a' if family.perfect_sampler else 'no'} perfect sampler."
            )

    def size(self, dist: UnnormalizedDistribution, data: Array) -> tuple[int, tuple[int, ...]]:
        family = dist.family
        if self.exact:
            shape = family.perfect_sampler.noise_shape(self.budget)
        else:
            shape = (self.sweeps, *family.simulators[self.sampler].noise_shape(data))
        return math.prod(shape), shape

    def draw_with_key(self, dist: UnnormalizedDistribution, data: Array, key: Array, dtype):
        """The same draw for a kernel with its own randomness (noise drawn only as needed)."""
        if self.exact:
            return dist.family.perfect_sampler.draw(dist.params, key, self.budget)
        size, shape = self.size(dist, data)
        return self.draw(dist, data, jax.random.normal(key, (size,), dtype), shape)

    def draw(self, dist: UnnormalizedDistribution, data: Array, noise: Array, shape):
        family = dist.family
        noise = noise.reshape(shape)
        if self.exact:
            x, ok = family.perfect_sampler.draw(dist.params, noise)
            return x, ok
        step = family.simulators[self.sampler].step
        x0 = jnp.asarray(data).reshape(-1)
        x = lax.scan(lambda x, z: (step(dist.params, x, z).astype(x0.dtype), None), x0, noise)[0]
        return x, jnp.array(True)
