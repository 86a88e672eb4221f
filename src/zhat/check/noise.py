"""How noisy is an estimator? sd(log f̂) at fixed parameters, and what to do about it.

The efficiency of pseudo-marginal Metropolis-type samplers depends on σ = sd(log f̂) at
parameter values of high posterior mass: too large and chains stick, too small and the
estimator wastes work. The recommended range is σ ≈ 1.0–1.7 (Doucet, Pitt, Deligiannidis &
Kohn 2015, Biometrika 102(2): σ ≈ 1.0–1.2 for good proposals; Sherlock, Thiery, Roberts &
Rosenthal 2015, Ann. Statist. 43(1): σ ≈ 1.8 for random-walk proposals). Samplers that move
the noise slowly (elliptical slice within Gibbs, correlated noise) tolerate larger σ.
The variance of log f̂ of averaging estimators falls roughly as 1/(number of draws), which
gives the suggested number of draws for a target σ (common practice).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax import random
from numpyro.handlers import seed, substitute, trace

from zhat.model.expose import expose

Array = jax.Array

__all__ = ["NoiseReport", "estimator_noise", "log_estimates"]

LOW, HIGH, TARGET = 1.0, 1.7, 1.2


class NoiseReport(NamedTuple):
    """sd(log f̂) at one parameter point for one factor, with its verdict."""

    site: str
    estimator: str
    unbiased: bool
    sd: float
    sd_error: float
    num_draws: int
    verdict: str

    def line(self) -> str:
        flag = "unbiased" if self.unbiased else "APPROXIMATE (biased)"
        return (
            f"{self.site}: {self.estimator} [{flag}] sd(log f̂) = {self.sd:.2f} ± "
            f"{self.sd_error:.2f} over {self.num_draws} noise draws; {self.verdict}"
        )


def log_estimates(
    rng_key: Array,
    exposed: expose,
    params: Mapping[str, Any],
    *args: Any,
    num_draws: int = 256,
    **kwargs: Any,
) -> dict[str, Array]:
    """log f̂ of every exposed factor at constrained ``params``, for ``num_draws`` fresh noises."""
    if not isinstance(exposed, expose):
        raise TypeError("log_estimates needs the exposed model, `zhat.expose(model, ...)`.")
    layout = exposed.describe(*args, **kwargs)
    if not layout:
        raise ValueError("The model has no intractable factor: nothing to measure.")
    params = {k: jnp.asarray(v) for k, v in params.items()}

    def one(key: Array) -> dict[str, Array]:
        noise = {
            info.noise_site: random.normal(random.fold_in(key, i), info.noise_shape)
            for i, info in enumerate(layout)
        }
        model = substitute(seed(exposed, key), data={**params, **noise})
        model_trace = trace(model).get_trace(*args, **kwargs)
        return {info.site: model_trace[info.site]["fn"].log_estimate for info in layout}

    # batches keep memory bounded: a perfect sampler's noise can be millions of numbers per draw
    return jax.lax.map(jax.jit(one), random.split(rng_key, num_draws), batch_size=8)


def _verdict(sd: float, unit: str, count: Callable[[float], int] | None) -> str:
    if not math.isfinite(sd):
        return "the estimate is not finite at these parameters: check the model and proposal"
    if LOW <= sd <= HIGH:
        return "within the recommended 1.0–1.7"
    ratio = (sd / TARGET) ** 2
    if sd > HIGH:
        more = f" (about {count(ratio)} {unit})" if count else ""
        return (
            f"WARNING: too noisy for Metropolis-type moves; chains may stick. Use about "
            f"{ratio:.1f}× as many draws{more}, or a better proposal."
        )
    if count is None or count(ratio) >= count(1.0):
        return "low; a cheaper estimator (fewer draws or annealing steps) would still do."
    return f"low; about {count(ratio)} {unit} instead of {count(1.0)} would still do and cost less."


def estimator_noise(
    rng_key: Array,
    exposed: expose,
    params: Mapping[str, Any],
    *args: Any,
    num_draws: int = 256,
    **kwargs: Any,
) -> list[NoiseReport]:
    """sd(log f̂) of every exposed factor at constrained ``params`` (e.g. posterior means)."""
    values = log_estimates(rng_key, exposed, params, *args, num_draws=num_draws, **kwargs)
    reports = []
    for info in exposed.describe(*args, **kwargs):
        x = np.asarray(values[info.site], dtype=float)
        sd = float(np.std(x, ddof=1)) if np.all(np.isfinite(x)) else math.inf
        # standard error of a sample sd, normal approximation sd/√(2(n−1)) (common practice)
        err = sd / math.sqrt(2 * (num_draws - 1)) if math.isfinite(sd) else math.inf
        size = info.estimator.num_draws
        count = (lambda r, n=size: max(1, round(r * n))) if size else None
        reports.append(
            NoiseReport(
                info.site,
                info.estimator.name,
                info.estimator.unbiased,
                sd,
                err,
                num_draws,
                _verdict(sd, "draws", count),
            )
        )
    return reports
