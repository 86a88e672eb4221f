"""Heat-bath sweeps of the spin form driven by standard-normal noise, in the fastest layout.

The heat-bath update sets s_i = +1 iff U_i < σ(2 (h_i + J n_i)), n_i = Σ_{j~i} s_j, with
U_i = Φ(z_i) (Geman & Geman 1984; see :mod:`zhat.families.lattice.sweeps`). Colour classes are
updated in order (colour 0, then 1, ...), every site of a class at once.

**Noise to sites.** Entry k of a noise row (one row per sweep) drives site ``noise_order(nb)[k]``:
the sites sorted by colour class, by increasing site index within a class. On a grid
coloured as a chequerboard ((r + c) mod 2) that is: the sites of colour 0 in row-major order,
then those of colour 1 in row-major order. (The plain reference
:func:`zhat.families.lattice.sweeps.heat_bath_sweep` takes its uniforms by site instead:
``u[noise_order(nb)] = Φ(z)`` gives it the same uniforms.)

Three things make the sweep cheap without changing what it computes:

- **Noise as levels.** The neighbour sum takes few values: n ∈ {−D, −D + 2, …, D} when every
  degree has the parity of the largest degree D, n ∈ {−D, …, D} otherwise. Write them
  v_0 < v_1 < … < v_{K−1} and g = sign(J) (+1 for J = 0). The threshold
  t_j = Φ⁻¹(σ(2 (h + J g v_j))) increases with j, and Φ is increasing, so
  U < σ(2 (h + J n)) ⇔ z < t_{j(g n)} ⇔ g n ≥ v_0 + step · #{j : z ≥ t_j}.
  Each noise value is turned once into that small integer (its *level*, counted by
  bisection over the t_j); the sweep itself then only adds neighbour spins and compares
  integers. With a field that is one number per
  colour class the K thresholds are computed once in normal space and no site needs Φ (the
  same idea as a precomputed table of conditional probabilities, common practice); with a
  field per site the comparison is in probability space, with U = Φ(z) and the K
  probabilities σ(2 (h_i + J g v_j)) of each site.
- **Sublattice layout on chequerboard grids with an even number of columns** (and an even
  number of rows when periodic). Each colour class is one int8 array, its sites in row-major
  order — the order of the noise, so the noise needs no reordering. A site's up and down
  neighbours sit one row (cols/2 entries) before and after it in the other array, its left
  and right neighbours at the same entry and at the entry before or after it (which one
  depends on the row's parity; at the ends of a row, a select takes the wrapped entry on a
  torus and 0 on a free grid). Each array carries a halo of one row and one entry at both
  ends (zeros on a free grid, the wrapped values on a torus, refreshed after each update),
  so every neighbour is a contiguous slice and a half-sweep is one fused loop, written in
  place, over the sites it updates.
- **One pass per block.** :func:`gibbs_sweeps` turns the whole (T, N) noise block into
  levels before the loop over sweeps.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax import lax
from jax.scipy.special import ndtr, ndtri

from zhat.families.lattice.graph import Neighbours
from zhat.families.lattice.sweeps import neighbour_sum

Array = jax.Array

__all__ = ["SpinSweep", "gibbs_sweeps", "noise_order", "spin_sweep"]


class SpinSweep(NamedTuple):
    """A heat-bath sweep in its own state layout.

    - **to_state** / **from_state** - spins (..., N) by site to the layout and back.
    - **to_noise** - standard normals (..., N) (the order of :func:`noise_order`) to the
      layout of the sweep (leading axes kept, for scans).
    - **sweep** - ``(state, noise) -> state``: one sweep.
    """

    to_state: Callable[[Array], Any]
    from_state: Callable[[Any], Array]
    to_noise: Callable[[Array], Any]
    sweep: Callable[[Any, Any], Any]


def noise_order(nb: Neighbours) -> np.ndarray:
    """Site driven by each entry of a noise row: sites by colour class, then by index."""
    return np.argsort(np.asarray(nb.colours), kind="stable")


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
        that a scalar field keeps its thresholds.
    :param uniform: the noise is U(0, 1) instead of standard normal (for kernels that draw
        their own random numbers, which then skip the normal transform).
    """
    dtype = jnp.result_type(float)
    coupling = jnp.asarray(coupling, dtype)
    h = jnp.asarray(h, dtype)
    if side_signs is not None and nb.sides is None:
        raise ValueError("side_signs needs a bipartite graph.")
    values = _neighbour_sums(nb)
    g = jnp.where(coupling >= 0, 1, -1)
    order = noise_order(nb)
    signs = None if side_signs is None else jnp.asarray(side_signs, dtype)
    if h.ndim == 0:
        # one list of K thresholds per colour (a bipartite graph is coloured by its sides)
        field = h if signs is None else h * signs[: nb.num_colours]
        field = jnp.broadcast_to(field, (nb.num_colours,))
        cuts = _cuts(field, coupling, g, values, uniform)  # (K, colours)
    else:
        field = jnp.broadcast_to(h, (nb.num_sites,))
        if signs is not None:
            field = field * signs[jnp.asarray(nb.sides)]
        cuts = _cuts(field[order], coupling, g, values, True)  # (K, N) in noise order
    transform = h.ndim > 0 and not uniform  # per site: compare U = Φ(z)

    def levels(z: Array, cut: Array) -> Array:
        """v_0 + step · #{j : noise ≥ cut_j} (``cut`` (K, ...) broadcast against ``z``)."""
        z = jnp.asarray(z, dtype)
        if transform:
            z = ndtr(z)
        count = _count_at_or_below(z, [_lead(c, z.ndim) for c in cut])
        return values[0] + _step(values) * count

    if _sublattice_grid(nb):
        size = nb.num_sites // 2
        # per colour: (K, 2, 1) for a scalar field, (K, 2, N/2) per site
        cut = cuts.reshape(len(values), 2, -1)
        return _sublattice_sweep(nb, lambda z: levels(z.reshape(*z.shape[:-1], 2, size), cut), g)
    if h.ndim == 0:
        cuts = cuts[:, np.asarray(nb.colours)[order]]  # (K, N): each site its colour's list
    return _colour_sweep(nb, lambda z: levels(z, cuts), g, order, dtype)


