"""``pseudo_marginal_gibbs``: parameters and estimator noise updated in alternation.

The exposed target π(θ, u) ∝ p(θ) f̂(θ, u) N(u; 0, I) is sampled by NumPyro's composable
``Gibbs``: a parameter kernel moves θ with u held fixed, then a noise kernel moves the noise
sites with θ held fixed. Because u is never redrawn from scratch, a lucky overestimate of f̂ is
gradually forgotten instead of trapping the chain, which is what makes standard pseudo-marginal
MH stick (Murray & Graham 2016, AISTATS, "Pseudo-marginal slice sampling").

Defaults, chosen per model from its estimators when the sampler is initialised:

- every estimator smooth in (θ, u): NUTS on θ, elliptical slice sampling on u;
- otherwise (e.g. auxiliary draws from a perfect sampler, piecewise constant): random-walk
  Metropolis on θ (one estimator evaluation per move, where slice sampling spends several) and
  an independence refresh of u. In ``benchmarks/lattice.py`` (8×8 Ising posterior, 2 × 2500
  draws per configuration) this pair gave the most effective samples per second with both
  estimators (annealed: 1.2× elliptical slice, 1.4× block refresh; single auxiliary variable:
  1.03× elliptical slice); in an earlier run it was 0.83× elliptical slice with the single
  estimator. See the README for the table.

Each block hands the log joint it has just computed to the other (adding its own Jacobian
term) instead of evaluating the estimator again, so a sweep costs one estimator evaluation per
block.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from jax import random
from numpyro.infer import NUTS
from numpyro.infer.gibbs import Gibbs, prototype_trace, with_conditioning
from numpyro.infer.hmc import HMC
from numpyro.infer.mcmc import MCMCKernel
from numpyro.util import is_prng_key

from zhat.kernels._shell import ModelKernel
from zhat.kernels.elliptical_slice import EllipticalSlice
from zhat.kernels.noise_refresh import IndependentRefresh
from zhat.kernels.random_walk import RandomWalk
from zhat.model.expose import estimate_sites, noise_sites

__all__ = ["PseudoMarginalGibbs", "pseudo_marginal_gibbs"]


class PseudoMarginalGibbs(MCMCKernel):
    """NumPyro ``Gibbs`` over (parameters, noise) whose blocks are chosen at ``init``.

    :param model: the exposed model.
    :param theta_kernel: kernel for every non-noise latent site (default: see module docstring).
    :param noise_kernel: kernel for the noise sites (default: see module docstring).
    """

    sample_field = "z"

    def __init__(
        self,
        model: Callable,
        theta_kernel: MCMCKernel | None = None,
        noise_kernel: MCMCKernel | None = None,
    ) -> None:
        for role, kernel in (("theta_kernel", theta_kernel), ("noise_kernel", noise_kernel)):
            if kernel is None:
                continue
            if not isinstance(kernel, MCMCKernel):
                raise TypeError(f"{role} must be a NumPyro MCMCKernel, got {kernel!r}.")
            if getattr(kernel, "model", None) is not model:
                raise ValueError(
                    f"{role} must be built on the same exposed model object passed to "
                    "pseudo_marginal_gibbs (e.g. `Slice(exposed)` with `exposed = zhat.expose(m)`)."
                )
        self._model = model
        self._theta, self._noise = theta_kernel, noise_kernel
        self._gibbs: Gibbs | None = None

    @property
    def model(self) -> Callable:
        return self._model

    @property
    def gibbs(self) -> Gibbs:
        """The NumPyro ``Gibbs`` kernel actually run (available after ``init``)."""
        if self._gibbs is None:
            raise RuntimeError("The blocks are chosen at `init`; run the sampler first.")
        return self._gibbs

    @property
    def default_fields(self) -> tuple[str, ...]:
        return ("z",)

    @property
    def _sample_fn(self) -> Callable | None:
        # read by NumPyro's MCMC to decide whether a `post_warmup_state` can be continued
        return None if self._gibbs is None else self._gibbs._sample_fn

    def _choose(self, model_trace: dict[str, Any]) -> Gibbs:
        if not noise_sites(model_trace):
            raise ValueError(
                "pseudo_marginal_gibbs found no noise sites: the model has no intractable "
                "factor, or was not wrapped with `zhat.expose(model)`."
            )
        rough = [n for n, tag in estimate_sites(model_trace).items() if not tag["estimator"].smooth]
        theta = self._theta or (RandomWalk(self._model) if rough else NUTS(self._model))
        noise = self._noise or (
            IndependentRefresh(self._model) if rough else EllipticalSlice(self._model)
        )
        if rough and isinstance(theta, HMC):
            raise ValueError(
                f"The estimators at {rough} are not smooth in the parameters, so a gradient "
                f"kernel ({type(theta).__name__}) cannot update them. Use "
                "`pseudo_marginal_gibbs(model, theta_kernel=zhat.kernels.RandomWalk(model))` or "
                "`zhat.kernels.Slice(model)`."
            )
        return Gibbs([(theta, None), (noise, noise_sites)])

    def init(self, rng_key, num_warmup, init_params, model_args, model_kwargs):
        if not is_prng_key(rng_key):
            raise ValueError(
                "pseudo_marginal_gibbs runs one chain per call (it is a NumPyro Gibbs kernel): "
                'use chain_method="parallel" or "sequential" for several chains, not '
                '"vectorized".'
            )
        model_trace = prototype_trace(self._model, rng_key, model_args, model_kwargs or {})
        self._gibbs = self._choose(model_trace)
        return self._gibbs.init(rng_key, num_warmup, init_params, model_args, model_kwargs)

    def sample(self, state, model_args, model_kwargs):
        blocks = [kernel for kernel, _ in self.gibbs.blocks]
        if all(isinstance(k, ModelKernel) and k.full_joint for k in blocks):
            return self._sweep_passing_densities(state, model_args, model_kwargs or {})
        return self.gibbs.sample(state, model_args, model_kwargs)

    def _sweep_passing_densities(self, state, model_args, model_kwargs):
        """One Gibbs sweep in which each block, after its move, hands the log joint it has just
        computed to the other blocks (each adds its own Jacobian term, ``own_offset``) instead
        of NumPyro's ``refresh``, which evaluates the estimator again after every move."""
        blocks = [kernel for kernel, _ in self.gibbs.blocks]
        states = list(state.block_states)
        own = [
            k.get_constrain_fn(model_args, model_kwargs)(getattr(st, k.sample_field))
            for k, st in zip(blocks, states, strict=True)
        ]
        for i, kernel in enumerate(blocks):
            siblings = {n: v for j, values in enumerate(own) if j != i for n, v in values.items()}
            kwargs = with_conditioning(model_kwargs, siblings)
            states[i] = kernel.sample(states[i], model_args, kwargs)
            z = states[i].z
            own[i] = kernel.get_constrain_fn(model_args, kwargs)(z)
            log_joint = states[i].logdensity - kernel.own_offset(z)
            for j, other in enumerate(blocks):
                if j != i:
                    states[j] = states[j]._replace(
                        logdensity=log_joint + other.own_offset(states[j].z)
                    )
        merged = {n: v for st in states for n, v in st.z.items()}
        rng_key, _ = random.split(state.rng_key)
        return state._replace(z=merged, block_states=tuple(states), rng_key=rng_key)

    def refresh(self, state, model_args, model_kwargs):
        """Recompute every block's cached values against its siblings' current values.

        (NumPyro's ``Gibbs.refresh`` is the identity because its ``sample`` refreshes blocks
        whose siblings moved; a composite used as a block, or given new model arguments,
        needs every block refreshed.)
        """
        blocks = [kernel for kernel, _ in self.gibbs.blocks]
        own = []
        for kernel, block_state in zip(blocks, state.block_states, strict=True):
            z = getattr(block_state, kernel.sample_field)
            own.append(kernel.get_constrain_fn(model_args, model_kwargs)(z))
        fresh = []
        for i, (kernel, block_state) in enumerate(zip(blocks, state.block_states, strict=True)):
            siblings = {k: v for j, values in enumerate(own) if j != i for k, v in values.items()}
            kwargs = with_conditioning(model_kwargs, siblings)
            fresh.append(kernel.refresh(block_state, model_args, kwargs))
        return state._replace(block_states=tuple(fresh))

    def wrap_model(self, wrapper: Callable) -> PseudoMarginalGibbs:
        wrapped = wrapper(self._model)
        # every block must hold the very same wrapped model object (Gibbs compares identity)
        wrap = lambda k: None if k is None else k.wrap_model(lambda _: wrapped)  # noqa: E731
        return PseudoMarginalGibbs(wrapped, wrap(self._theta), wrap(self._noise))

    def get_constrain_fn(self, model_args, model_kwargs):
        return self.gibbs.get_constrain_fn(model_args, model_kwargs)

    def postprocess_fn(self, model_args, model_kwargs):
        return self.gibbs.postprocess_fn(model_args, model_kwargs)

    def get_diagnostics_str(self, state) -> str:
        return self.gibbs.get_diagnostics_str(state)


def pseudo_marginal_gibbs(
    exposed_model: Callable,
    theta_kernel: MCMCKernel | None = None,
    noise_kernel: MCMCKernel | None = None,
) -> PseudoMarginalGibbs:
    """Build the alternating sampler for an exposed model (see :class:`PseudoMarginalGibbs`).

    :param exposed_model: ``zhat.expose(model)``; the same object any given kernel is built on.
    :param theta_kernel: kernel for every non-noise latent site.
    :param noise_kernel: kernel for the noise sites: ``EllipticalSlice``, ``BlockRefresh`` or
        ``IndependentRefresh`` (all in :mod:`zhat.kernels`).
    :return: a kernel for :class:`numpyro.infer.MCMC` or :class:`zhat.MCMC`.
    """
    return PseudoMarginalGibbs(exposed_model, theta_kernel, noise_kernel)
