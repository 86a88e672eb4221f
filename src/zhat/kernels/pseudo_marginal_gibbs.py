"""``pseudo_marginal_gibbs``: parameters and estimator noise updated in alternation.

The exposed target π(θ, u) ∝ p(θ) f̂(θ, u) N(u; 0, I) is sampled by NumPyro's composable
``Gibbs``: a parameter kernel moves θ with u held fixed (NUTS by default), then elliptical slice
sampling moves each noise site with θ held fixed. Because u is never redrawn from scratch, a
lucky overestimate of f̂ is gradually forgotten instead of trapping the chain, which is what
makes standard pseudo-marginal MH stick (Murray & Graham 2016, AISTATS, "Pseudo-marginal slice
sampling").
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from numpyro.infer import NUTS
from numpyro.infer.gibbs import Gibbs, prototype_trace
from numpyro.infer.hmc import HMC
from numpyro.infer.mcmc import MCMCKernel

from zhat.kernels.elliptical_slice import EllipticalSlice
from zhat.model.expose import estimate_sites, noise_sites

__all__ = ["PseudoMarginalGibbs", "pseudo_marginal_gibbs"]


class PseudoMarginalGibbs(Gibbs):
    """NumPyro ``Gibbs`` over (parameters, noise) that checks its blocks suit the estimators."""

    def init(self, rng_key, num_warmup, init_params, model_args, model_kwargs):
        model_trace = prototype_trace(self.model, rng_key, model_args, model_kwargs or {})
        if not noise_sites(model_trace):
            raise ValueError(
                "pseudo_marginal_gibbs found no noise sites: the model has no intractable "
                "factor, or was not wrapped with `zhat.expose(model)`."
            )
        rough = [n for n, tag in estimate_sites(model_trace).items() if not tag["estimator"].smooth]
        theta_kernel = self.blocks[0][0]
        if rough and isinstance(theta_kernel, HMC):
            raise ValueError(
                f"The estimators at {rough} are not smooth in the parameters, so a gradient "
                f"kernel ({type(theta_kernel).__name__}) cannot update them. Use "
                "`pseudo_marginal_gibbs(model, theta_kernel=zhat.kernels.Slice(model))`."
            )
        return super().init(rng_key, num_warmup, init_params, model_args, model_kwargs)


def pseudo_marginal_gibbs(
    exposed_model: Callable,
    theta_kernel: MCMCKernel | None = None,
    noise_kernel: MCMCKernel | None = None,
) -> PseudoMarginalGibbs:
    """Build the alternating sampler for an exposed model.

    :param exposed_model: ``zhat.expose(model)``; the same object the kernels are built on.
    :param theta_kernel: kernel for every non-noise latent site; default ``NUTS(exposed_model)``.
    :param noise_kernel: kernel for the noise sites; default ``EllipticalSlice(exposed_model)``.
    :return: a NumPyro ``Gibbs`` kernel for :class:`numpyro.infer.MCMC` or :class:`zhat.MCMC`.
    """
    theta_kernel = NUTS(exposed_model) if theta_kernel is None else theta_kernel
    noise_kernel = EllipticalSlice(exposed_model) if noise_kernel is None else noise_kernel
    for role, kernel in (("theta_kernel", theta_kernel), ("noise_kernel", noise_kernel)):
        if not isinstance(kernel, MCMCKernel):
            raise TypeError(f"{role} must be a NumPyro MCMCKernel, got {kernel!r}.")
        if getattr(kernel, "model", None) is not exposed_model:
            raise ValueError(
                f"{role} must be built on the same exposed model object passed to "
                "pseudo_marginal_gibbs (e.g. `Slice(exposed)` with `exposed = zhat.expose(m)`)."
            )
    blocks: list[tuple[MCMCKernel, Any]] = [(theta_kernel, None), (noise_kernel, noise_sites)]
    return PseudoMarginalGibbs(blocks)