def gibbs_sweeps(nb: Neighbours, s: Array, h: Array, coupling: Array, noise: Array) -> Array:
    """``noise.shape[-2]`` heat-bath sweeps from spins ``s`` (..., N); noise standard normal
    (..., T, N), its leading axes those of ``s`` (independent chains, batched in the layout:
    faster than ``jax.vmap``, which turns the in-place updates into scatters).

    Row t drives sweep t, its entries assigned to sites as in :func:`noise_order`.
    """
    s = jnp.asarray(s)
    noise = jnp.asarray(noise)
    if noise.shape[:-2] != s.shape[:-1] or noise.shape[-1:] != s.shape[-1:]:
        raise ValueError(
            f"Noise of shape {noise.shape} for spins of shape {s.shape}: it needs shape "
            f"(*{s.shape[:-1]}, sweeps, {s.shape[-1]})."
        )
    plan = spin_sweep(nb, h, coupling)
    levels = jnp.moveaxis(plan.to_noise(noise), s.ndim - 1, 0)  # sweeps first, for the scan
    step = lambda q, m: (plan.sweep(q, m), None)  # noqa: E731
    state, _ = lax.scan(step, plan.to_state(s), levels)
    return plan.from_state(state).astype(s.dtype)


# --- levels ---------------------------------------------------------------------------------
def _neighbour_sums(nb: Neighbours) -> np.ndarray:
    """The values v_0 < … < v_{K−1} a neighbour sum can take (a superset where degrees vary)."""
    degree = np.asarray(nb.degree)
    d = int(degree.max(initial=0))
    step = 2 if np.all(degree % 2 == d % 2) else 1
    return np.arange(-d, d + 1, step)


def _step(values: np.ndarray) -> int:
    return int(values[1] - values[0]) if len(values) > 1 else 1


def _cuts(h: Array, coupling: Array, g: Array, values: np.ndarray, uniform: bool) -> Array:
    """σ(2 (h + J g v_j)) (K, *h.shape), through Φ⁻¹ unless ``uniform``."""
    n = g.astype(coupling.dtype) * jnp.asarray(values, coupling.dtype)
    n = n.reshape(-1, *(1,) * h.ndim)
    p = jax.nn.sigmoid(2.0 * (h[None] + coupling * n))
    return p if uniform else ndtri(p)


def _count_at_or_below(z: Array, cuts: list[Array]) -> Array:
    """#{j : z ≥ cuts_j} for increasing cuts, by bisection (fewer comparisons than one per cut).

    Past the middle cut, the upper half replaces the lower one elementwise (+∞ pads it).
    """
    if len(cuts) <= 2:
        return sum(((z >= c).astype(jnp.int32) for c in cuts), jnp.zeros(z.shape, jnp.int32))
    mid = len(cuts) // 2
    above = z >= cuts[mid]
    low, high = cuts[:mid], cuts[mid + 1 :]
    high = high + [jnp.asarray(jnp.inf, z.dtype)] * (len(low) - len(high))
    rest = [jnp.where(above, b, a) for a, b in zip(low, high, strict=True)]
    return jnp.where(above, mid + 1, 0) + _count_at_or_below(z, rest)


def _lead(x: Array, ndim: int) -> Array:
    """``x`` with leading unit axes up to ``ndim`` (explicit broadcasting)."""
    return x.reshape((1,) * (ndim - x.ndim) + x.shape)


