"""Standard and correlated pseudo-marginal Metropolis–Hastings, the baselines users compare with.

On an exposed model with parameters θ and estimator noise u, one step proposes

    θ' = θ + h · s ⊙ ε,   ε ~ N(0, I)            (random walk, unconstrained space)
    u' = ρ u + √(1 − ρ²) ξ,   ξ ~ N(0, I)          (ρ = 0: fresh noise, the standard method)

and accepts with probability min(1, p(θ') f̂(θ', u') / (p(θ) f̂(θ, u))). The u-proposal is
reversible with respect to N(0, I), so the noise prior cancels. With ρ = 0 this is the
pseudo-marginal method of Andrieu & Roberts (2009, Ann. Statist. 37(2)); with ρ close to 1 the
correlated method of Deligiannidis, Doucet & Pitt (2018, JRSS B 80(5)), Crank–Nicolson form.
Both keep the current estimate until a proposal is accepted, which is what makes chains
'stick' when sd(log f̂) is large.

During warmup the random-walk scale adapts and is frozen afterwards (see
``zhat.kernels._random_walk``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax import random
from jax.flatten_util import ravel_pytree

from zhat.kernels import _random_walk as rw
from zhat.kernels._shell import AlgorithmState, LogDensityFn, ModelKernel
from zhat.model.expose import is_noise_site

Array = jax.Array

__all__ = ["PseudoMarginalMH", "PseudoMarginalMHInfo", "build_kernel"]


class PseudoMarginalMHInfo(NamedTuple):
    """Diagnostics of one step."""

    accept_prob: Array
    accepted: Array
    step_size: Array


def build_kernel(
    param_sites: Sequence[str],
    noise_sites: Sequence[str],
    num_warmup: int,
    *,
    correlation: float = 0.0,
    proposal_scale: float = 1.0,
    target_accept: float | None = None,
) -> tuple[Callable, Callable]:
    """Pure ``(init, step)`` of pseudo-marginal MH over a dict of unconstrained values."""
    if not 0.0 <= correlation < 1.0:
        raise ValueError(f"correlation must lie in [0, 1), got {correlation!r}.")
    rw.check_options(proposal_scale, target_accept)
    param_sites, noise_sites = tuple(param_sites), tuple(noise_sites)
    rho, rho_c = correlation, math.sqrt(1.0 - correlation**2)

    def split(z: dict[str, Array]) -> tuple[dict[str, Array], dict[str, Array]]:
        return {s: z[s] for s in param_sites}, {s: z[s] for s in noise_sites}

    def init(z: dict[str, Array], logdensity_fn: LogDensityFn) -> AlgorithmState:
        flat, _ = ravel_pytree(split(z)[0])
        adapt = rw.init(flat, proposal_scale)
        zero = jnp.zeros((), flat.dtype)
        info = PseudoMarginalMHInfo(zero, jnp.zeros((), bool), jnp.exp(adapt.log_step))
        return AlgorithmState(z, jnp.asarray(logdensity_fn(z)), info, adapt)

    def step(rng_key: Array, state: Any, logdensity_fn: LogDensityFn):
        key_theta, key_noise, key_accept = random.split(rng_key, 3)
        adapt: rw.Adaptation = state.carry
        params, noise = split(state.z)
        flat, unravel = ravel_pytree(params)
        new_params = unravel(rw.propose(key_theta, flat, adapt)) if flat.size else params
        keys = random.split(key_noise, max(len(noise_sites), 1))
        new_noise = {
            s: rho * noise[s] + rho_c * random.normal(k, noise[s].shape, noise[s].dtype)
            for s, k in zip(noise_sites, keys[: len(noise_sites)], strict=True)
        }
        proposal = {**new_params, **new_noise}
        new_logdensity = logdensity_fn(proposal)

        def log_prior(u: dict[str, Array]) -> Array:
            return sum((-0.5 * jnp.sum(jnp.square(v)) for v in u.values()), jnp.zeros(()))

        log_ratio = new_logdensity - state.logdensity - (log_prior(new_noise) - log_prior(noise))
        log_ratio = jnp.where(jnp.isnan(log_ratio), -jnp.inf, log_ratio)
        accept_prob = jnp.minimum(1.0, jnp.exp(log_ratio))
        accepted = random.uniform(key_accept) < accept_prob
        z = jax.tree.map(lambda a, b: jnp.where(accepted, a, b), proposal, state.z)
        logdensity = jnp.where(accepted, new_logdensity, state.logdensity)
        new_adapt = rw.update(
            adapt,
            ravel_pytree(split(z)[0])[0],
            accept_prob,
            num_warmup,
            proposal_scale,
            target_accept,
        )
        step_size = jnp.exp(adapt.log_step)
        info = PseudoMarginalMHInfo(accept_prob.astype(flat.dtype), accepted, step_size)
        return AlgorithmState(z, logdensity, None, new_adapt), info

    return init, step


class PseudoMarginalMH(ModelKernel):
    """Pseudo-marginal random-walk Metropolis–Hastings on an exposed model.

    :param model: the exposed model (``zhat.expose(model)``); its noise sites are refreshed
        with every proposal, the other latent sites move by a random walk.
    :param correlation: ρ of the Crank–Nicolson noise move; 0 (default) draws fresh noise,
        values near 1 (e.g. 0.99) give the correlated pseudo-marginal method.
    :param proposal_scale: initial random-walk sd per unconstrained coordinate.
    :param target_accept: acceptance rate the warmup step-size adaptation aims for; ``None``
        (default) keeps the optimal scaling 2.56/√d of the running posterior sd (Sherlock et
        al. 2015), since with noisy estimates the acceptance rate is capped by the noise.
    """

    def __init__(
        self,
        model: Callable,
        *,
        correlation: float = 0.0,
        proposal_scale: float = 1.0,
        target_accept: float | None = None,
    ) -> None:
        self._options = dict(
            correlation=correlation, proposal_scale=proposal_scale, target_accept=target_accept
        )
        build_kernel((), (), 0, **self._options)  # validate options now
        super().__init__(model)

    def _algorithm(self, model_trace: dict[str, Any], num_warmup: int) -> tuple[Callable, Callable]:
        noise = [s for s in self._sites if is_noise_site(model_trace[s])]
        params = [s for s in self._sites if s not in noise]
        return build_kernel(params, noise, num_warmup, **self._options)

    @property
    def default_fields(self) -> tuple[str, ...]:
        return ("z", "info.accepted")

    def get_diagnostics_str(self, state: Any) -> str:
        return f"acc. prob {float(jnp.mean(state.info.accept_prob)):.2f}"
