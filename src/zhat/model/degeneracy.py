"""Stop when a model's simulations collapse to an extreme of the support (model degeneracy).

Some exponential families put almost all their mass on a few extreme data sets for most
parameter values: a random graph model with triangle or k-star terms simulates the empty or
the complete graph except in a thin region of coefficients (Handcock 2003, "Assessing
degeneracy in statistical models of social networks", CSSS working paper 39; Schweinberger
2011, JASA 106(496); both cited from memory). Every estimator or kernel that draws auxiliary
data at such a point gets draws that say nothing about the observed data: the run is wasted
and its results mislead.

A family declares a :class:`~zhat.model.unnormalized.Degeneracy`: a fill in [0, 1] per data
set. A simulated data set has **collapsed** when its fill is at most ``EDGE`` while the
observed data's fill is above ``4 × EDGE`` (collapsed to the empty end), or symmetrically at
the full end. When at least half of the simulated data sets have collapsed to one end the
model is degenerate at that parameter value (a fixed rule of ours, common practice in spirit:
the observed data must not itself be near the extreme for the check to mean anything).
"""

from __future__ import annotations

import functools
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np

from zhat.model.unnormalized import UnnormalizedDistribution

Array = jax.Array

__all__ = ["EDGE", "DegenerateModelError", "check_collapse", "simulate_and_check"]

EDGE = 0.01


class DegenerateModelError(ValueError):
    """Simulations at some parameter value collapsed to an extreme of the support."""


def _describe(params: dict[str, Any], names: tuple[str, ...]) -> str:
    parts = []
    for k in names:
        v = np.asarray(params[k], np.float64)
        parts.append(f"{k}={np.array2string(v, precision=3)}" if v.size <= 6 else k)
    return ", ".join(parts)


def check_collapse(dist: UnnormalizedDistribution, observed: Any, draws: Any, where: str) -> None:
    """Raise :class:`DegenerateModelError` when at least half of ``draws`` (a batch of simulated
    data sets, leading axis) collapsed to one end while ``observed`` is not there.

    :param where: the parameter value's origin, e.g. "the estimator's reference point".
    """
    spec = dist.family.degeneracy
    if spec is None:
        return
    obs = float(spec.fill(jnp.asarray(observed)))
    fills = np.asarray(jax.vmap(spec.fill)(jnp.asarray(draws)), np.float64).reshape(-1)
    ends = [
        (spec.empty, fills <= EDGE, obs > 4 * EDGE),
        (spec.full, fills >= 1 - EDGE, obs < 1 - 4 * EDGE),
    ]
    for name, hit, meaningful in ends:
        if meaningful and hit.mean() >= 0.5:
            raise DegenerateModelError(
                f"'{dist.family.name}': {int(hit.sum())} of {fills.size} data sets simulated at "
                f"{where} ({_describe(dist.params, dist.family.free_parameters)}) collapsed to "
                f"{name} (fill {fills.mean():.3f} against {obs:.3f} observed). The model is "
                f"degenerate there: its draws carry no information about the data. "
                f"{spec.advice}"
            )


def simulate_and_check(
    dist: UnnormalizedDistribution,
    observed: Any,
    where: str,
    *,
    key: Array | None = None,
    chains: int = 8,
    transitions: int = 10,
    simulator: str | None = None,
) -> None:
    """Run ``chains`` simulator chains from ``observed`` for ``transitions`` steps at ``dist``'s
    parameters and :func:`check_collapse` the final states (no-op for families without a
    degeneracy declaration or a simulator)."""
    family = dist.family
    if family.degeneracy is None or not family.simulators:
        return
    if any(isinstance(v, jax.core.Tracer) for v in jax.tree.leaves(dist.params)):
        return  # traced parameters (inside a compiled model): nothing concrete to simulate at
    step = family.simulators[simulator or next(iter(family.simulators))]
    y = jnp.asarray(observed)
    key = jax.random.key(0) if key is None else key
    noise = jax.random.normal(key, (transitions, chains) + tuple(step.noise_shape(y)))
    states = _run(step.step, dist.params, jnp.broadcast_to(y, (chains,) + y.shape), noise)
    check_collapse(dist, observed, states, where)


@functools.partial(jax.jit, static_argnums=0)
def _run(step, params, states, noise):
    def body(x, z):
        return jax.vmap(lambda xi, zi: step(params, xi, zi))(x, z), None

    return jax.lax.scan(body, states, noise)[0]
