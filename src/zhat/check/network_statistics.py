"""Test statistics of graphs, for posterior-predictive checks of random graph models.

Three distributions summarise how a graph is put together beyond the counts a model fits
(Hunter, Goodreau & Handcock 2008, JASA 103(481), cited from memory, on checking fit with them):

- **Degree distribution**: the number of nodes with degree 0, 1, …, D − 1 and with degree ≥ D.
  For a directed graph (row i, column j holding the tie i → j) the out-degree distribution
  (row sums) and the in-degree distribution (column sums), each over the same bins.
- **Edgewise shared partners**: over the ties, the number whose two ends have exactly k shared
  partners, k = 0, …, K − 1, and ≥ K. Undirected: each tie i–j once, its shared partners the
  nodes tied to both i and j, (A²)_ij. Directed: each tie i → j, its shared partners the nodes k
  of the outgoing two-paths i → k → j, again (A²)_ij (the usual choice for directed graphs; the
  other two-path types are not counted).
- **Geodesic distances**: the number of pairs at shortest-path distance 1, …, L − 1, at
  distance ≥ L, and the pairs with no path at all ("inf"). Undirected: unordered pairs
  {i, j}, n(n − 1)/2 of them; directed: ordered pairs (i, j), a path i → … → j, n(n − 1) of
  them. Each distribution sums to the total, so bins are never lost.

The bin limits are fixed from the observed graph (its largest degree, shared-partner count and
finite distance, plus two, within what n nodes allow), so every statistic is a fixed function
of the data and a valid posterior-predictive test quantity (Gelman, Meng & Stern 1996,
Statistica Sinica 6(4)). The statistics are jax functions of an adjacency matrix with static
shapes: they run under ``vmap`` and ``jit``. Distances come from boolean reachability: pairs
within d steps for d < L by L − 1 products with A, all reachable pairs by ⌈log₂(n − 1)⌉
squarings of I + A; that is O(n³ (L + log n)) work, fine for a few hundred nodes.
"""

from __future__ import annotations

import math

import jax
import jax.numpy as jnp
import numpy as np
from jax import lax
from jax.typing import ArrayLike

from zhat.check.lattice_statistics import StatisticSet
from zhat.families.network.graph import NetworkStructure

Array = jax.Array

__all__ = ["degree_counts", "distance_counts", "network_statistics", "shared_partner_counts"]

MARGIN = 2  # bins beyond the observed largest value, so replicates can exceed it visibly


def _float() -> jnp.dtype:
    return jnp.result_type(float)


def _square(a: ArrayLike) -> Array:
    a = jnp.asarray(a)
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise ValueError(
            f"an adjacency matrix must be square (num_nodes, num_nodes); got shape {a.shape}. "
            "Pass one row and one column per node."
        )
    return (a != 0).astype(_float())


def _bin_limit(value: int, name: str) -> int:
    if isinstance(value, bool) or int(value) != value or value < 1:
        raise ValueError(f"{name} must be a positive whole number; got {value!r}.")
    return int(value)


def _histogram(values: Array, weights: Array, last: int) -> Array:
    """Weighted counts of the integer ``values`` in bins 0..last−1 and ≥ last."""
    index = jnp.clip(jnp.round(values), 0, last).astype(jnp.int32).reshape(-1)
    return jnp.bincount(index, weights=weights.reshape(-1), length=last + 1).astype(_float())


def degree_counts(adjacency: ArrayLike, max_degree: int, *, incoming: bool = False) -> Array:
    """Numbers of nodes with degree 0, 1, …, max_degree − 1 and ≥ max_degree, shape (D + 1,).

    The degree is the row sum (the degree of an undirected graph, the out-degree of a directed
    one); ``incoming=True`` takes column sums (in-degrees) instead.
    """
    a = _square(adjacency)
    last = _bin_limit(max_degree, "max_degree")
    degree = jnp.sum(a, axis=0 if incoming else 1)
    return _histogram(degree, jnp.ones_like(degree), last)


