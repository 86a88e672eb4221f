"""The Fisher information of a family by simulation, with its Monte Carlo error.

For p(x | θ) = g(x; θ)/Z(θ) the score is ∇ log p = ∇ log g(x; θ) − E_θ[∇ log g], so

    I(θ) = Cov_θ[∇_θ log g(x; θ)],

which for an exponential family (log g = θ·s(x)) is Cov_θ[s(x)] = ∇² log Z(θ) (e.g. Lehmann &
Casella 1998, Theory of Point Estimation, §1.5). It is estimated from K independent simulator
chains (burn-in, then T draws each) around the pooled mean; the Monte Carlo standard error of
each entry is from the spread of the chains' own estimates (batch means over chains).
"""

from __future__ import annotations

from typing import Any, NamedTuple

import jax
import numpy as np

from zhat.fit import _chains
from zhat.fit._problem import setup, simulator

Array = jax.Array

__all__ = ["FisherInformation", "fisher_information"]


class FisherInformation(NamedTuple):
    """Simulated I(θ) = Cov_θ[∇ log g(x; θ)] and E_θ[∇ log g], with Monte Carlo errors."""

    matrix: np.ndarray  # (d, d)
    standard_error: np.ndarray  # (d, d) Monte Carlo standard error of each entry
    mean: np.ndarray  # (d,) E_θ[∇ log g(x; θ)] (E_θ[s(x)] for an exponential family)
    mean_standard_error: np.ndarray  # (d,)
    mean_covariance: np.ndarray  # (d, d) Monte Carlo covariance of ``mean``
    labels: tuple[str, ...]
    num_simulations: int


def fisher_information(
    key: Array,
    dist: Any,
    initial: Any,
    *,
    parameters: tuple[str, ...] | None = None,
    chains: int = 16,
    draws: int = 500,
    burn_in: int = 200,
    thin: int = 1,
    simulator_name: str | None = None,
) -> FisherInformation:
    """I(θ) at ``dist``'s parameters by K = ``chains`` simulator chains.

    :param initial: a configuration every chain starts from (e.g. the data); ``burn_in``
        transitions are discarded, then ``draws`` are kept, ``thin`` transitions apart.
    :param parameters: the coordinates of θ; default the free parameters the model does not
        hold.
    """
    _check_counts(chains=chains, draws=draws, burn_in=burn_in, thin=thin)
    problem = setup(dist, initial, parameters, needs="simulator")
    transition = simulator(problem.dist, simulator_name)
    runner = _chains.make_runner(problem, transition, keep_states=False)
    k_start, k_burn, k_run = jax.random.split(key, 3)
    v = problem.start
    states = _chains.start_states(problem, transition, k_start, chains)
    states = runner.burn(k_burn, v, states, burn_in)
    _, draws_ = runner.run(k_run, v, states, draws, thin)
    m = _chains.moments(draws_.scores)
    return FisherInformation(
        matrix=np.asarray(m.cov, np.float64),
        standard_error=np.asarray(m.cov_se, np.float64),
        mean=np.asarray(m.mean, np.float64),
        mean_standard_error=np.sqrt(np.diag(np.asarray(m.mean_cov, np.float64))),
        mean_covariance=np.asarray(m.mean_cov, np.float64),
        labels=problem.labels,
        num_simulations=chains * (1 + burn_in + draws * thin),
    )


def _check_counts(**counts: int) -> None:
    for name, value in counts.items():
        smallest = 2 if name == "chains" else (0 if name == "burn_in" else 1)
        if not isinstance(value, (int, np.integer)) or value < smallest:
            raise ValueError(f"{name} must be an integer ≥ {smallest}; got {value!r}.")
