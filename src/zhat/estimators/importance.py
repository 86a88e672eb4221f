"""Importance sampling estimator of a marginal likelihood, with a reparameterised Gaussian proposal.

For a latent block z with joint density p(y, z | θ) and a Gaussian importance density
q_θ(z) = N(z; m_θ, diag(s_θ²)), draw z_k = m_θ + s_θ ⊙ u_k with u_k ~ N(0, I), k = 1..K, and

    p̂(y | θ, u) = (1/K) Σ_k  p(y, z_k | θ) / q_θ(z_k),

computed as a log-mean-exp. E_u[p̂] = p(y | θ) exactly (unbiased), and log p̂ is a smooth
function of (θ, u), so gradient-based kernels may act on the joint space (θ, u).
With ``per_group=True`` the latent block has a leading group axis, z = (z_1, ..., z_G), and
``log_joint`` returns the G terms log p(y_g, z_g | θ) of a joint that factorises over groups
(random effects). Each group then gets its own K draws and

    p̂(y | θ, u) = Π_g (1/K) Σ_k p(y_g, z_gk | θ) / q_θ(z_gk),

a product of independent unbiased estimates, hence unbiased; its log variance grows like G/K
rather than exponentially in G.
The variance of log p̂ falls roughly as 1/K when q is close to p(z | y, θ); keep
sd(log p̂) near 1–1.7 for Metropolis-type moves (Doucet, Pitt, Deligiannidis & Kohn 2015,
Biometrika 102(2)).

Reference: Geweke (1989), "Bayesian inference in econometric models using Monte Carlo
integration", Econometrica 57(6); Beaumont (2003), Genetics 164(3) (its use inside MCMC).
Assumptions: q has heavier or comparable tails to p(z | y, θ); otherwise the estimator is still
unbiased but its variance may be infinite.
"""

from __future__ import annotations

import math

import jax
import jax.numpy as jnp
from jax.scipy.special import logsumexp

from zhat.model.factor import Estimator, IntractableFactor
from zhat.model.integrate import IntegratedFactor

Array = jax.Array

__all__ = ["importance_sampling"]


def _require_integrated(factor: IntractableFactor) -> IntegratedFactor:
    if not isinstance(factor, IntegratedFactor):
        raise TypeError(
            "importance_sampling estimates marginal likelihoods of blocks marked with "
            f"`zhat.integrate_out`; it cannot serve a {factor.kind}. Pick an estimator made for "
            "that family (see the family's documentation)."
        )
    if factor.proposal_loc is None:
        raise ValueError(
            "importance_sampling needs a Gaussian proposal for the latent block: pass "
            "`proposal=(loc, scale)` to `zhat.integrate_out` (e.g. the latent prior, or a "
            "Laplace approximation of p(z | y, θ))."
        )
    return factor


def importance_sampling(num_draws: int = 16, *, per_group: bool = False) -> Estimator:
    """Importance-sampling estimator with ``num_draws`` Gaussian draws (see module docstring).

    :param num_draws: K, the number of importance draws (per group when ``per_group``).
    :param per_group: the joint factorises over the leading latent axis; ``log_joint`` then
        returns one term per group and each group is estimated with its own draws.
    """
    if not (isinstance(num_draws, int) and num_draws >= 1):
        raise ValueError(f"num_draws must be a positive integer, got {num_draws!r}.")

    def noise_shape(factor: IntractableFactor, data: Array) -> tuple[int, ...]:
        factor = _require_integrated(factor)
        if per_group and not factor.latent_shape:
            raise ValueError("per_group=True needs a latent block with a leading group axis.")
        return (num_draws, *factor.latent_shape)

    def log_estimate(factor: IntractableFactor, data: Array, noise: Array) -> Array:
        factor = _require_integrated(factor)
        loc, scale = factor.proposal_loc[None], factor.proposal_scale[None]
        draws = loc + scale * noise
        log_q_terms = -0.5 * noise**2 - jnp.log(scale) - 0.5 * math.log(2 * math.pi)
        log_joint = jax.vmap(factor.log_joint)(draws)
        if per_group:
            groups = factor.latent_shape[0]
            if log_joint.shape != (num_draws, groups):
                raise ValueError(
                    "importance_sampling(per_group=True) needs `log_joint` to return one term "
                    f"per group, shape ({groups},) for latent shape {factor.latent_shape}; "
                    f"got shape {log_joint.shape[1:]}."
                )
            log_q = jnp.sum(log_q_terms, axis=tuple(range(2, noise.ndim)))
            return jnp.sum(logsumexp(log_joint - log_q, axis=0) - math.log(num_draws))
        if log_joint.shape != (num_draws,):
            raise ValueError(
                f"`log_joint` must return a scalar per latent draw; got shape "
                f"{log_joint.shape[1:]}. Sum its terms, or use per_group=True."
            )
        log_q = jnp.sum(log_q_terms, axis=tuple(range(1, noise.ndim)))
        return logsumexp(log_joint - log_q) - math.log(num_draws)

    return Estimator(
        name=f"importance sampling (K={num_draws}{', per group' if per_group else ''})",
        noise_shape=noise_shape,
        log_estimate=log_estimate,
        unbiased=True,
        smooth=True,
        note="unbiased; smooth in (θ, u)",
        num_draws=num_draws,
    )