def shared_partner_counts(
    adjacency: ArrayLike, max_partners: int, *, directed: bool = False
) -> Array:
    """Numbers of ties with 0, 1, …, max_partners − 1 and ≥ max_partners shared partners,
    shape (K + 1,).

    Undirected: each tie i–j once, partners tied to both ends. Directed: each tie i → j, the
    partners k of the two-paths i → k → j.
    """
    a = _square(adjacency)
    last = _bin_limit(max_partners, "max_partners")
    ties = a if directed else jnp.triu(a, 1)
    return _histogram(a @ a, ties, last)


def _reachable(a: Array) -> Array:
    """Whether j can be reached from i by a path (any length), boolean (n, n), diagonal True."""
    n = a.shape[0]
    squarings = math.ceil(math.log2(n - 1)) if n > 2 else 1
    step = (a + jnp.eye(n, dtype=a.dtype)) > 0

    def square(_, r):
        r = r.astype(a.dtype)
        return (r @ r) > 0

    return lax.fori_loop(0, squarings, square, step)


def distance_counts(adjacency: ArrayLike, max_distance: int, *, directed: bool = False) -> Array:
    """Numbers of pairs at shortest-path distance 1, …, L − 1, ≥ L, and unreachable ("inf"),
    shape (L + 1,) with L = ``max_distance``.

    Undirected: unordered pairs; directed: ordered pairs (i, j) with a path i → … → j.
    """
    a = _square(adjacency)
    last = _bin_limit(max_distance, "max_distance")
    n = a.shape[0]
    off = 1.0 - jnp.eye(n, dtype=a.dtype)
    halve = 1.0 if directed else 0.5  # a symmetric reachability counts each pair twice

    def count(r: Array) -> Array:
        return halve * jnp.sum(r.astype(a.dtype) * off)

    def further(r, _):  # pairs within d steps → within d + 1 steps
        r = r | ((r.astype(a.dtype) @ a) > 0)
        return r, count(r)

    within = a > 0  # pairs within one step
    counts = [jnp.zeros((1,), a.dtype)]  # pairs within 0, 1, …, L − 1 steps
    if last > 1:
        counts.append(jnp.reshape(count(within), (1,)))
    if last > 2:
        counts.append(lax.scan(further, within, None, length=last - 2)[1])
    cumulative = jnp.concatenate(counts)
    reachable = count(_reachable(a))
    pairs = halve * n * (n - 1)
    exact = jnp.diff(cumulative)
    tail = jnp.stack([reachable - cumulative[-1], pairs - reachable])
    return jnp.concatenate([exact, tail]).astype(_float())


def _observed(observed: ArrayLike, n: int, directed: bool) -> np.ndarray:
    arr = np.asarray(observed)
    if not (np.issubdtype(arr.dtype, np.number) or np.issubdtype(arr.dtype, np.bool_)):
        raise TypeError(f"the observed graph must be a numeric 0/1 matrix, got dtype {arr.dtype}.")
    if arr.shape != (n, n):
        raise ValueError(
            f"the observed graph has shape {arr.shape}, but the network has {n} nodes; pass "
            f"its ({n}, {n}) 0/1 adjacency matrix."
        )
    arr = arr.astype(float)
    bad = ~np.isin(arr, (0.0, 1.0))
    if bad.any():
        raise ValueError(
            f"adjacency entries must be 0 or 1; found {sorted(set(arr[bad].tolist()))[:5]} at "
            f"{np.argwhere(bad)[:3].tolist()}. Binarise tie weights first, e.g. (w > 0)."
        )
    if np.diag(arr).any():
        raise ValueError(
            f"the diagonal must be 0 (no self-loops); nodes "
            f"{np.flatnonzero(np.diag(arr))[:5].tolist()} are tied to themselves."
        )
    if not directed and (arr != arr.T).any():
        i, j = np.argwhere(arr != arr.T)[0].tolist()
        raise ValueError(
            f"the observed graph is not symmetric (entry [{i}, {j}] differs from [{j}, {i}]) "
            "but the network is undirected; pass directed=True for a directed graph, or "
            "numpy.maximum(a, a.T) if a tie in either direction counts."
        )
    return arr


def _largest_distance(a: np.ndarray) -> int:
    """The largest finite shortest-path distance of the observed graph (0 with no ties)."""
    n = a.shape[0]
    within, frontier, depth = np.eye(n, dtype=bool), np.eye(n, dtype=bool), 0
    for d in range(1, n):
        frontier = ((frontier.astype(float) @ a) > 0) & ~within
        if not frontier.any():
            break
        within |= frontier
        depth = d
    return depth


