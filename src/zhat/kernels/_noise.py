"""What every noise-block kernel shares: it owns noise sites only, and sees the likelihood part
of the target (the log joint minus the N(0, I) prior of its sites)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import jax
import jax.numpy as jnp

from zhat.kernels._shell import LogDensityFn, ModelKernel
from zhat.model.expose import is_noise_site

Array = jax.Array


class NoiseKernel(ModelKernel):
    """Base of kernels for noise sites; ``logdensity`` in their state is the log likelihood."""

    def _check_sites(self, model_trace: dict[str, Any], sites: Sequence[str]) -> None:
        other = [s for s in sites if not is_noise_site(model_trace[s])]
        if other:
            raise ValueError(
                f"{type(self).__name__} updates the noise sites of an exposed model only; "
                f"{other} are not noise sites. Give them another block (NUTS, "
                "zhat.kernels.Slice), e.g. with `zhat.kernels.pseudo_marginal_gibbs`."
            )

    def own_offset(self, z: dict[str, Array]) -> Array:
        # the log likelihood is the log joint minus the N(0, I) prior's -|u|²/2 (see below)
        return super().own_offset(z) + sum(0.5 * jnp.sum(jnp.square(z[s])) for s in self._sites)

    def _block_logdensity(
        self, model_args: tuple, model_kwargs: dict, full: LogDensityFn
    ) -> LogDensityFn:
        sites = self._sites

        def loglik(z: dict[str, Array]) -> Array:
            prior = sum(-0.5 * jnp.sum(jnp.square(z[s])) for s in sites)
            return full(z) - prior

        return loglik
