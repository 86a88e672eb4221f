"""The exchange algorithm and double Metropolis–Hastings, the baselines for doubly intractable
posteriors p(θ | y) ∝ p(θ) g(y; θ)/Z(θ).

Exchange algorithm (Murray, Ghahramani & MacKay 2006, UAI): propose θ' by a random walk, draw
an auxiliary x ~ p(· | θ') exactly, and accept with probability

    min{1, p(θ') g(y; θ') g(x; θ) / (p(θ) g(y; θ) g(x; θ'))},

in which Z(θ) and Z(θ') cancel. The chain is exact when x is an exact draw (perfect sampler);
a draw that did not coalesce within the budget makes the kernel reject that proposal (a small
bias, reported in the step's info as ``exact=False``; raise the budget if it is not rare).

Double Metropolis–Hastings (Liang 2010, J. Stat. Comput. Simul. 80(9)) replaces the exact draw
by a short run of the family's simulator at θ' started from y: no perfect sampler needed, but
the chain is APPROXIMATE (it targets a perturbed posterior); the kernel says so.

Both run on the model under :class:`zhat.model.as_potential` (each family's density is its
log-potential). As a block of NumPyro's ``Gibbs`` the exchange kernel must own every site that
enters the family; it checks this at ``init``. The random-walk scale adapts during warmup only.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax import random
from jax.flatten_util import ravel_pytree
from numpyro.handlers import seed, substitute, trace
from numpyro.infer.gibbs import GIBBS_SITES_KWARG
from numpyro.infer.util import transform_fn

from zhat.estimators.draws import AuxiliaryDraws
from zhat.kernels import _random_walk as rw
from zhat.kernels._shell import AlgorithmState, ModelKernel
from zhat.model.degeneracy import simulate_and_check
from zhat.model.potential import as_potential, potential_sites

Array = jax.Array

__all__ = ["DoubleMetropolisHastings", "Exchange", "ExchangeInfo"]


class ExchangeInfo(NamedTuple):
    """Diagnostics of one step."""

    accept_prob: Array
    accepted: Array
    exact: Array
    step_size: Array


class ExchangeTarget(NamedTuple):
    """What the pure step needs: the log density and the families at a point."""

    logdensity: Callable[[dict[str, Array]], Array]
    families: Callable[[dict[str, Array]], dict[str, tuple[Any, Array]]]


class Exchange(ModelKernel):
    """Exchange algorithm with exact auxiliary draws (``sampler="perfect"``).

    :param model: a model with one or more observed unnormalized families (not exposed).
    :param sampler: ``"perfect"``, or a family simulator name for the approximate form.
    :param sweeps: simulator transitions per auxiliary draw (approximate form only).
    :param budget: largest number of sweeps of the perfect sampler. The kernel draws its own
        random numbers only for the sweeps a draw uses, so a large budget costs nothing until
        a proposal needs it (near and above a critical coupling); a draw that runs out rejects.
    :param proposal_scale: initial random-walk sd per unconstrained coordinate.
    :param target_accept: acceptance rate the warmup adaptation aims for.
    """

    full_joint = False  # its log density is the model under as_potential, not the joint

    def __init__(
        self,
        model: Callable,
        *,
        sampler: str = "perfect",
        sweeps: int = 20,
        budget: int = 8192,
        proposal_scale: float = 0.2,
        target_accept: float = 0.3,
    ) -> None:
        rw.check_options(proposal_scale, target_accept)
        self._draws = AuxiliaryDraws(sampler, sweeps, budget, type(self).__name__)
        self._proposal = (proposal_scale, target_accept)
        super().__init__(model if isinstance(model, as_potential) else as_potential(model))

    @property
    def exact(self) -> bool:
        """Whether the chain targets the exact posterior (perfect auxiliary draws)."""
        return self._draws.exact

    @property
    def default_fields(self) -> tuple[str, ...]:
        return ("z", "info.accepted")

    def _target(self, model_args: tuple, model_kwargs: dict | None) -> ExchangeTarget:
        model_kwargs = {} if model_kwargs is None else model_kwargs
        model = seed(self._model, random.key(0))
        transforms = self._transforms

        def families(z: dict[str, Array]) -> dict[str, tuple[Any, Array]]:
            values = transform_fn(transforms, z)
            model_trace = trace(substitute(model, data=values)).get_trace(
                *model_args, **model_kwargs
            )
            return potential_sites(model_trace)

        return ExchangeTarget(self.logdensity_fn(model_args, model_kwargs), families)

    def init(self, rng_key, num_warmup, init_params, model_args, model_kwargs):
        state = super().init(rng_key, num_warmup, init_params, model_args, model_kwargs)
        self._check_ownership(state, model_args, model_kwargs or {})
        if not self.exact and init_params is not None:
            self._check_degeneracy(state, model_args, model_kwargs or {})
        return state

    def _check_degeneracy(self, state, model_args: tuple, model_kwargs: dict) -> None:
        """Stop before sampling when simulator draws at a start the user gave collapse (a
        degenerate model, :mod:`zhat.model.degeneracy`); skipped when the start is traced.
        A random start is not checked: it says nothing about the posterior."""
        z = jax.tree.map(lambda v: v[0], state.z) if state.logdensity.ndim else state.z
        if any(isinstance(v, jax.core.Tracer) for v in jax.tree.leaves(z)):
            return
        families = self._target(model_args, model_kwargs).families(z)
        for name, (dist, data) in sorted(families.items()):
            simulate_and_check(
                dist, data, f"the chain's start (site '{name}')", simulator=self._draws.sampler
            )

    def _check_ownership(self, state, model_args: tuple, model_kwargs: dict) -> None:
        """Refuse a Gibbs split in which another block moves a site that enters a family."""
        conditioning = {
            k: v
            for k, v in model_kwargs.get(GIBBS_SITES_KWARG, {}).items()
            if jnp.issubdtype(jnp.result_type(v), jnp.floating)
        }
        if not conditioning:
            return
        if any(isinstance(v, jax.core.Tracer) for v in jax.tree.leaves((conditioning, state.z))):
            raise ValueError(
                f"{type(self).__name__} as a block of Gibbs checks at init that it owns every "
                "site entering a family, which needs concrete values: run the chains with "
                'chain_method="sequential" (not "parallel").'
            )
        z = jax.tree.map(lambda v: v[0], state.z) if state.logdensity.ndim else state.z

        def family_params(values: dict[str, Array]) -> Array:
            """A random linear combination of every family parameter (dependence check)."""
            kwargs = {
                **model_kwargs,
                GIBBS_SITES_KWARG: {**model_kwargs[GIBBS_SITES_KWARG], **values},
            }
            fams = self._target(model_args, kwargs).families(z)
            leaves = [
                jnp.ravel(p)
                for dist, _ in fams.values()
                for p in jax.tree.leaves(dist.params)
                if jnp.issubdtype(p.dtype, jnp.floating)
            ]
            flat = jnp.concatenate(leaves) if leaves else jnp.zeros((0,))
            weights = random.normal(random.key(7), flat.shape, flat.dtype)
            return jnp.sum(weights * flat)

        grads = jax.grad(family_params)(conditioning)
        moving = sorted(k for k, g in grads.items() if bool(jnp.any(g != 0)))
        if moving:
            raise ValueError(
                f"Sites {moving} enter an unnormalized family but are updated by another Gibbs "
                f"block; the exchange kernel must own them (give them to {type(self).__name__}'s "
                "block), because other kernels cannot account for the normalizer Z(θ)."
            )

    def _algorithm(self, model_trace: dict[str, Any], num_warmup: int):
        draws = self._draws
        scale, target_accept = self._proposal

        def init(z: dict[str, Array], target: ExchangeTarget) -> AlgorithmState:
            flat, _ = ravel_pytree(z)
            for dist, _ in target.families(z).values():
                draws.check(dist)
            zero = jnp.zeros((), flat.dtype)
            info = ExchangeInfo(zero, jnp.array(False), jnp.array(True), zero)
            return AlgorithmState(z, jnp.asarray(target.logdensity(z)), info, rw.init(flat, scale))

        def step(rng_key: Array, state: Any, target: ExchangeTarget):
            key_move, key_aux, key_accept = random.split(rng_key, 3)
            flat, unravel = ravel_pytree(state.z)
            proposal = unravel(rw.propose(key_move, flat, state.carry))
            new_logdensity = target.logdensity(proposal)
            here, there = target.families(state.z), target.families(proposal)
            log_aux, exact = jnp.zeros((), flat.dtype), jnp.array(True)
            for i, (name, (dist_new, data)) in enumerate(sorted(there.items())):
                key_i = random.fold_in(key_aux, i)
                x, ok = draws.draw_with_key(dist_new, data, key_i, flat.dtype)
                log_aux = log_aux + here[name][0].log_potential(x) - dist_new.log_potential(x)
                exact = exact & ok
            log_ratio = new_logdensity - state.logdensity + log_aux
            log_ratio = jnp.where(exact & ~jnp.isnan(log_ratio), log_ratio, -jnp.inf)
            accept_prob = jnp.minimum(1.0, jnp.exp(log_ratio))
            accepted = random.uniform(key_accept) < accept_prob
            z = jax.tree.map(lambda a, b: jnp.where(accepted, a, b), proposal, state.z)
            logdensity = jnp.where(accepted, new_logdensity, state.logdensity)
            new_flat = ravel_pytree(z)[0]
            carry = rw.update(state.carry, new_flat, accept_prob, num_warmup, scale, target_accept)
            info = ExchangeInfo(
                accept_prob.astype(flat.dtype), accepted, exact, jnp.exp(state.carry.log_step)
            )
            return AlgorithmState(z, logdensity, None, carry), info

        return init, step

    def get_diagnostics_str(self, state: Any) -> str:
        return f"acc. prob {float(jnp.mean(state.info.accept_prob)):.2f}"


class DoubleMetropolisHastings(Exchange):
    """Exchange with auxiliary draws from ``sweeps`` simulator transitions started at the data
    (Liang 2010). APPROXIMATE: it targets a perturbed posterior.

    :param model: a model with observed unnormalized families.
    :param sweeps: simulator transitions per auxiliary draw.
    :param simulator: the family simulator (``"gibbs"``, ``"swendsen_wang"``, ...).
    """

    def __init__(
        self,
        model: Callable,
        *,
        sweeps: int = 20,
        simulator: str = "gibbs",
        proposal_scale: float = 0.2,
        target_accept: float = 0.3,
    ) -> None:
        if simulator == "perfect":
            raise ValueError(
                "DoubleMetropolisHastings uses a simulator; for perfect draws use Exchange."
            )
        super().__init__(
            model,
            sampler=simulator,
            sweeps=sweeps,
            proposal_scale=proposal_scale,
            target_accept=target_accept,
        )
