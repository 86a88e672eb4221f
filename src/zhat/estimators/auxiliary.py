"""Auxiliary-draw estimators of g(y; θ)/Z(θ) for families with an intractable normalizer.

Single auxiliary variable (Møller, Pettitt, Reeves & Berthelsen 2006, Biometrika 93(2)). With
draws x_k ~ p(· | θ), k = 1..K, and a reference point θ̂,

    f̂(θ, u) = g(y; θ) · (1/K) Σ_k g(x_k; θ̂) / g(x_k; θ),

and E[g(x; θ̂)/g(x; θ)] = Z(θ̂)/Z(θ), so E_u[f̂] = Z(θ̂) · g(y; θ)/Z(θ) ∝ the likelihood; the
constant Z(θ̂) does not depend on θ.

Multiple auxiliary variables, annealed (Murray, Ghahramani & MacKay 2006, UAI, "MCMC for
doubly-intractable distributions"): along θ_t = θ + (t/T)(θ̂ − θ), t = 0..T, start from an exact
draw x_0 ~ p(· | θ_0), and for t = 1..T multiply the weight by g(x_{t−1}; θ_t)/g(x_{t−1}; θ_{t−1})
and then move x_{t−1} → x_t by transitions that leave p(· | θ_t) invariant. The weight has mean
Z(θ̂)/Z(θ) (annealed importance sampling, Neal 2001, Statist. Comput. 11(2)), so

    f̂(θ, u) = g(y; θ) · (1/K) Σ_k w_k

is again unbiased up to Z(θ̂). The more temperatures, the closer each ratio is to one and the
smaller the variance.

Exactness. With ``sampler="perfect"`` the draws x_0 come from the family's perfect sampler: the
estimators are unbiased *when the perfect sampler succeeds*; a draw that did not coalesce within
its budget makes the estimate 0 (log f̂ = −inf), so the chain rejects that proposal, and the
failure rate is reported by the diagnostics — raise the budget if it is not negligible. With a
simulator (``sampler="gibbs"`` or ``"swendsen_wang"``) x_0 is the end of ``sweeps`` transitions
started at the observed y: the estimator is APPROXIMATE (biased by the run's distance from
p(· | θ)) and is flagged so in every summary.

All randomness is the exposed standard-normal noise (uniforms through Φ inside the samplers).
The estimates are piecewise constant in u and in θ: use slice or Metropolis-type moves.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import jax
import jax.numpy as jnp
from jax import lax
from jax.scipy.special import logsumexp

from zhat.estimators._reference import ReferenceCache
from zhat.estimators.draws import AuxiliaryDraws
from zhat.model.factor import Estimator, IntractableFactor
from zhat.model.unnormalized import UnnormalizedDistribution

Array = jax.Array

__all__ = ["multiple_auxiliary", "single_auxiliary"]


def _require_family(factor: IntractableFactor, what: str) -> UnnormalizedDistribution:
    if not isinstance(factor, UnnormalizedDistribution):
        raise TypeError(
            f"{what} estimates likelihoods of unnormalized families; it cannot serve a "
            f"{factor.kind}. For latent blocks use zhat.estimators.importance_sampling."
        )
    return factor


def _interpolate(theta: dict[str, Array], ref: dict[str, Array], names, t: Array):
    return {k: (theta[k] + t * (ref[k] - theta[k]) if k in names else theta[k]) for k in theta}


def single_auxiliary(
    num_draws: int = 1,
    *,
    sampler: str = "perfect",
    sweeps: int = 100,
    budget: int = 1024,
    reference: str | Mapping[str, Any] = "pseudo_likelihood",
) -> Estimator:
    """Single auxiliary-variable estimator (see module docstring).

    :param num_draws: K auxiliary draws averaged.
    :param sampler: ``"perfect"`` (exact) or the name of a family simulator (approximate).
    :param sweeps: transitions of the simulator run per draw (approximate samplers only).
    :param budget: largest number of sweeps of the perfect sampler per draw.
    :param reference: ``"pseudo_likelihood"`` (θ̂ = maximum pseudo-likelihood from the data)
        or a dict of parameter values.
    """
    return _auxiliary("single_auxiliary", num_draws, 0, 1, sampler, sweeps, budget, reference)


def multiple_auxiliary(
    num_temperatures: int = 10,
    *,
    num_draws: int = 1,
    sweeps_per_temperature: int = 1,
    sampler: str = "perfect",
    transition: str = "gibbs",
    sweeps: int = 100,
    budget: int = 1024,
    reference: str | Mapping[str, Any] = "pseudo_likelihood",
) -> Estimator:
    """Annealed multiple auxiliary-variable estimator (see module docstring).

    :param num_temperatures: T, the number of steps from θ to θ̂.
    :param num_draws: K independent annealed weights averaged.
    :param sweeps_per_temperature: transitions at each intermediate θ_t.
    :param sampler: how x_0 is drawn: ``"perfect"`` (exact) or a simulator name (approximate).
    :param transition: the family simulator used between temperatures.
    :param sweeps: transitions per draw when ``sampler`` is a simulator.
    :param budget: largest number of sweeps of the perfect sampler per draw.
    :param reference: ``"pseudo_likelihood"`` or a dict of parameter values.
    """
    if not isinstance(num_temperatures, int) or num_temperatures < 1:
        raise ValueError(f"num_temperatures must be a positive integer, got {num_temperatures!r}.")
    if not isinstance(sweeps_per_temperature, int) or sweeps_per_temperature < 1:
        raise ValueError(
            f"sweeps_per_temperature must be a positive integer, got {sweeps_per_temperature!r}."
        )
    return _auxiliary(
        "multiple_auxiliary",
        num_draws,
        num_temperatures,
        sweeps_per_temperature,
        sampler,
        sweeps,
        budget,
        reference,
        transition,
    )


def _auxiliary(
    what: str,
    num_draws: int,
    temperatures: int,
    per_temperature: int,
    sampler: str,
    sweeps: int,
    budget: int,
    reference: str | Mapping[str, Any],
    transition: str = "gibbs",
) -> Estimator:
    if not isinstance(num_draws, int) or num_draws < 1:
        raise ValueError(f"num_draws must be a positive integer, got {num_draws!r}.")
    draws = AuxiliaryDraws(sampler, sweeps, budget, what)
    references = ReferenceCache(reference)

    def layout(dist: UnnormalizedDistribution, data: Array):
        draws.check(dist)
        if temperatures and transition not in dist.family.simulators:
            raise ValueError(
                f"{what}: family '{dist.family.name}' has no simulator '{transition}' for the "
                f"moves between temperatures; it has {sorted(dist.family.simulators)}."
            )
        first, first_shape = draws.size(dist, data)
        move_shape = dist.family.simulators[transition].noise_shape(data) if temperatures else ()
        moves = temperatures * per_temperature * math.prod(move_shape)
        return first, first_shape, moves, move_shape

    def noise_shape(factor: IntractableFactor, data: Array) -> tuple[int, ...]:
        dist = _require_family(factor, what)
        first, _, moves, _ = layout(dist, data)
        return (num_draws, first + moves)

    def log_estimate(factor: IntractableFactor, data: Array, noise: Array) -> Array:
        dist = _require_family(factor, what)
        first, first_shape, moves, move_shape = layout(dist, data)
        theta = dist.params
        ref = references(dist, data, None if draws.exact else draws.sampler)
        names = dist.family.free_parameters
        log_g = lambda params, x: dist.family.log_potential(x, **params)  # noqa: E731

        def one(u: Array) -> Array:
            x, ok = draws.draw(dist, data, u[:first], first_shape)
            if not temperatures:
                log_w = log_g(ref, x) - log_g(theta, x)
            else:
                step = dist.family.simulators[transition].step
                u_moves = u[first:].reshape(temperatures, per_temperature, *move_shape)

                def anneal(carry, inputs):
                    x, log_w = carry
                    t, z = inputs
                    prev = _interpolate(theta, ref, names, (t - 1) / temperatures)
                    here = _interpolate(theta, ref, names, t / temperatures)
                    log_w = log_w + log_g(here, x) - log_g(prev, x)
                    x = lax.scan(lambda x, zz: (step(here, x, zz).astype(x.dtype), None), x, z)[0]
                    return (x, log_w), None

                ts = jnp.arange(1, temperatures + 1, dtype=u.dtype)
                (_, log_w), _ = lax.scan(anneal, (x, jnp.zeros((), u.dtype)), (ts, u_moves))
            return jnp.where(ok, log_w, -jnp.inf)

        log_w = jax.vmap(one)(noise)
        return log_g(theta, data) + logsumexp(log_w) - jnp.log(num_draws)

    exact = draws.exact
    label = (
        f"single auxiliary (K={num_draws}"
        if not temperatures
        else f"annealed multiple auxiliary (T={temperatures}, K={num_draws}"
    )
    label += ", perfect draws)" if exact else f", {sweeps} {sampler} sweeps: APPROXIMATE)"
    return Estimator(
        name=label,
        noise_shape=noise_shape,
        log_estimate=log_estimate,
        unbiased=exact,
        smooth=False,
        note=(
            "unbiased when the perfect sampler coalesces; piecewise constant in (θ, u)"
            if exact
            else f"approximate: auxiliary draws from {sweeps} {sampler} sweeps, not exact draws"
        ),
        num_draws=num_draws,
    )
