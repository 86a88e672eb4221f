"""Metropolis–Hastings toggle samplers of a random graph, driven by standard-normal noise.

Each call makes a fixed number of toggles (Snijders 2002, J. Social Structure 3(2); Morris,
Handcock & Hunter 2008, J. Stat. Softw. 24(4)); every uniform is the noise through Φ. The dyads
are the M = n(n−1)/2 unordered pairs of an undirected graph, or the M = n(n−1) ordered pairs
i ≠ j of a directed one (a toggle of i → j flips a[i, j] alone).

- ``tie_no_tie``: with probability 1/2 propose removing a uniformly chosen tie, otherwise adding
  a tie at a uniformly chosen empty dyad. With E ties the Hastings ratio is
  e^{−θ·δ} E/(M − E + 1) for a removal and e^{θ·δ} (M − E)/(E + 1) for an addition; a half with
  nothing to choose from (no ties, or a full graph) proposes staying put. It moves well in
  sparse graphs. Noise per toggle: 3 (half, dyad, acceptance).
- ``toggle``: flip a uniformly chosen dyad, accepted with probability min(1, e^{±θ·δ}).
  Noise per toggle: 2 (dyad, acceptance).

Both leave p(· | θ) invariant. ``noise_shape`` is (toggles, 3) and (toggles, 2).

Choosing a tie in O(n). With degrees d (out-degrees when directed) and E ties, pick node i with
probability d_i / Σd, then a uniformly chosen neighbour j of i (out-neighbour when directed).
One uniform u does both: the rank r = floor(u Σd) is uniform on {0, …, Σd − 1}; i is the node
whose block [d_1 + … + d_{i−1}, d_1 + … + d_i) holds r, and r minus the block's start, uniform
on {0, …, d_i − 1} given i, numbers the neighbour.
Undirected, Σd = 2E and the tie {i, j} is reached from either end:
P({i, j}) = d_i/(2E) · 1/d_i + d_j/(2E) · 1/d_j = 1/E. Directed, Σd = E and the tie i → j is
reached from i only: P = d_i/E · 1/d_i = 1/E. An empty dyad likewise: node i with probability
(n − 1 − d_i) / Σ_k (n − 1 − d_k), then a uniformly chosen non-neighbour j ≠ i. Undirected,
Σ_k (n − 1 − d_k) = n(n − 1) − 2E = 2(M − E), so P({i, j}) = 2 / (2(M − E)) = 1/(M − E);
directed, the sum is M − E and P(i → j) = 1/(M − E). Both choices are exactly uniform, so the
Hastings ratio above holds unchanged. (With the same rank r the choice is a function of u
alone; the tests push a grid of uniforms through it and count each dyad's share exactly.)
Finding i compares r with the running sums of the degrees, O(n); the neighbour is O(1): each
node keeps its partner list, a permutation of the nodes with its d_i neighbours first, the
others next and itself last, so the neighbour numbered r − W_{i−1} is entry r − W_{i−1} of
the list and the non-neighbour numbered so is entry d_i + r − W_{i−1}. Adding or removing the
tie i–j swaps j with the first non-neighbour or the last neighbour in i's list (and i in j's
list), with an inverse permutation to find j's place: O(1).

State carried through the toggles. At the start of a call the sampler computes the degrees d,
their running sums, the partner lists, the number of ties E and, when a statistic needs shared
partners (undirected triangles, weighted_shared_partners, weighted_dyad_partners),
S = A A (S_ij = Σ_k A_ik A_kj; the diagonal holds the degrees): O(n³) once per call; it is
carried packed with A as 2 S + A in one integer matrix. An accepted toggle that changes A_ij by
Δ = ±1 changes d_i, d_j by Δ and rows and columns i, j of S: with a_i, a_j the rows of A with
the dyad empty,

    S_i· += Δ (a_j + e_i),  S_j· += Δ (a_i + e_j),  S_·i += Δ a_j,  S_·j += Δ a_i

(from (A + ΔE_ij)² = A² + Δ(A E_ij + E_ij A) + Δ² E_ij², E_ij = e_i e_jᵀ + e_j e_iᵀ), O(n);
rows and columns i, j of 2 S + A are written whole (four slices), which also sets A_ij, A_ji.
From this state the change statistics (module :mod:`zhat.families.network.statistics`), with
t = A_ij and the counts taken with the dyad empty, are O(n) each:

    stars(k)                     C(d_i − t, k−1) + C(d_j − t, k−1)
    triangles                    S_ij
    weighted_degrees(α)          r^{d_i − t} + r^{d_j − t},   r = 1 − e^{−α}
    weighted_shared_partners(α)  e^α (1 − r^{S_ij}) + Σ_k a_ik a_jk (r^{S_ik − t} + r^{S_jk − t})
    weighted_dyad_partners(α)    Σ_k a_jk r^{S_ik − t a_jk} + a_ik r^{S_jk − t a_ik}

(for a common partner k, the path i–j–k is the one shared partner of i and k that the dyad
itself supplies, hence S_ik − t). Powers of r come from a table r^0 … r^n. Every other
statistic, and every statistic of a directed graph other than edges, uses ``Statistic.change``
on the adjacency matrix with the dyad cleared (O(n) or more, as that statistic costs).

The loop writes each toggle's outcome into the state at the start of the next toggle, before
any read (see :class:`ToggleMoves`), so that XLA updates the matrices in place.

Only what a simulator reads is carried: the running sums and the partner lists serve the
choice of a tie or an empty dyad, so ``toggle``, which picks its dyad directly from its
uniform, runs without them (``toggle_moves(..., lists=False)``); S is carried only for the
shared-partner statistics. XLA's CPU runtime runs each operation of the loop body in turn at a
fixed cost of tens of nanoseconds, so a toggle costs about that times the number of operations
left after fusion, a few dozen here, unless :func:`zhat.compile_small_loops` lets XLA compile
the loop whole into one function (about three times as many toggles per second on 200 nodes).
XLA never does that for a loop with a scatter, so the loop writes single entries with
dynamic_update_slice. The partner lists are built at the start of a call from running sums
rather than by sorting (a sort of the n rows costs as much as thousands of toggles).

Many chains. Under ``jax.vmap`` the simulators of graphs of at least ``IN_TURN_NODES`` nodes
run the chains one after another, each the single-chain loop (a custom batching rule,
``jax.custom_batching.custom_vmap``): batched, every row read or write of a chain's matrices
becomes a gather or scatter across the chains, whose cost grows with n until it exceeds the
single chain's whole toggle. Smaller graphs keep the batched loop, where the per-operation
cost is shared by the chains, unless the loops are compiled whole (then there is no
per-operation cost to share, and the chains run in turn at every size). The result is the
same draw either way. The output is a step function of θ, the graph and the noise, so the
simulators pass no derivative through (``lax.stop_gradient`` on their inputs).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax import lax
from jax.scipy.special import ndtr
from jax.typing import ArrayLike

from zhat import xla_options
from zhat.families.network.statistics import Statistic
from zhat.model.unnormalized import Transition

Array = jax.Array

__all__ = [
    "ToggleMoves",
    "ToggleState",
    "Update",
    "change_from_state",
    "choose_empty_dyad",
    "choose_tie",
    "run",
    "toggle_moves",
    "toggle_simulators",
]

SHARED_KINDS = ("triangles", "weighted_shared_partners", "weighted_dyad_partners")
NOISE_WIDTH = {"tie_no_tie": 3, "toggle": 2}
# From this many nodes on, vmapped chains run in turn (measured on a 2-core CPU with 8 and 32
# chains: batched state is faster at n = 128 and below, the chains in turn from n = 150 on)
IN_TURN_NODES = 150
# With loops compiled whole (zhat.compile_small_loops), the chains run in turn at every size
# (7 times as fast as batched state for 2 chains on 50 nodes) when the threshold covers a
# toggle's bytes: a few hundred per node, counted generously
LOOP_BYTES_PER_NODE = 256


def _chains_run_in_turn(n: int) -> bool:
    """Whether vmapped chains of an n-node graph run one after another (module docstring)."""
    threshold = xla_options.small_loops_threshold()
    return n >= IN_TURN_NODES or (threshold is not None and threshold >= LOOP_BYTES_PER_NODE * n)


class ToggleState(NamedTuple):
    """What the toggles carry (counts int32):

    - **matrix** - A, (n, n) float 0/1, when no statistic needs S; otherwise None and
    - **packed** - 2 S + A, (n, n) int32, S = A A: one row read gives a row of both and one row
      or column write sets both; the properties **adjacency** (A, float) and **shared** (S, or
      None without it) read either layout,
    - **degrees** - d (out-degrees when directed) and **cumulative** - their running sums,
    - **partners** - (n, n): row i is a permutation of the nodes, the d_i neighbours of i first
      (out-neighbours when directed), then the other nodes, i itself last; **position** its
      inverse, position[i, partners[i, p]] = p,
    - **ties** - E.

    ``cumulative``, ``partners`` and ``position`` are None in the state of
    ``toggle_moves(..., lists=False)``.
    """

    matrix: Array | None
    degrees: Array
    cumulative: Array
    partners: Array
    position: Array
    packed: Array | None
    ties: Array

    @property
    def adjacency(self) -> Array:
        if self.packed is None:
            return self.matrix
        return (self.packed & 1).astype(jnp.result_type(float))

    @property
    def shared(self) -> Array | None:
        return None if self.packed is None else self.packed >> 1


class Update(NamedTuple):
    """One toggle's outcome, to be written into the state: the dyad (i, j), its new value, the
    change of A_ij (−1, 0 or 1), the entries to write into ``partners`` (``position`` gets the
    inverse) as one (3, k) array of rows, slots and nodes (None without partner lists), and
    the new rows i and j of the packed 2 S + A (None without S)."""

    i: Array
    j: Array
    value: Array
    step: Array
    lists: Array
    shared_i: Array | None
    shared_j: Array | None


class ToggleMoves(NamedTuple):
    """Pure functions of one model: ``init(a) -> state``; the single toggles
    ``move(theta, state, u) -> update`` (u: the uniforms Φ(z) of one toggle), which only read the
    state; ``apply(state, update) -> state``, which only writes; ``idle(state)``, an update
    changing nothing.

    :func:`run` applies each update at the start of the next toggle, so that in each step of
    the loop every write to the matrices comes before every read and XLA updates them in
    place (reading an old matrix after writing a new one would make it copy it: O(n²))."""

    init: Callable[[Array], ToggleState]
    tie_no_tie: Callable[[Array, ToggleState, Array], Update]
    toggle: Callable[[Array, ToggleState, Array], Update]
    apply: Callable[[ToggleState, Update], ToggleState]
    idle: Callable[[ToggleState], Update]


def _matrix(x: ArrayLike, n: int) -> Array:
    return jnp.asarray(x).reshape(n, n).astype(jnp.result_type(float))


def _needs_shared(stats: tuple[Statistic, ...], directed: bool) -> bool:
    return not directed and any(s.kind in SHARED_KINDS for s in stats)


def _init(a: Array, shared: bool, directed: bool, lists: bool) -> ToggleState:
    n = a.shape[0]
    degrees = jnp.rint(jnp.sum(a, axis=1)).astype(jnp.int32)
    total = jnp.sum(degrees)
    ties = total if directed else total // 2
    cumulative = partners = position = None
    if lists:
        # neighbours first, then the other nodes, each in node order, the node itself last:
        # a node's place is the count of its kind before it (running sums, not a sort, which
        # would cost more than thousands of toggles), and the lists are its inverse
        tie = a > 0.5
        other = ~tie & ~jnp.eye(n, dtype=bool)
        t, o = tie.astype(jnp.int32), other.astype(jnp.int32)
        before_tie = jnp.cumsum(t, axis=1) - t
        before_other = degrees[:, None] + jnp.cumsum(o, axis=1) - o
        position = jnp.where(tie, before_tie, jnp.where(other, before_other, n - 1))
        nodes = jnp.broadcast_to(jnp.arange(n, dtype=jnp.int32), (n, n))
        partners = jnp.zeros((n, n), jnp.int32).at[nodes.T, position].set(nodes)
        cumulative = jnp.cumsum(degrees)
    packed = None
    if shared:  # 2 S + A in one int32 matrix: one row read gives both, one write sets both
        # S in single precision: its counts (at most n) are exact, and the product is faster
        single = a.astype(jnp.float32)
        packed = 2 * jnp.rint(single @ single).astype(jnp.int32) + jnp.rint(a).astype(jnp.int32)
        a = None
    return ToggleState(a, degrees, cumulative, partners, position, packed, ties.astype(jnp.int32))


def _choose_dyad(state: ToggleState, u: Array, tie: Array) -> tuple[Array, Array]:
    """A uniformly chosen tie (``tie`` true) or empty dyad (i, j) from one uniform (module
    docstring): the rank r = floor(u W_n) among the cumulative weights W (degrees, or numbers
    of non-neighbours) gives the node i whose block [W_{i−1}, W_i) holds r, and r − W_{i−1}
    the slot in i's neighbours (or in its other nodes). O(n) for i, O(1) for the partner."""
    n = state.degrees.shape[0]
    spare = (jnp.arange(1, n + 1, dtype=jnp.int32)) * (n - 1) - state.cumulative
    cum = jnp.where(tie, state.cumulative, spare)
    total = cum[-1]
    rank = jnp.floor(u * total.astype(u.dtype)).astype(jnp.int32)
    rank = jnp.clip(rank, 0, jnp.maximum(total - 1, 0))
    i = jnp.minimum(jnp.sum(cum <= rank, dtype=jnp.int32), n - 1)
    d = state.degrees[i]
    before = cum[i] - jnp.where(tie, d, n - 1 - d)
    slot = jnp.where(tie, rank - before, d + rank - before)
    return i, state.partners[i, jnp.clip(slot, 0, n - 2)]


