"""Maximum likelihood (or MAP) by stochastic approximation with persistent chains.

The log-likelihood of p(y | θ) = g(y; θ)/Z(θ) has gradient

    ∇ log L(θ) = ∇ log g(y; θ) − E_θ[∇ log g(x; θ)]        (= s(y) − E_θ[s(x)] for an
                                                             exponential family),

and ∇ log π(θ) is added for MAP. The expectation is replaced by the average over K persistent
simulator chains, each moved by a few transitions at the current θ_t and never restarted
(Younes 1988, Ann. Inst. H. Poincaré Probab. Statist. 24(2); the Robbins–Monro recursion,
Robbins & Monro 1951, Ann. Math. Statist. 22(3)). The noisy gradient is preconditioned by the
inverse Fisher information I(θ_0)⁻¹ = Cov_θ0[∇ log g]⁻¹ at the start (a Newton-type recursion,
as in Gu & Kong 1998, PNAS 95(13)) and fed to an Optax optimiser, by default SGD with the
decaying step a_t = a / (1 + t/t_0)^0.6, all in one ``lax.scan``. The estimate is the
Polyak–Ruppert average of the iterates over the last part of the run (Polyak & Juditsky 1992,
SIAM J. Control Optim. 30(4)), followed by one Newton step from fresh draws at that average,

    θ̂ = θ̄ + J(θ̄)⁻¹ [∇ log g(y; θ̄) + ∇ log π(θ̄) − Ê_θ̄[∇ log g(x; θ̄)]],

whose simulation error J⁻¹ Cov_MC(Ê) J⁻¹ is estimated by batch means over the chains (see
:mod:`zhat.fit.result`). Assumes the chains mix at every θ visited; started by default at the
maximum pseudo-likelihood estimate.
"""

from __future__ import annotations

from typing import Any

import jax
import jax.numpy as jnp
import numpy as np
import optax

from zhat.fit import _chains
from zhat.fit._problem import LogPriorFn, Problem, check_degenerate, setup, simulator
from zhat.fit.fisher import _check_counts
from zhat.fit.pseudo_likelihood import pseudo_likelihood
from zhat.fit.result import LikelihoodFit, build, invert_information

Array = jax.Array

__all__ = ["stochastic_approximation"]