def network_statistics(
    structure_or_n: NetworkStructure | int,
    observed: ArrayLike,
    *,
    directed: bool = False,
    max_degree: int | None = None,
    max_partners: int | None = None,
    max_distance: int | None = None,
    site: str = "",
) -> StatisticSet:
    """Degree, edgewise shared-partner and geodesic-distance distributions as a statistic set.

    :param structure_or_n: a random graph family's ``NetworkStructure`` (its directedness is
        used) or the number of nodes.
    :param observed: the observed (n, n) 0/1 adjacency matrix; it fixes the default bins.
    :param directed: whether ties have a direction (only with a number of nodes).
    :param max_degree: D, the last degree bin "≥ D"; default the observed largest (in- or out-)
        degree + 2, at most n − 1.
    :param max_partners: K, the last shared-partner bin "≥ K"; default the observed largest
        + 2, at most n − 2 (and at least 1).
    :param max_distance: L, the last finite distance bin "≥ L"; default the observed largest
        finite distance + 2, at most n − 1.
    :param site: the site name the statistic names start with ("g: degree 3").

    Each distribution is a curve of the set (plotted as a band over its own bins).
    """
    if isinstance(structure_or_n, NetworkStructure):
        if directed and not structure_or_n.directed:
            raise ValueError(
                "directed=True was passed with an undirected network structure; the structure "
                "says whether ties have a direction, so leave directed out."
            )
        n, directed = int(structure_or_n.nodes), bool(structure_or_n.directed)
    elif isinstance(structure_or_n, (int, np.integer)) and not isinstance(structure_or_n, bool):
        n = int(structure_or_n)
    else:
        raise TypeError(
            "structure_or_n must be a random graph family's NetworkStructure or a number of "
            f"nodes; got {structure_or_n!r}."
        )
    if n < 2:
        raise ValueError(f"a network needs at least 2 nodes; got {n}.")
    a = _observed(observed, n, directed)
    if max_degree is None:
        largest = max(a.sum(0).max(), a.sum(1).max())
        max_degree = min(int(largest) + MARGIN, n - 1)
    if max_partners is None:
        partners = (a @ a)[a > 0]
        largest = int(partners.max()) if partners.size else 0
        max_partners = max(1, min(largest + MARGIN, n - 2))
    if max_distance is None:
        max_distance = min(_largest_distance(a) + MARGIN, n - 1)
    max_degree = _bin_limit(max_degree, "max_degree")
    max_partners = _bin_limit(max_partners, "max_partners")
    max_distance = _bin_limit(max_distance, "max_distance")

    prefix = f"{site}: " if site else ""

    def bins(label: str, last: int, start: int = 0) -> list[str]:
        inner = [f"{prefix}{label} {k}" for k in range(start, last)]
        return [*inner, f"{prefix}{label} ≥ {last}"]

    parts: list[tuple[str, list[str]]] = []
    if directed:
        parts.append((f"{prefix}out-degree distribution", bins("out-degree", max_degree)))
        parts.append((f"{prefix}in-degree distribution", bins("in-degree", max_degree)))
    else:
        parts.append((f"{prefix}degree distribution", bins("degree", max_degree)))
    parts.append((f"{prefix}edgewise shared partners", bins("shared partners", max_partners)))
    distances = [*bins("distance", max_distance, start=1), f"{prefix}distance inf"]
    parts.append((f"{prefix}geodesic distances", distances))

    names, curves = [], []
    for title, labels in parts:
        curves.append((title, len(names), len(names) + len(labels)))
        names += labels

    def compute(x: Array) -> Array:
        adj = jnp.asarray(x).reshape(n, n)
        out = [degree_counts(adj, max_degree)]
        if directed:
            out.append(degree_counts(adj, max_degree, incoming=True))
        out.append(shared_partner_counts(adj, max_partners, directed=directed))
        out.append(distance_counts(adj, max_distance, directed=directed))
        return jnp.concatenate(out)

    return StatisticSet(tuple(names), compute, tuple(curves))