def choose_tie(state: ToggleState, u: ArrayLike) -> tuple[Array, Array]:
    """A uniformly chosen tie (i, j) from one uniform: node i by its degree, then a uniform
    neighbour (out-degree and out-neighbour when directed). Meaningless without ties."""
    return _choose_dyad(state, jnp.asarray(u), jnp.asarray(True))


def choose_empty_dyad(state: ToggleState, u: ArrayLike) -> tuple[Array, Array]:
    """A uniformly chosen empty dyad (i, j), i ≠ j, from one uniform: node i by its number of
    non-neighbours n − 1 − d_i, then a uniform non-neighbour. Meaningless for a full graph."""
    return _choose_dyad(state, jnp.asarray(u), jnp.asarray(False))


def _power_table(stat: Statistic, n: int, dtype) -> Array:
    r = 1.0 - math.exp(-stat.decay)
    return jnp.asarray(r ** np.arange(n + 1, dtype=float), dtype)


def _choose(d: Array, k: int) -> Array:
    out = jnp.ones_like(d)
    for m in range(k):
        out = out * (d - m) / (m + 1)
    return jnp.maximum(out, 0.0) if k else out


class _Dyad(NamedTuple):
    """What the change statistics of dyad (i, j) read, before the toggle: t = A_ij, the rows
    of A with the dyad empty, the degrees with the dyad empty and the rows of S."""

    i: Array
    j: Array
    t: Array
    row_i: Array
    row_j: Array
    degree_i: Array
    degree_j: Array
    shared_i: Array | None
    shared_j: Array | None


