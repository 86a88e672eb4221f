"""Heat-bath sweeps of the spin form driven by standard-normal noise, in the fastest layout.

The heat-bath update sets s_i = +1 iff U_i < σ(2 (h_i + J n_i)), n_i = Σ_{j~i} s_j, with
U_i = Φ(z_i) (Geman & Geman 1984; see :mod:`zhat.families.lattice.sweeps`). Two things make it
cheaper without changing what it computes:

- **Thresholds in normal space.** Φ is increasing, so U_i < p ⇔ z_i < Φ⁻¹(p). When the field
  is one number per colour class, p takes one value per neighbour sum n ∈ {−D..D} (D the
  largest degree): the 2D + 1 thresholds Φ⁻¹(σ(2 (h + J n))) are computed once per sweep and
  no site needs Φ (the same idea as a precomputed table of conditional probabilities, common
  practice). A field that varies by site takes Φ(z_i) per site as before.
- **Quarter layout on grids with even sides** (with a field that is one number). Site (r, c)
  is stored in one of four (rows/2, cols/2) arrays by (r mod 2, c mod 2). The two colour
  classes of the chequerboard ((r + c) mod 2) are two quarters each, and every neighbour of a
  quarter lies in the two quarters of the other colour at the same or a shifted index, so each
  half-sweep touches only the sites it updates (no masks, no work on the other colour).

The sweep order (colour 0 then colour 1 on a bipartite graph, colour by colour otherwise) and
the noise-to-site assignment are those of :func:`zhat.families.lattice.sweeps.heat_bath_sweep`.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax.scipy.special import ndtr, ndtri

from zhat.families.lattice.graph import Neighbours
from zhat.families.lattice.sweeps import neighbour_sum

Array = jax.Array

__all__ = ["SpinSweep", "gibbs_sweeps", "spin_sweep"]


class SpinSweep(NamedTuple):
    """A heat-bath sweep in its own state layout.

    - **to_state** / **from_state** - flat spins (N,) to the layout and back.
    - **to_noise** - standard normals (..., N) to the layout (leading axes kept, for scans).
    - **sweep** - ``(state, noise) -> state``: one sweep.
    """

    to_state: Callable[[Array], Any]
    from_state: Callable[[Any], Array]
    to_noise: Callable[[Array], Any]
    sweep: Callable[[Any, Any], Any]


def _uses_quarters(nb: Neighbours) -> bool:
    if nb.boundary is None or len(nb.shape) != 2:
        return False
    rows, cols = nb.shape
    return rows % 2 == 0 and cols % 2 == 0 and rows >= 2 and cols >= 2


def _thresholds(h: Array, coupling: Array, max_degree: int, uniform: bool) -> Array:
    """σ(2 (h + J n)) for n = −D..D (index n + D), through Φ⁻¹ for normal noise."""
    n = jnp.arange(-max_degree, max_degree + 1, dtype=coupling.dtype)
    p = jax.nn.sigmoid(2.0 * (h + coupling * n))
    return p if uniform else ndtri(p)


def _updater(coupling: Array, d: int, uniform: bool) -> Callable:
    def update(z: Array, n: Array, h: Array | None, table: Array | None) -> Array:
        """New spins of one class from its noise z and neighbour sums n."""
        if table is not None:
            up = z < table[(n + d).astype(jnp.int32)]
        else:
            u = z if uniform else ndtr(z)
            up = u < jax.nn.sigmoid(2.0 * (h + coupling * n))
        return jnp.where(up, 1.0, -1.0).astype(n.dtype)

    return update


def spin_sweep(
    nb: Neighbours,
    h: Array,
    coupling: Array,
    side_signs: Array | None = None,
    *,
    uniform: bool = False,
) -> SpinSweep:
    """The sweep for field ``h`` (scalar or per site) and coupling ``J``.

    :param side_signs: on a bipartite graph, optional (2,) factors multiplying the field of
        side 0 and side 1 (the sublattice flip of coupling from the past), kept per class so
        that a scalar field keeps its threshold table.
    :param uniform: the noise is U(0, 1) instead of standard normal (for kernels that draw
        their own random numbers, which then skip the normal transform).
    """
    dtype = jnp.result_type(float)
    coupling = jnp.asarray(coupling, dtype)
    h = jnp.asarray(h, dtype)
    scalar = h.ndim == 0
    if side_signs is not None and nb.sides is None:
        raise ValueError("side_signs needs a bipartite graph.")
    # a field per site compares uniforms: Φ is applied to the noise up front, in one pass
    # (inside the sweep XLA fuses it badly), and the sweep then sees uniforms
    if scalar and _uses_quarters(nb):
        return _quarter_sweep(nb, h, coupling, side_signs, uniform)
    plan = _colour_sweep(nb, h, coupling, side_signs, scalar, uniform or not scalar)
    if scalar or uniform:
        return plan
    return plan._replace(to_noise=lambda z: plan.to_noise(ndtr(z)))


def gibbs_sweeps(nb: Neighbours, s: Array, h: Array, coupling: Array, noise: Array) -> Array:
    """``noise.shape[0]`` heat-bath sweeps from spins ``s`` (N,); noise standard normal (T, N)."""
    plan = spin_sweep(nb, h, coupling)
    if jnp.ndim(h) == 0:  # threshold tables: each row is split inside the loop (one pass)
        step = lambda q, z: (plan.sweep(q, plan.to_noise(z)), None)  # noqa: E731
        state, _ = jax.lax.scan(step, plan.to_state(s), noise)
    else:  # Φ of the whole noise first: inside the loop XLA fuses it badly
        step = lambda q, z: (plan.sweep(q, z), None)  # noqa: E731
        state, _ = jax.lax.scan(step, plan.to_state(s), plan.to_noise(noise))
    return plan.from_state(state).astype(s.dtype)


# --- any graph: colour classes ----------------------------------------------------------------
def _colour_sweep(nb, h, coupling, side_signs, scalar, uniform) -> SpinSweep:
    n, k = nb.num_sites, nb.num_colours
    d = int(nb.degree.max(initial=0))
    colours = jnp.asarray(nb.colours)
    if scalar:
        # a bipartite graph is coloured by its sides, so the flip is one factor per colour
        signs = [1.0] * k if side_signs is None else [side_signs[c] for c in range(k)]
        tables = [_thresholds(h * signs[c], coupling, d, uniform) for c in range(k)]
        site_h = None
    else:
        site_h = jnp.broadcast_to(h, (n,))
        if side_signs is not None:
            site_h = site_h * jnp.asarray(side_signs, h.dtype)[jnp.asarray(nb.sides)]
        tables = [None] * k

    update = _updater(coupling, d, uniform)

    def sweep(s: Array, z: Array) -> Array:
        for c in range(k):
            new = update(z, neighbour_sum(nb, s), site_h, tables[c])
            s = jnp.where(colours == c, new, s) if k > 1 else new
        return s

    same = lambda x: x  # noqa: E731
    return SpinSweep(same, same, same, sweep)


# --- grids with even sides: four quarters -----------------------------------------------------
def _quarter_sweep(nb, h, coupling, side_signs, uniform) -> SpinSweep:
    rows, cols = nb.shape
    periodic = nb.boundary == "periodic"

    def split(x: Array) -> tuple[Array, Array, Array, Array]:
        g = x.reshape(*x.shape[:-1], rows // 2, 2, cols // 2, 2)
        return g[..., 0, :, 0], g[..., 0, :, 1], g[..., 1, :, 0], g[..., 1, :, 1]

    def join(q: tuple[Array, Array, Array, Array]) -> Array:
        a, b, c, e = q
        top, bottom = jnp.stack([a, b], -1), jnp.stack([c, e], -1)
        g = jnp.stack([top, bottom], -3)
        return g.reshape(*g.shape[:-4], rows * cols)

    def prev(x: Array, axis: int) -> Array:
        """x at index − 1 along ``axis`` (0 or 1 of the quarter), zero or wrapped at the edge."""
        axis = x.ndim - 2 + axis
        if periodic:
            return jnp.roll(x, 1, axis)
        pad = [(0, 0)] * x.ndim
        pad[axis] = (1, 0)
        return jax.lax.slice_in_dim(jnp.pad(x, pad), 0, x.shape[axis], axis=axis)

    def next_(x: Array, axis: int) -> Array:
        axis = x.ndim - 2 + axis
        if periodic:
            return jnp.roll(x, -1, axis)
        pad = [(0, 0)] * x.ndim
        pad[axis] = (0, 1)
        return jax.lax.slice_in_dim(jnp.pad(x, pad), 1, x.shape[axis] + 1, axis=axis)

    # quarters A = (even r, even c), B = (even, odd), C = (odd, even), D = (odd, odd);
    # colour (r + c) mod 2: A and D are colour 0 (side 0), B and C colour 1. The field is one
    # number (per side), so each colour has one threshold table.
    signs = (1.0, 1.0) if side_signs is None else (side_signs[0], side_signs[1])
    tables = tuple(_thresholds(h * sign, coupling, 4, uniform) for sign in signs)

    update = _updater(coupling, 4, uniform)

    def sweep(q, z):
        a, b, c, e = q
        za, zb, zc, ze = z
        a = update(za, prev(c, 0) + c + prev(b, 1) + b, None, tables[0])
        e = update(ze, b + next_(b, 0) + c + next_(c, 1), None, tables[0])
        b = update(zb, prev(e, 0) + e + a + next_(a, 1), None, tables[1])
        c = update(zc, a + next_(a, 0) + prev(e, 1) + e, None, tables[1])
        return a, b, c, e

    return SpinSweep(split, join, split, sweep)
