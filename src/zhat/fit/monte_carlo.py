"""Monte Carlo maximum likelihood (Geyer & Thompson 1992, JRSS B 54(3), 657–699).

With M draws x_m from p(· | ψ) at a point ψ, the log-likelihood ratio is estimated by

    ℓ̂(θ) = log g(y; θ) − log g(y; ψ) − log (1/M) Σ_m exp(log g(x_m; θ) − log g(x_m; ψ)),

since Z(θ)/Z(ψ) = E_ψ[g(x; θ)/g(x; ψ)]; for an exponential family the sum is over
exp((θ − ψ)·s(x_m)) and ℓ̂ is concave. ℓ̂ (+ log π(θ) for MAP) is maximised by damped Newton
steps. The approximation is only trustworthy where the importance weights
w_m ∝ g(x_m; θ)/g(x_m; ψ) are not dominated by a few draws: whenever a step would bring the
effective sample size (Σ w)²/Σ w² below ``min_ess`` · M, the step is shortened to stay above
it, ψ moves there and new draws are simulated (a trust region, as Geyer & Thompson advise).
The rounds end when the maximiser of ℓ̂ keeps enough effective draws.

The Monte Carlo error of θ̂ is J⁻¹ Cov_MC(Ê_w[∇ log g]) J⁻¹, the self-normalised weighted
mean's covariance by batch means over the independent chains (delta method for a ratio);
J = −∇² ℓ̂(θ̂) is the observed information.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np
import optax
from jax.scipy.special import logsumexp

from zhat.fit import _chains
from zhat.fit._problem import LogPriorFn, Problem, check_degenerate, setup, simulator
from zhat.fit.fisher import _check_counts
from zhat.fit.result import LikelihoodFit, build
from zhat.fit.stochastic import initial_point, stochastic_approximation

Array = jax.Array

__all__ = ["maximum_likelihood", "monte_carlo_likelihood"]


def monte_carlo_likelihood(
    key: Array,
    dist: Any,
    data: Any,
    *,
    parameters: tuple[str, ...] | None = None,
    start: dict[str, Any] | None = None,
    log_prior: LogPriorFn | None = None,
    chains: int = 16,
    draws: int = 500,
    thin: int = 1,
    burn_in: int = 200,
    min_ess: float = 0.5,
    max_rounds: int = 10,
    simulator_name: str | None = None,
) -> LikelihoodFit:
    """Monte Carlo maximum likelihood (MAP with ``log_prior``) from draws at a moving point.

    :param start: the first simulation point ψ (fitted parameters); default the maximum
        pseudo-likelihood estimate. A stochastic-approximation estimate is a good start
        (see :func:`maximum_likelihood`).
    :param chains, draws, thin: M = chains · draws draws per round, ``thin`` transitions apart,
        after ``burn_in`` transitions at each new ψ (the chains persist between rounds).
    :param min_ess: the smallest effective sample size / M the weights may fall to.
    :param max_rounds: the most simulation rounds.
    """
    _check_counts(chains=chains, draws=draws, thin=thin, burn_in=burn_in, max_rounds=max_rounds)
    if not 0.0 < min_ess < 1.0:
        raise ValueError(f"min_ess must be in (0, 1); got {min_ess!r}.")
    problem = setup(dist, data, parameters, log_prior, start, needs="simulator")
    transition = simulator(problem.dist, simulator_name)
    runner = _chains.make_runner(problem, transition, keep_states=not problem.linear)
    k_start, k_rounds = jax.random.split(key)
    psi = initial_point(problem, start)
    states = _chains.start_states(problem, transition, k_start, chains)
    used = chains
    for r in range(max_rounds):
        k_burn, k_run = jax.random.split(jax.random.fold_in(k_rounds, r))
        states = runner.burn(k_burn, psi, states, burn_in)
        states, sim = runner.run(k_run, psi, states, draws, thin)
        check_degenerate(problem, psi, states, f"the simulation point of round {r + 1}")
        used += chains * (burn_in + draws * thin)
        surrogate = _Surrogate(problem, psi, sim)
        theta, settled = surrogate.maximise(min_ess)
        if settled:
            break
        psi = theta
    else:
        raise ValueError(
            f"Monte Carlo maximum likelihood did not settle in {max_rounds} rounds (the "
            "importance weights kept degenerating): raise `draws` or `max_rounds`, or start "
            "closer, e.g. zhat.fit.maximum_likelihood (stochastic approximation first)."
        )
    m = _chains.moments(surrogate.scores(theta), surrogate.log_weights(theta))
    info = -np.asarray(surrogate.hessian(theta), np.float64)
    return build(
        problem,
        "Monte Carlo maximum likelihood (Geyer–Thompson, importance-reweighted)",
        theta,
        info,
        m.mean_cov,
        used,
        float(m.ess) / (chains * draws),
        r + 1,
    )


class _Surrogate:
    """ℓ̂(θ) + log π(θ) from one round of draws at ψ, with its Newton maximiser."""

    def __init__(self, problem: Problem, psi: Array, sim: _chains.Draws) -> None:
        self.problem, self.psi, self.sim = problem, psi, sim
        self.size = sim.scores.shape[0] * sim.scores.shape[1]
        if not problem.linear:
            flat = sim.states.reshape((-1,) + sim.states.shape[2:])
            self.flat = flat
            self.base = jax.vmap(problem.log_potential, (None, 0))(psi, flat)
        self.value = jax.jit(self._value)
        self.grad = jax.jit(jax.grad(self._value))
        self.hessian = jax.jit(jax.hessian(self._value))

    def log_weights(self, theta: Array) -> Array:
        k, t, _ = self.sim.scores.shape
        if self.problem.linear:  # log g(x; θ) − log g(x; ψ) = (θ − ψ)·s(x) exactly
            return self.sim.scores @ (theta - self.psi)
        lg = jax.vmap(self.problem.log_potential, (None, 0))(theta, self.flat)
        return (lg - self.base).reshape(k, t)

    def scores(self, theta: Array) -> Array:
        if self.problem.linear:
            return self.sim.scores
        k, t, d = self.sim.scores.shape
        return jax.vmap(self.problem.score, (None, 0))(theta, self.flat).reshape(k, t, d)

    def _value(self, theta: Array) -> Array:
        p = self.problem
        lw = self.log_weights(theta)
        return (
            p.log_potential(theta, p.data)
            - logsumexp(lw)
            + jnp.log(self.size)
            + p.prior_value(theta)
        )

    def ess_fraction(self, theta: Array) -> float:
        lw = self.log_weights(theta).reshape(-1)
        return float(jnp.exp(2 * logsumexp(lw) - logsumexp(2 * lw))) / self.size

    def maximise(self, min_ess: float, max_steps: int = 50) -> tuple[Array, bool]:
        """Newton ascent from ψ; (θ, True) at the maximiser, or (θ, False) where it stopped
        because the weights would degenerate beyond θ."""
        theta, f = self.psi, float(self.value(self.psi))
        for _ in range(max_steps):
            g = self.grad(theta)
            h = self.hessian(theta)
            step = jnp.linalg.solve(-h, g)
            if not bool(jnp.all(jnp.isfinite(step))):
                raise ValueError(
                    "The Monte Carlo log-likelihood has a singular curvature here: the draws "
                    "do not vary in some direction. Raise `draws`, or fit fewer parameters."
                )
            decrement = float(g @ step)
            if decrement < 1e-12 * (1 + abs(f)):
                return theta, True
            t = 1.0
            while t > 1e-4:
                new = theta + t * step
                f_new = float(self.value(new))
                if f_new >= f and self.ess_fraction(new) >= min_ess:
                    break
                t *= 0.5
            if t <= 1e-4:
                return theta, False
            if t < 1.0 and self.ess_fraction(theta + 2 * t * step) < min_ess:
                return new, False  # shortened by the weights, not by the objective
            theta, f = new, f_new
        return theta, True


def maximum_likelihood(
    key: Array,
    dist: Any,
    data: Any,
    *,
    parameters: tuple[str, ...] | None = None,
    start: dict[str, Any] | None = None,
    log_prior: LogPriorFn | None = None,
    chains: int = 16,
    steps: int = 1000,
    optimizer: optax.GradientTransformation | None = None,
    draws: int = 500,
    burn_in: int = 200,
    min_ess: float = 0.5,
    simulator_name: str | None = None,
) -> LikelihoodFit:
    """Stochastic approximation, then Monte Carlo maximum likelihood from its estimate.

    MAP with ``log_prior``. The options are those of :func:`stochastic_approximation` and
    :func:`monte_carlo_likelihood`; the result's simulation count covers both stages.
    """
    k_sa, k_mc = jax.random.split(key)
    common = dict(parameters=parameters, log_prior=log_prior, simulator_name=simulator_name)
    first = stochastic_approximation(
        k_sa, dist, data, start=start, chains=chains, steps=steps, optimizer=optimizer,
        burn_in=burn_in, final_draws=draws, **common,
    )  # fmt: skip
    second = monte_carlo_likelihood(
        k_mc, dist, data, start=first.estimate, chains=chains, draws=draws, burn_in=burn_in,
        min_ess=min_ess, **common,
    )  # fmt: skip
    return dataclasses.replace(
        second,
        method="stochastic approximation, then " + second.method,
        num_simulations=first.num_simulations + second.num_simulations,
        path=first.path,
        notes=first.notes + second.notes,
    )