# --- any graph: colour classes ----------------------------------------------------------------
def _colour_sweep(nb, levels, g, order, dtype) -> SpinSweep:
    k = nb.num_colours
    colours = jnp.asarray(nb.colours)
    position = np.argsort(order)  # entry of the noise row that drives each site

    def to_noise(z: Array) -> Array:
        return levels(z)[..., position].astype(dtype)

    def sweep(s: Array, m: Array) -> Array:
        if s.ndim > 1:  # chains on leading axes: the neighbour sums take flat arrays
            flat = jax.vmap(sweep)(s.reshape(-1, s.shape[-1]), m.reshape(-1, m.shape[-1]))
            return flat.reshape(s.shape)
        gd = g.astype(s.dtype)
        for c in range(k):
            new = jnp.where(gd * neighbour_sum(nb, s) >= m, 1.0, -1.0).astype(s.dtype)
            s = jnp.where(colours == c, new, s) if k > 1 else new
        return s

    def to_state(s: Array) -> Array:
        return jnp.asarray(s, dtype)

    return SpinSweep(to_state, lambda s: s, to_noise, sweep)


# --- chequerboard grids with an even number of columns: one array per colour ---------------
def _sublattice_grid(nb: Neighbours) -> bool:
    if nb.boundary is None or len(nb.shape) != 2 or nb.num_colours != 2:
        return False
    rows, cols = nb.shape
    if cols % 2 or (nb.boundary == "periodic" and rows % 2):
        return False
    r, c = np.indices((rows, cols))
    return bool(np.array_equal(np.asarray(nb.colours), ((r + c) % 2).reshape(-1)))


def _sublattice_sweep(nb, levels, g) -> SpinSweep:
    rows, cols = nb.shape
    w = cols // 2  # sites of one colour per row
    size = rows * w
    o = w + 1  # halo: one row and one entry at each end
    periodic = nb.boundary == "periodic"
    dtype = jnp.result_type(float)
    k = np.arange(size)
    first, last = jnp.asarray(k % w == 0), jnp.asarray(k % w == w - 1)
    # colour c, row r: the second horizontal neighbour is the entry before when r + c is even
    before = [jnp.asarray((k // w + c) % 2 == 0) for c in (0, 1)]

    def shifted(ext: Array, a: int) -> Array:
        """The other colour's spins a entries after each site (a < 0: before)."""
        return lax.slice_in_dim(ext, o + a, o + a + size, axis=-1)

    def put(ext: Array, new: Array) -> Array:
        """``new`` into the interior of ``ext``; on a torus the halo is refreshed from it."""
        ext = lax.dynamic_update_slice_in_dim(ext, new, o, axis=-1)
        if periodic:
            tail = lax.slice_in_dim(ext, size, size + o, axis=-1)
            ext = lax.dynamic_update_slice_in_dim(ext, tail, 0, axis=-1)
            head = lax.slice_in_dim(ext, o, 2 * o, axis=-1)
            ext = lax.dynamic_update_slice_in_dim(ext, head, o + size, axis=-1)
        return ext

    zero = jnp.int8(0)

    def update(other: Array, m: Array, c: int, g8: Array) -> Array:
        if periodic:
            left = jnp.where(first, shifted(other, w - 1), shifted(other, -1))
            right = jnp.where(last, shifted(other, 1 - w), shifted(other, 1))
        else:
            left = jnp.where(first, zero, shifted(other, -1))
            right = jnp.where(last, zero, shifted(other, 1))
        n = shifted(other, -w) + shifted(other, w) + shifted(other, 0)
        n = n + jnp.where(before[c], left, right)
        return jnp.where(n * g8 >= m, jnp.int8(1), jnp.int8(-1))

    def sweep(state, m):
        e0, e1 = state
        g8 = g.astype(jnp.int8)
        e0 = put(e0, update(e1, m[..., 0, :], 0, g8))
        e1 = put(e1, update(e0, m[..., 1, :], 1, g8))
        return e0, e1

    # each entry of the two arrays (halo included) as a site, −1 for the zero halo of a free
    # grid; the sites of colour c in row-major order are those of noise_order
    order = noise_order(nb)
    position = np.argsort(order)
    sources = []
    for c in (0, 1):
        inner = order[c * size : (c + 1) * size]
        if periodic:
            sources.append(np.concatenate([inner[size - o :], inner, inner[:o]]))
        else:
            sources.append(np.concatenate([np.full(o, -1), inner, np.full(o, -1)]))

    def to_state(s: Array):
        x = jnp.asarray(s).astype(jnp.int8)
        out = []
        for src in sources:
            taken = x[..., np.maximum(src, 0)]
            out.append(
                taken
                if periodic
                else jnp.where(_lead(jnp.asarray(src >= 0), taken.ndim), taken, zero)
            )
        return tuple(out)

    def from_state(state) -> Array:
        x = jnp.concatenate([shifted(e, 0) for e in state], axis=-1)
        return x[..., position].astype(dtype)

    def to_noise(z: Array) -> Array:
        return levels(z).astype(jnp.int8)

    return SpinSweep(to_state, from_state, to_noise, sweep)
