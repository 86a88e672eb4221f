"""Metropolis–Hastings toggle samplers of a random graph, driven by standard-normal noise.

Each call makes a fixed number of toggles (Snijders 2002, J. Social Structure 3(2); Morris,
Handcock & Hunter 2008, J. Stat. Softw. 24(4)); every uniform is the noise through Φ:

- ``tie_no_tie``: with probability 1/2 propose removing a uniformly chosen tie, otherwise adding
  a tie at a uniformly chosen empty dyad. With E ties among M = n(n−1)/2 dyads the Hastings
  ratio is e^{−θ·δ} E/(M − E + 1) for a removal and e^{θ·δ} (M − E)/(E + 1) for an addition; a
  half with nothing to choose from (no ties, or a full graph) proposes staying put. Choosing the
  tie scans the dyads: O(n²) per toggle. It moves well in sparse graphs.
- ``toggle``: flip a uniformly chosen dyad, accepted with probability min(1, e^{±θ·δ}); O(n)
  per toggle.

Both leave p(· | θ) invariant.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
from jax import lax
from jax.scipy.special import ndtr
from jax.typing import ArrayLike

from zhat.families.network.statistics import Statistic, change_statistics
from zhat.model.unnormalized import Transition

Array = jax.Array

__all__ = ["toggle_simulators"]


def _matrix(x: ArrayLike, n: int) -> Array:
    return jnp.asarray(x).reshape(n, n).astype(jnp.result_type(float))


def toggle_simulators(n: int, stats: tuple[Statistic, ...], toggles: int) -> dict[str, Transition]:
    """The simulators ``{"tie_no_tie", "toggle"}`` of a model on n nodes (``toggles`` per call)."""
    rows, cols = (jnp.asarray(v) for v in np.triu_indices(n, k=1))
    m_dyads = rows.size

    def flip(a, i, j, accept):
        new = jnp.where(accept, 1.0 - a[i, j], a[i, j])
        return a.at[i, j].set(new).at[j, i].set(new)

    def tie_no_tie(theta, a, z):
        u = ndtr(z)
        upper = a[rows, cols]
        ties = jnp.sum(upper)
        remove = u[0] < 0.5
        count = jnp.where(remove, ties, m_dyads - ties)
        chosen = jnp.where(remove, upper, 1.0 - upper)
        rank = jnp.clip(jnp.floor(u[1] * count), 0.0, jnp.maximum(count - 1.0, 0.0))
        m = jnp.clip(jnp.searchsorted(jnp.cumsum(chosen), rank, side="right"), 0, m_dyads - 1)
        i, j = rows[m], cols[m]
        gain = jnp.dot(theta, change_statistics(stats, a, i, j))
        log_ratio = jnp.where(  # −inf where the half has nothing to choose (never accepted)
            remove,
            -gain + jnp.log(ties) - jnp.log(m_dyads - ties + 1.0),
            gain + jnp.log(m_dyads - ties) - jnp.log(ties + 1.0),
        )
        accept = (count > 0) & (jnp.log(u[2]) < log_ratio)
        return flip(a, i, j, accept)

    def toggle(theta, a, z):
        u = ndtr(z)
        m = jnp.clip(jnp.floor(u[0] * m_dyads).astype(jnp.int32), 0, m_dyads - 1)
        i, j = rows[m], cols[m]
        gain = jnp.dot(theta, change_statistics(stats, a, i, j))
        log_ratio = jnp.where(a[i, j] > 0, -gain, gain)
        return flip(a, i, j, jnp.log(u[1]) < log_ratio)

    def transition(move, width):
        def step(params, x, noise):
            theta = jnp.asarray(params["coefficients"], jnp.result_type(float))
            a = _matrix(x, n)
            a = lax.scan(lambda a, z: (move(theta, a, z), None), a, noise)[0]
            return a.reshape(jnp.shape(x)).astype(jnp.result_type(x))

        return Transition(step, lambda x: (toggles, width))

    return {"tie_no_tie": transition(tie_no_tie, 3), "toggle": transition(toggle, 2)}
