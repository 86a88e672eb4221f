"""Beetle presence on a grid of forest plots: an autologistic model with a soil-moisture covariate.

Invented scenario and data. A survey team checks 20 × 20 plots of a forest for a ground beetle
(present / absent). Presence is more likely on moist soil, and beetles on one plot make the
neighbouring plots more likely to hold them too (they spread between adjacent plots):

    p(x_i = 1 | neighbours) = σ( β₀ + β₁ · moisture_i + coupling · Σ_{j~i} (x_j − κ_j) ),

with κ_j = σ(β₀ + β₁ · moisture_j): the centred autologistic model, in which β keeps its
meaning as a regression on the probability of presence.

The normalizing constant sums over 2^400 maps and cannot be computed. zhat replaces the
likelihood by the annealed multiple auxiliary-variable estimator driven by exact (perfect)
draws of the model (Murray, Ghahramani & MacKay 2006), so the sampled posterior is the exact
one, and samples (β₀, β₁, coupling) together with the estimator's noise.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist

from zhat.estimators import multiple_auxiliary
from zhat.families import lattice
from zhat.model import Estimator

__all__ = [
    "BUDGET",
    "COLS",
    "PLOTS",
    "ROWS",
    "TRUE",
    "covariates",
    "estimator",
    "invented_survey",
    "model",
    "soil_moisture",
    "survey_data",
]

ROWS = COLS = 20
TRUE = {"beta": np.array([-0.4, 0.9]), "coupling": 0.8}
PLOTS = lattice.grid(ROWS, COLS)
BUDGET = 512  # most sweeps one perfect draw may take; at these couplings it needs about 16–64
SURVEY_KEY = 2026


def soil_moisture(seed: int = 7) -> np.ndarray:
    """A smooth invented moisture surface (a wet valley running across the grid), standardised."""
    rng = np.random.default_rng(seed)
    r, c = np.meshgrid(np.arange(ROWS), np.arange(COLS), indexing="ij")
    surface = np.exp(-(((r - 0.4 * c - 6.0) / 4.0) ** 2)) + 0.2 * rng.normal(size=(ROWS, COLS))
    return ((surface - surface.mean()) / surface.std()).ravel()


def covariates(moisture: np.ndarray) -> jnp.ndarray:
    """Design matrix (intercept, moisture), one row per plot."""
    return jnp.stack([jnp.ones(ROWS * COLS), jnp.asarray(moisture)], axis=1)


def invented_survey(moisture: np.ndarray, key: jax.Array) -> jnp.ndarray:
    """One exact draw of the presence map at ``TRUE`` (coupling from the past)."""
    truth = lattice.autologistic(
        PLOTS,
        coupling=TRUE["coupling"],
        covariates=covariates(moisture),
        coefficients=TRUE["beta"],
        centred=True,
    )
    sampler = truth.family.perfect_sampler
    noise = jax.random.normal(key, sampler.noise_shape(BUDGET))
    presence, exact = sampler.draw(truth.params, noise)
    if not bool(exact):
        raise RuntimeError("The perfect sampler did not coalesce; raise BUDGET.")
    return presence.reshape(ROWS, COLS)


def survey_data() -> dict[str, jnp.ndarray]:
    """The invented survey as the model's keyword arguments: ``presence`` and ``x``."""
    moisture = soil_moisture()
    return {
        "presence": invented_survey(moisture, jax.random.key(SURVEY_KEY)),
        "x": covariates(moisture),
    }


def estimator() -> Estimator:
    """Annealed multiple auxiliary-variable estimator with 8 steps and perfect draws."""
    return multiple_auxiliary(8, budget=BUDGET)


def model(presence: jnp.ndarray, x: jnp.ndarray) -> None:
    beta = numpyro.sample("beta", dist.Normal(0.0, 2.0).expand([2]).to_event(1))
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 2.0))
    numpyro.sample(
        "presence",
        lattice.autologistic(
            PLOTS, coupling=coupling, covariates=x, coefficients=beta, centred=True
        ),
        obs=presence,
    )
