"""Latent blocks integrated out by an estimator: the marginal-likelihood factor.

For a latent block z with joint density p(y, z | θ), the factor kept in the model is the
marginal likelihood

    p(y | θ) = ∫ p(y, z | θ) dz,

the normalizing constant of the conditional p(z | y, θ). :func:`integrate_out` marks such a
factor; :func:`zhat.expose` replaces it by a positive unbiased estimate of p(y | θ) (importance
sampling, annealed importance sampling, ...) whose randomness is an exposed noise site.
"""

from __future__ import annotations

from collections.abc import Callable

import jax
import jax.numpy as jnp
import numpyro
from jax.typing import ArrayLike

from zhat.model.factor import Estimator, IntractableFactor

Array = jax.Array
LogJointFn = Callable[[Array], Array]


class IntegratedFactor(IntractableFactor):
    """The marginal likelihood ∫ exp(log_joint(z)) dz of a latent block of shape ``latent_shape``.

    ``proposal`` is ``(loc, scale)`` of a Gaussian importance density for z, broadcastable to
    ``latent_shape``; it may depend on the parameters (e.g. a Laplace approximation).
    """

    kind = "integrated latent block"
    pytree_data_fields = ("proposal_loc", "proposal_scale")
    pytree_aux_fields = ("log_joint", "latent_shape")

    def __init__(
        self,
        log_joint: LogJointFn,
        latent_shape: tuple[int, ...],
        proposal: tuple[ArrayLike, ArrayLike] | None = None,
        *,
        estimator: Estimator | None = None,
    ) -> None:
        if not callable(log_joint):
            raise TypeError(
                f"integrate_out needs `log_joint`, a function of the latent block; got "
                f"{log_joint!r}."
            )
        self.log_joint = log_joint
        self.latent_shape = tuple(int(n) for n in latent_shape)
        if proposal is None:
            self.proposal_loc = self.proposal_scale = None
        else:
            loc, scale = (jnp.asarray(p) for p in proposal)
            try:
                self.proposal_loc = jnp.broadcast_to(loc, self.latent_shape)
                self.proposal_scale = jnp.broadcast_to(scale, self.latent_shape)
            except ValueError as err:
                raise ValueError(
                    f"The proposal (loc shape {loc.shape}, scale shape {scale.shape}) does not "
                    f"broadcast to the latent shape {self.latent_shape}."
                ) from err
        super().__init__(batch_shape=(), event_shape=(), estimator=estimator)


def integrate_out(
    name: str,
    log_joint: LogJointFn,
    latent_shape: tuple[int, ...],
    *,
    proposal: tuple[ArrayLike, ArrayLike] | None = None,
    estimator: Estimator | None = None,
) -> None:
    """Add the factor p(y | θ) = ∫ exp(log_joint(z)) dz to the model, under site ``name``.

    :param name: the site name (the factor's noise site is ``f"{name}_noise"``).
    :param log_joint: ``z -> log p(y, z | θ)`` for one latent block z of ``latent_shape``;
        close over the parameters and data inside the model.
    :param latent_shape: shape of z.
    :param proposal: ``(loc, scale)`` of a Gaussian importance density for z.
    :param estimator: the estimator of the integral; may also be chosen in :func:`zhat.expose`.
    """
    factor = IntegratedFactor(log_joint, latent_shape, proposal, estimator=estimator)
    numpyro.sample(name, factor, obs=jnp.zeros(()))
