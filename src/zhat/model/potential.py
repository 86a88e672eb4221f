"""``as_potential``: a model with each unnormalized family's density replaced by log g.

Where a kernel needs the unnormalized density itself — the exchange algorithm's target
p(θ) g(y; θ), whose missing 1/Z(θ) the auxiliary draw cancels — or where a block of a Gibbs
sampler updates sites that do not enter any family (then Z(θ) is a constant of that block's
conditional), the model is run under this handler. It is *not* the posterior for sites that
enter a family: the kernels that use it check this.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import jax
import jax.numpy as jnp
from jax.typing import ArrayLike
from numpyro.distributions import Distribution, constraints
from numpyro.primitives import Messenger

from zhat.model.unnormalized import UnnormalizedDistribution

Array = jax.Array

__all__ = ["PotentialOnly", "as_potential", "potential_sites"]


class PotentialOnly(Distribution):
    """The unnormalized density g(x; θ) of a family member, without its normalizer."""

    support = constraints.real
    pytree_data_fields = ("dist",)

    def __init__(self, dist: UnnormalizedDistribution, event_shape: tuple[int, ...]) -> None:
        self.dist = dist
        super().__init__(batch_shape=(), event_shape=tuple(event_shape))

    def log_prob(self, value: ArrayLike) -> Array:
        return self.dist.log_potential(value)

    def sample(self, key: Array, sample_shape: tuple[int, ...] = ()) -> Array:
        raise NotImplementedError("Draw from the family's own samplers instead.")


class as_potential(Messenger):
    """Run ``fn`` with each observed unnormalized family's density replaced by log g."""

    def __init__(self, fn: Callable | None = None) -> None:
        if isinstance(fn, as_potential):
            fn = fn.fn
        super().__init__(fn)

    def process_message(self, msg: dict[str, Any]) -> None:
        if msg["type"] == "sample" and isinstance(msg["fn"], UnnormalizedDistribution):
            if not msg["is_observed"]:
                raise ValueError(
                    f"The {msg['fn'].kind} at site '{msg['name']}' is not observed; pass `obs=`."
                )
            msg["fn"].validate_data(msg["value"], msg["name"])
            msg["fn"] = PotentialOnly(msg["fn"], jnp.shape(msg["value"]))


def potential_sites(model_trace: dict[str, dict[str, Any]]) -> dict[str, tuple[Any, Array]]:
    """The family sites of a trace under :class:`as_potential`: name → (distribution, data)."""
    return {
        name: (site["fn"].dist, jnp.asarray(site["value"]))
        for name, site in model_trace.items()
        if site["type"] == "sample" and isinstance(site["fn"], PotentialOnly)
    }