def stochastic_approximation(
    key: Array,
    dist: Any,
    data: Any,
    *,
    parameters: tuple[str, ...] | None = None,
    start: dict[str, Any] | None = None,
    log_prior: LogPriorFn | None = None,
    chains: int = 16,
    steps: int = 1000,
    sweeps_per_step: int = 1,
    burn_in: int = 200,
    optimizer: optax.GradientTransformation | None = None,
    step_size: float = 0.5,
    precondition: bool = True,
    average_from: float = 0.5,
    final_draws: int = 500,
    simulator_name: str | None = None,
) -> LikelihoodFit:
    """Maximum likelihood (MAP with ``log_prior``) of ``dist``'s free parameters from ``data``.

    :param key: PRNG key for the simulations.
    :param dist: the family at parameter values; parameters given as plain numbers are held.
    :param start: starting values of the fitted parameters; default the maximum
        pseudo-likelihood estimate (or ``dist``'s values if the family has no pseudo-likelihood).
    :param log_prior: ``log π(params)`` of a dict of the fitted parameters (gives MAP).
    :param chains: K persistent chains (vmapped); each step moves each by ``sweeps_per_step``.
    :param optimizer: an Optax optimiser (it minimises −log L); default SGD with the step
        ``step_size / (1 + t/t_0)^0.6``, t_0 = steps/20.
    :param precondition: multiply the gradient by I(θ_0)⁻¹ (simulated Fisher information at the
        start) before the optimiser (makes the default step size scale-free; without it, give
        an optimiser whose steps suit gradients of the size of the statistics, ~ the number of
        sites).
    :param average_from: average the iterates from this fraction of the run on.
    :param final_draws: draws per chain at the averaged point for the final Newton step and the
        standard errors.
    """
    _check_counts(chains=chains, steps=steps, sweeps_per_step=sweeps_per_step, burn_in=burn_in)
    _check_counts(final_draws=final_draws)
    if not 0.0 <= average_from < 1.0:
        raise ValueError(f"average_from must be in [0, 1); got {average_from!r}.")
    problem = setup(dist, data, parameters, log_prior, start, needs="simulator")
    transition = simulator(problem.dist, simulator_name)
    runner = _chains.make_runner(problem, transition, keep_states=False)
    k_start, k_burn, k_pilot, k_scan, k_final = jax.random.split(key, 5)

    v0 = initial_point(problem, start)
    states = _chains.start_states(problem, transition, k_start, chains)
    states = runner.burn(k_burn, v0, states, burn_in)
    used = chains * (1 + burn_in)
    if precondition:
        pilot = final_draws  # the same compiled run as the final draws
        states, pilot_draws = runner.run(k_pilot, v0, states, pilot, 1)
        check_degenerate(problem, v0, states, "the start")
        # expected information Cov[∇ log g] (+ prior curvature): positive definite even where
        # the observed information of a non-linear family is not (Fisher scoring)
        expected = _chains.moments(pilot_draws.scores).cov - problem.prior_hessian(v0)
        scale = invert_information(np.asarray(expected, np.float64), problem.labels)
        used += chains * pilot
    else:
        scale = np.eye(v0.size)
    if optimizer is None:
        t0 = max(1.0, steps / 20)
        optimizer = optax.sgd(lambda t: step_size / (1.0 + t / t0) ** 0.6)

    path, states = _scan(problem, transition, optimizer, jnp.asarray(scale, v0.dtype))(
        k_scan, v0, states, steps, sweeps_per_step
    )
    used += chains * steps * sweeps_per_step
    if not bool(jnp.all(jnp.isfinite(path))):
        raise ValueError(
            "The stochastic approximation diverged (non-finite parameters); lower `step_size` "
            "or give a `start` closer to the estimate."
        )
    check_degenerate(problem, path[-1], states, "the last stochastic-approximation step")
    averaged = jnp.mean(path[int(average_from * steps) :], axis=0)
    _, final = runner.run(k_final, averaged, states, final_draws, 1)
    used += chains * final_draws
    m = _chains.moments(final.scores)
    info = observed_information(problem, averaged, final)
    gradient = jax.grad(lambda u: problem.log_potential(u, problem.data) + problem.prior_value(u))
    newton = invert_information(info, problem.labels) @ np.asarray(
        gradient(averaged) - m.mean, np.float64
    )
    estimate = averaged + jnp.asarray(newton, averaged.dtype)
    se = np.sqrt(np.diag(invert_information(info, problem.labels)))
    moved = float(np.max(np.abs(newton) / se))
    notes = ()
    if moved > 0.5:
        notes = (
            f"the final Newton step moved the estimate by {moved:.2g} standard errors: the "
            "stochastic approximation had not settled; raise `steps` or check the start.",
        )
    return build(
        problem,
        "stochastic approximation (Robbins–Monro, persistent chains, Polyak–Ruppert average)",
        estimate,
        info,
        m.mean_cov,
        used,
        1.0,
        1,
        path=path,
        notes=notes,
    )


def observed_information(problem: Problem, v: Array, draws: _chains.Draws) -> np.ndarray:
    """J(v) = Cov[∇ log g(x)] + E[∇² log g(x)] − ∇² log g(y) − ∇² log π, from unweighted draws."""
    m = _chains.moments(draws.scores)
    at_data = jax.hessian(problem.log_potential)(v, problem.data)
    info = m.cov + draws.mean_hessian - at_data - problem.prior_hessian(v)
    return np.asarray(info, np.float64)


def initial_point(problem: Problem, start: dict[str, Any] | None) -> Array:
    """The given start, else the maximum pseudo-likelihood estimate, else ``dist``'s values."""
    if start is not None or problem.dist.family.pseudo_log_likelihood is None:
        return problem.start
    fit = pseudo_likelihood(problem.dist, problem.data, parameters=problem.fitted)
    return jnp.asarray(fit.vector, problem.start.dtype)


def _scan(problem: Problem, transition, optimizer, scale: Array):
    def score_gap(v: Array, states: Array) -> Array:
        """∇ log L(v) + ∇ log π(v), with E_v[·] the average over the chains."""
        at_data = problem.score(v, problem.data) + jax.grad(problem.prior_value)(v)
        return at_data - jnp.mean(jax.vmap(problem.score, (None, 0))(v, states), axis=0)

    def run(key, v0, states, steps, sweeps):
        def body(carry, tz):
            v, states, opt_state = carry
            states = _chains.sweep(problem, transition, v, states, tz[1])
            direction = -(scale @ score_gap(v, states))
            updates, opt_state = optimizer.update(direction, opt_state, v)
            v = optax.apply_updates(v, updates)
            return (v, states, opt_state), v

        shape = _chains.noise_shape(transition, states, sweeps)
        carry = (v0, states, optimizer.init(v0))
        (_, states, _), path = _chains.noise_scan(body, carry, key, steps, shape)
        return path, states

    return jax.jit(run, static_argnames=("steps", "sweeps"))
