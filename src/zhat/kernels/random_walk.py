"""Random-walk Metropolis for a parameter block, e.g. θ given the noise inside
``pseudo_marginal_gibbs``: one log-density evaluation per step, no gradient, so it suits
estimators that are piecewise constant in θ where slice sampling would spend many evaluations.
The proposal scale adapts during warmup only (see ``zhat.kernels._random_walk``; Haario, Saksman
& Tamminen 2001, Bernoulli 7(2)).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from zhat.kernels.pseudo_marginal_mh import PseudoMarginalMH
from zhat.model.expose import is_noise_site

__all__ = ["RandomWalk"]


class RandomWalk(PseudoMarginalMH):
    """Random-walk Metropolis on the block's (non-noise) sites.

    :param model: the model (exposed or not).
    :param proposal_scale: initial random-walk sd per unconstrained coordinate.
    :param target_accept: acceptance rate the warmup adaptation aims for.
    """

    def __init__(
        self, model: Callable, *, proposal_scale: float = 0.2, target_accept: float = 0.3
    ) -> None:
        super().__init__(model, proposal_scale=proposal_scale, target_accept=target_accept)

    def _check_sites(self, model_trace: dict[str, Any], sites: Sequence[str]) -> None:
        noise = [s for s in sites if is_noise_site(model_trace[s])]
        if noise:
            raise ValueError(
                f"RandomWalk moves parameters only; {noise} are noise sites. Give them a noise "
                "kernel (EllipticalSlice, BlockRefresh) in `pseudo_marginal_gibbs`, or use "
                "PseudoMarginalMH to refresh them with every proposal."
            )
