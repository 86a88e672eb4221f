"""``zhat.MCMC``: NumPyro's MCMC driver that leaves estimator noise out of collected samples.

Noise blocks can be huge (a perfect sampler on a large lattice uses millions of draws), so by
default only the parameters and recorded log estimates are kept; ``keep_noise=True`` keeps the
noise too. It also refuses, before any compilation, a gradient kernel acting on the noise of an
estimator that is not smooth in (θ, u).
"""

from __future__ import annotations

from typing import Any

import jax
import numpyro.infer
from numpyro.handlers import seed, trace
from numpyro.infer.hmc import HMC

from zhat.model.expose import estimate_sites, noise_sites

__all__ = ["MCMC"]


def _exposed_layout(model: Any, args: tuple, kwargs: dict) -> tuple[tuple[str, ...], list[str]]:
    """Noise sites and non-smooth estimate sites, from an abstract trace (no computation)."""
    out: dict[str, Any] = {}

    def run() -> None:
        model_trace = trace(seed(model, jax.random.key(0))).get_trace(*args, **kwargs)
        out["noise"] = noise_sites(model_trace)
        out["rough"] = [
            n for n, tag in estimate_sites(model_trace).items() if not tag["estimator"].smooth
        ]

    jax.eval_shape(run)
    return out["noise"], out["rough"]


class MCMC(numpyro.infer.MCMC):
    """:class:`numpyro.infer.MCMC` with ``keep_noise`` (default ``False``); same arguments."""

    def __init__(self, sampler: numpyro.infer.mcmc.MCMCKernel, *, keep_noise: bool = False, **kw):
        self.keep_noise = keep_noise
        super().__init__(sampler, **kw)

    def run(self, rng_key, *args, extra_fields=(), init_params=None, **kwargs):
        model = getattr(self.sampler, "model", None)
        extra = tuple(extra_fields)
        if model is not None:
            noise, rough = _exposed_layout(model, args, kwargs)
            if rough and isinstance(self.sampler, HMC) and noise:
                raise ValueError(
                    f"{type(self.sampler).__name__} would move the noise of the estimators at "
                    f"{rough}, which are not smooth in (θ, u). Use "
                    "`zhat.kernels.pseudo_marginal_gibbs(model, theta_kernel=Slice(model))`."
                )
            if not self.keep_noise:
                field = self.sampler.sample_field
                extra += tuple(f"~{field}.{n}" for n in noise if f"~{field}.{n}" not in extra)
        return super().run(rng_key, *args, extra_fields=extra, init_params=init_params, **kwargs)