def _read(state: ToggleState, i: Array, j: Array, directed: bool) -> _Dyad:
    p = state.packed
    s_i = s_j = None
    if p is None:  # no statistic reads the rows of A (and no S to update from them)
        t = state.matrix[i, j]
        row_i = row_j = None
    else:
        p_i, p_j = p[i], p[j]
        dtype = jnp.result_type(float)
        t = (p_i[j] & 1).astype(dtype)
        nodes = jnp.arange(p.shape[0])
        row_i = jnp.where(nodes == j, 0, p_i & 1).astype(dtype)  # elementwise: no row copy
        row_j = jnp.where(nodes == i, 0, p_j & 1).astype(dtype)
        s_i, s_j = p_i >> 1, p_j >> 1
    ti = t.astype(jnp.int32)
    return _Dyad(
        i,
        j,
        t,
        row_i,
        row_j,
        state.degrees[i] - ti,
        state.degrees[j] - ti,
        s_i,
        s_j,
    )


def _changes(
    stats: tuple[Statistic, ...],
    dyad: _Dyad,
    cleared: Callable[[], Array],
    directed: bool,
    n: int,
) -> Array:
    """δ_ij from what was read of the dyad; ``cleared()`` gives the adjacency matrix with the
    dyad empty, for the statistics without a fast form (and all of a directed graph)."""
    dtype = dyad.t.dtype
    i, j, ai, aj = dyad.i, dyad.j, dyad.row_i, dyad.row_j
    ti = dyad.t.astype(jnp.int32)
    di, dj = dyad.degree_i, dyad.degree_j
    out = []
    a = None
    for s in stats:
        if s.kind == "edges":
            out.append(jnp.ones((), dtype))
        elif directed:
            a = cleared() if a is None else a
            out.append(s.change(a, i, j, True))
        elif s.kind == "stars":
            k = s.order - 1
            out.append(_choose(di.astype(dtype), k) + _choose(dj.astype(dtype), k))
        elif s.kind == "weighted_degrees":
            power = _power_table(s, n, dtype)
            out.append(power[di] + power[dj])
        elif s.kind == "triangles":
            out.append(dyad.shared_i[j])
        elif s.kind == "weighted_shared_partners":
            power = _power_table(s, n, dtype)
            si, sj = dyad.shared_i, dyad.shared_j
            own = math.exp(s.decay) * (1.0 - power[si[j]])
            near = power[jnp.maximum(si - ti, 0)] + power[jnp.maximum(sj - ti, 0)]
            out.append(own + jnp.sum(ai * aj * near))
        elif s.kind == "weighted_dyad_partners":
            power = _power_table(s, n, dtype)
            si, sj = dyad.shared_i, dyad.shared_j
            to_i = power[jnp.maximum(si - ti * aj.astype(jnp.int32), 0)]
            to_j = power[jnp.maximum(sj - ti * ai.astype(jnp.int32), 0)]
            out.append(jnp.sum(aj * to_i + ai * to_j))
        else:
            a = cleared() if a is None else a
            out.append(s.change(a, i, j, False))
    return jnp.stack([jnp.asarray(v, dtype) for v in out])


