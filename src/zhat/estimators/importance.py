"""Importance sampling estimator of a marginal likelihood, with a reparameterised Gaussian proposal.

For a latent block z with joint density p(y, z | θ) and a Gaussian importance density
q_θ(z) = N(z; m_θ, diag(s_θ²)), draw z_k = m_θ + s_θ ⊙ u_k with u_k ~ N(0, I), k = 1..K, and

    p̂(y | θ, u) = (1/K) Σ_k  p(y, z_k | θ) / q_θ(z_k),

computed as a log-mean-exp. E_u[p̂] = p(y | θ) exactly (unbiased), and log p̂ is a smooth
function of (θ, u), so gradient-based kernels may act on the joint space (θ, u).
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


def importance_sampling(num_draws: int = 16) -> Estimator:
    """Importance-sampling estimator with ``num_draws`` Gaussian draws (see module docstring)."""
    if not (isinstance(num_draws, int) and num_draws >= 1):
        raise ValueError(f"num_draws must be a positive integer, got {num_draws!r}.")

    def noise_shape(factor: IntractableFactor, data: Array) -> tuple[int, ...]:
        factor = _require_integrated(factor)
        return (num_draws, *factor.latent_shape)

    def log_estimate(factor: IntractableFactor, data: Array, noise: Array) -> Array:
        factor = _require_integrated(factor)
        loc, scale = factor.proposal_loc, factor.proposal_scale
        draws = loc + scale * noise
        event_axes = tuple(range(1, noise.ndim))
        log_q = jnp.sum(
            -0.5 * noise**2 - jnp.log(scale) - 0.5 * math.log(2 * math.pi), axis=event_axes
        )
        log_joint = jax.vmap(factor.log_joint)(draws)
        return logsumexp(log_joint - log_q) - math.log(num_draws)

    return Estimator(
        name=f"importance sampling (K={num_draws})",
        noise_shape=noise_shape,
        log_estimate=log_estimate,
        unbiased=True,
        smooth=True,
        note="unbiased; smooth in (θ, u)",
    )
