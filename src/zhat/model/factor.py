"""The two objects the rest of zhat is built around: an intractable factor and its estimator.

An *intractable factor* is a site of a NumPyro model whose density f(θ) cannot be evaluated:
the likelihood g(y; θ)/Z(θ) of a family with an unknown normalizer, or the marginal
likelihood ∫ p(y, z | θ) dz of a latent block. An *estimator* replaces it by a deterministic,
positive function f̂(θ, u) of standard-normal noise u with E_u[f̂(θ, u)] ∝ f(θ). Exposing u as a
latent site with a N(0, I) prior gives the joint target

    π(θ, u) ∝ p(θ) f̂(θ, u) N(u; 0, I),

whose θ-marginal is the exact posterior (Andrieu & Roberts 2009, Ann. Statist. 37(2)), so any
valid MCMC kernel on (θ, u) is a correct pseudo-marginal sampler. Estimators that are only
approximately unbiased (e.g. built on finite MCMC runs instead of perfect draws) say so through
``unbiased=False``; every summary repeats the flag.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax.typing import ArrayLike
from numpyro.distributions import Distribution, constraints

Array = jax.Array
NoiseShapeFn = Callable[["IntractableFactor", Array], tuple[int, ...]]
LogEstimateFn = Callable[["IntractableFactor", Array, Array], Array]


class NotExposedError(RuntimeError):
    """The log density of an intractable factor was requested outside :func:`zhat.expose`."""


class Estimator(NamedTuple):
    """A published estimator of an intractable factor, as two pure functions and two flags.

    - **name** - short name shown in summaries.
    - **noise_shape** - ``(factor, data) -> shape`` of the standard-normal noise block it uses.
    - **log_estimate** - ``(factor, data, noise) -> log f̂`` (a scalar); deterministic in its
      arguments, it never draws randomness of its own.
    - **unbiased** - ``True`` when E_u[f̂] ∝ f exactly (exact pseudo-marginal); ``False`` for
      approximate estimators, which every summary flags.
    - **smooth** - ``True`` when log f̂ is differentiable in (θ, u), so gradient-based kernels
      (NUTS, HMC) may act on the joint space; otherwise use slice or Gibbs blocks.
    - **note** - one line on what the estimator assumes (shown in summaries).
    - **num_draws** - the number of averaged draws, when that is what sets its variance
      (used to recommend a number for a target noise level).
    """

    name: str
    noise_shape: NoiseShapeFn
    log_estimate: LogEstimateFn
    unbiased: bool
    smooth: bool
    note: str = ""
    num_draws: int | None = None


class IntractableFactor(Distribution):
    """Base class of every distribution whose density zhat replaces by an estimate.

    Subclasses set ``kind`` (a word for messages), may offer a documented default estimator
    through :meth:`default_estimator`, and never compute a log density themselves: outside
    :func:`zhat.expose` :meth:`log_prob` raises :class:`NotExposedError` naming the site.
    """

    kind: str = "intractable factor"
    pytree_aux_fields = ("_estimator",)

    def __init__(
        self,
        batch_shape: tuple[int, ...] = (),
        event_shape: tuple[int, ...] = (),
        *,
        estimator: Estimator | None = None,
    ) -> None:
        self._estimator = estimator
        super().__init__(batch_shape=batch_shape, event_shape=event_shape)

    def default_estimator(self) -> Estimator | None:
        """The estimator used when none is given: the site's own, else the family's default."""
        return self._estimator

    def validate_data(self, value: ArrayLike, site: str) -> None:
        """Raise a clear error when concrete observed data cannot come from this factor."""

    def log_prob(self, value: ArrayLike) -> Array:
        site = _calling_site_name(self)
        where = f"site '{site}'" if site else "a site"
        raise NotExposedError(
            f"The {self.kind} at {where} has an intractable normalizing constant, so its log "
            "density cannot be evaluated. Wrap the model with `zhat.expose(model)` (choosing "
            "an estimator, e.g. `zhat.expose(model, estimators={...})`) and run inference on "
            "the exposed model."
        )

    def sample(self, key: Array, sample_shape: tuple[int, ...] = ()) -> Array:
        raise NotImplementedError(
            f"The {self.kind} has no sampler; give the family a simulator or perfect sampler."
        )

    support = constraints.real


def _calling_site_name(fn: Distribution) -> str | None:
    """Name of the trace site whose ``fn`` is ``fn``, read from NumPyro's calling frame.

    Only used to word an error: NumPyro computes log densities in a loop over trace sites
    (``for name, site in trace.items()``) without telling the distribution its name.
    """
    frame = inspect.currentframe()
    for _ in range(8):
        if frame is None:
            return None
        frame = frame.f_back
        if frame is None:
            return None
        site: Any = frame.f_locals.get("site")
        if isinstance(site, dict) and site.get("fn") is fn:
            return site.get("name")
    return None


def as_scalar_log(value: ArrayLike, what: str) -> Array:
    """Check that an estimator returned one finite-or-(-inf) scalar; raise a clear error if not."""
    value = jnp.asarray(value)
    if value.shape != ():
        raise ValueError(
            f"{what} returned a log estimate of shape {value.shape}; an estimator must return "
            "one scalar per factor (sum over independent pieces inside the estimator)."
        )
    return value