def _cleared(a: Array, i: Array, j: Array, directed: bool) -> Array:
    zero = jnp.zeros((), a.dtype)
    return _put(a, i, j, zero) if directed else _put(_put(a, i, j, zero), j, i, zero)


def change_from_state(
    stats: tuple[Statistic, ...],
    state: ToggleState,
    i: ArrayLike,
    j: ArrayLike,
    *,
    directed: bool = False,
) -> Array:
    """The vector δ_ij(A) from a toggle state (the dyad may hold a tie; ``state`` from
    ``toggle_moves(n, stats, directed).init``); equals
    :func:`~zhat.families.network.statistics.change_statistics` up to rounding."""
    i, j = jnp.asarray(i, jnp.int32), jnp.asarray(j, jnp.int32)
    dyad = _read(state, i, j, directed)
    n = state.degrees.shape[0]
    return _changes(stats, dyad, lambda: _cleared(state.adjacency, i, j, directed), directed, n)


def _swap(state: ToggleState, v: Array, w: Array, step: Array):
    """The entries moving w into (step 1) or out of (step −1) the neighbours at the front of
    ``partners[v]``: w swaps places with the first non-neighbour or the last neighbour."""
    p = state.position[v, w]
    d = state.degrees[v]
    last = state.partners.shape[1] - 1
    # both candidates are read before the step is known, so that these reads do not wait for
    # (and XLA does not fuse into them) the whole acceptance computation
    first_other = state.partners[v, jnp.minimum(d, last)]
    last_neighbour = state.partners[v, jnp.maximum(d - 1, 0)]
    q = jnp.where(step > 0, d, jnp.where(step < 0, d - 1, p))
    x = jnp.where(step > 0, first_other, jnp.where(step < 0, last_neighbour, w))
    return jnp.stack([v, v]), jnp.stack([p, q]), jnp.stack([x, w])


def _put(x: Array, i: Array, j: Array, value: Array) -> Array:
    """``x`` with entry (i, j) set to ``value``, as a dynamic_update_slice."""
    return lax.dynamic_update_slice(x, jnp.reshape(value, (1, 1)).astype(x.dtype), (i, j))


def toggle_moves(
    n: int, stats: tuple[Statistic, ...], directed: bool = False, lists: bool = True
) -> ToggleMoves:
    """The single toggles of a model on n nodes (see the module docstring). With ``lists``
    false the state carries no running sums and no partner lists (``cumulative``,
    ``partners`` and ``position`` are None): enough for ``toggle``, not for ``tie_no_tie``."""
    shared = _needs_shared(stats, directed)
    m_dyads = n * (n - 1) if directed else n * (n - 1) // 2
    rows, cols = (jnp.asarray(v, jnp.int32) for v in np.triu_indices(n, k=1))
    nodes = jnp.arange(n, dtype=jnp.int32)

    def outcome(state, dyad, accept):
        i, j, t = dyad.i, dyad.j, dyad.t
        new = jnp.where(accept, 1.0 - t, t)
        step = (new - t).astype(jnp.int32)
        entries = None
        if lists:
            moves = [_swap(state, i, j, step)]
            if not directed:
                moves.append(_swap(state, j, i, step))
            entries = jnp.stack([jnp.concatenate(parts) for parts in zip(*moves, strict=True)])
        s_i = s_j = None
        if shared:  # the new rows i, j of the packed 2 S + A
            ai, aj = dyad.row_i.astype(jnp.int32), dyad.row_j.astype(jnp.int32)
            tie = new.astype(jnp.int32)
            s_i = 2 * (dyad.shared_i + step * (aj + (nodes == i))) + ai + tie * (nodes == j)
            s_j = 2 * (dyad.shared_j + step * (ai + (nodes == j))) + aj + tie * (nodes == i)
        return Update(i, j, new, step, entries, s_i, s_j)

    def propose(theta, state, i, j, possible, u_accept, weigh):
        """Metropolis–Hastings on toggling (i, j); ``weigh(gain, t)`` is the log ratio."""
        dyad = _read(state, i, j, directed)
        cleared = lambda: _cleared(state.adjacency, i, j, directed)  # noqa: E731
        delta = _changes(stats, dyad, cleared, directed, n)
        accept = possible & (jnp.log(u_accept) < weigh(jnp.dot(theta, delta), dyad.t))
        return outcome(state, dyad, accept)

    def apply(state, update):
        i, j, new, step = update.i, update.j, update.value, update.step
        change = step * (nodes == i)
        after = step * (nodes >= i)
        a = state.matrix
        if directed:
            a = _put(a, i, j, new)
        else:
            if not shared:
                a = _put(_put(a, i, j, new), j, i, new)
            change = change + step * (nodes == j)
            after = after + step * (nodes >= j)
        cumulative, partners, position = state.cumulative, state.partners, state.position
        if lists:
            # one entry at a time (dynamic_update_slice, not a scatter: a loop with a scatter
            # cannot be compiled as one function, see compile_small_loops)
            r, q, w = update.lists
            for k in range(r.shape[0]):
                partners = _put(partners, r[k], q[k], w[k])
                position = _put(position, r[k], w[k], q[k])
            cumulative = cumulative + after
        s = state.packed
        if shared:  # 2 S + A stays symmetric: the new columns i, j are the new rows
            ri, rj = update.shared_i, update.shared_j
            zero = jnp.zeros((), jnp.int32)
            s = lax.dynamic_update_slice(s, ri[None, :], (i, zero))
            s = lax.dynamic_update_slice(s, rj[None, :], (j, zero))
            s = lax.dynamic_update_slice(s, ri[:, None], (zero, i))
            s = lax.dynamic_update_slice(s, rj[:, None], (zero, j))
        return ToggleState(
            a,
            state.degrees + change,
            cumulative,
            partners,
            position,
            s,
            state.ties + step,
        )

    def idle(state):
        i, j = jnp.zeros((), jnp.int32), jnp.ones((), jnp.int32)
        return outcome(state, _read(state, i, j, directed), jnp.asarray(False))

    def tie_no_tie(theta, state, u):
        if not lists:
            raise ValueError("tie_no_tie chooses ties from the partner lists; use lists=True.")
        ties = state.ties
        remove = u[0] < 0.5
        i, j = _choose_dyad(state, u[1], remove)
        count = jnp.where(remove, ties, m_dyads - ties)
        ties_f = ties.astype(theta.dtype)

        # the counts selected before the logs: two logs, not four, in the loop body
        chosen = jnp.where(remove, ties_f, m_dyads - ties_f)
        other = jnp.where(remove, m_dyads - ties_f + 1.0, ties_f + 1.0)

        def weigh(gain, t):  # −inf where the half has nothing to choose (never accepted)
            return jnp.where(remove, -gain, gain) + jnp.log(chosen) - jnp.log(other)

        return propose(theta, state, i, j, count > 0, u[2], weigh)

    def toggle(theta, state, u):
        m = jnp.clip(jnp.floor(u[0] * m_dyads), 0, m_dyads - 1).astype(jnp.int32)
        if directed:  # the ordered pairs i ≠ j, row by row
            i = m // (n - 1)
            j = (i + 1 + m % (n - 1)) % n
        else:
            i, j = rows[m], cols[m]

        def weigh(gain, t):
            return jnp.where(t > 0, -gain, gain)

        return propose(theta, state, i, j, jnp.asarray(True), u[1], weigh)

    return ToggleMoves(lambda a: _init(a, shared, directed, lists), tie_no_tie, toggle, apply, idle)


def run(
    moves: ToggleMoves,
    move: Callable[[Array, ToggleState, Array], Update],
    theta: Array,
    state: ToggleState,
    noise: Array,
) -> ToggleState:
    """The state after one toggle per row of ``noise`` (``move`` one of ``moves``' toggles)."""

    def body(carry, u):
        state = lax.optimization_barrier(moves.apply(*carry))
        return (state, move(theta, state, u)), None

    uniforms = ndtr(noise)  # all at once: fewer small operations inside the loop
    state, pending = lax.scan(body, (state, moves.idle(state)), uniforms)[0]
    return moves.apply(state, pending)


def _chains_in_turn(simulate: Callable[[Array, Array, Array], Array], in_turn: bool):
    """``simulate(theta, a, noise)`` whose ``jax.vmap`` runs the chains one after another
    (``lax.map``, each chain the single-chain loop) when ``in_turn``, else as ``jax.vmap``
    would (one loop over batched state).

    Batched, each row read and each write of a chain's matrices becomes a gather or scatter
    across the chains, whose cost grows with n; run in turn, the chains keep the single-chain
    rate. Unbatched arguments are broadcast; nested ``vmap`` nests the maps."""
    f = jax.custom_batching.custom_vmap(simulate)

    @f.def_vmap
    def rule(axis_size, in_batched, *args):
        if not in_turn:
            return jax.vmap(simulate, in_axes=[0 if b else None for b in in_batched])(*args), True
        args = tuple(
            x if b else jnp.broadcast_to(x, (axis_size, *jnp.shape(x)))
            for x, b in zip(args, in_batched, strict=True)
        )
        return lax.map(lambda xs: f(*xs), args), True

    return f


def toggle_simulators(
    n: int, stats: tuple[Statistic, ...], toggles: int, directed: bool = False
) -> dict[str, Transition]:
    """The simulators ``{"tie_no_tie", "toggle"}`` of a model on n nodes (``toggles`` per call;
    ``directed`` for a directed graph, whose dyads are the ordered pairs)."""
    if not isinstance(directed, (bool, np.bool_)):
        raise TypeError(f"directed must be True or False; got {directed!r}.")
    stats = tuple(stats)
    by_name = {
        "tie_no_tie": toggle_moves(n, stats, bool(directed)),
        "toggle": toggle_moves(n, stats, bool(directed), lists=False),
    }

    def transition(name):
        moves = by_name[name]
        move = getattr(moves, name)
        width = NOISE_WIDTH[name]
        simulate = _chains_in_turn(
            lambda theta, a, noise: run(moves, move, theta, moves.init(a), noise).adjacency,
            _chains_run_in_turn(n),
        )

        def step(params, x, noise):
            theta = jnp.asarray(params["coefficients"], jnp.result_type(float))
            if theta.shape != (len(stats),):
                raise ValueError(
                    f"coefficients must have shape ({len(stats)},), one per statistic "
                    f"{[s.name for s in stats]}; got shape {theta.shape}."
                )
            noise = jnp.asarray(noise)
            if noise.shape != (toggles, width):
                raise ValueError(
                    f"the {name} simulator takes noise of shape ({toggles}, {width}) (toggles, "
                    f"noise per toggle); got {noise.shape}. Use noise_shape(x)."
                )
            # the graph is a step function of its inputs: no derivative flows through it
            a = simulate(*(lax.stop_gradient(v) for v in (theta, _matrix(x, n), noise)))
            return a.reshape(jnp.shape(x)).astype(jnp.result_type(x))

        return Transition(step, lambda x: (toggles, width))

    return {"tie_no_tie": transition("tie_no_tie"), "toggle": transition("toggle")}
