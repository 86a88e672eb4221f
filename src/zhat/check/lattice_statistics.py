"""Test statistics of label maps on a lattice or an irregular map, for posterior-predictive checks.

- **Join counts** (Moran 1948, JRSS B 10(2); Cliff & Ord 1981, *Spatial Processes*): over the
  edges of the neighbour graph, each undirected edge once, the number of pairs whose labels are
  (a, a), (b, b) and (a, b) for two-label data; for more labels the numbers of same-label and
  different-label pairs.
- **Correlation by distance**: for d = 1..D, the Pearson correlation of the labels over all
  ordered pairs of sites at distance d (each unordered pair counted in both orders, so the
  statistic is symmetric). On a grid "distance d" is a lag of d along a row or a column (with
  wrap-around on a periodic grid); on an irregular graph it is the shortest-path distance.
  With more than two labels a correlation of label numbers has no meaning, so the statistic is
  the fraction of pairs at distance d whose labels agree instead. A labelling constant over
  the pairs has no correlation: the value is NaN (common practice).

Every statistic is a fixed function of the data given the observed label set, so any of them is
a valid posterior-predictive test quantity (Gelman, Meng & Stern 1996, Statistica Sinica 6(4)).
The pair tables are static numpy arrays built once per graph; the statistics are jax functions
of a label array, so they run under ``vmap``.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax.typing import ArrayLike

from zhat.families.lattice.graph import Neighbours

Array = jax.Array

__all__ = [
    "StatisticSet",
    "correlation_by_distance",
    "distance_pairs",
    "join_counts",
    "lattice_statistics",
]


class StatisticSet(NamedTuple):
    """Named scalar statistics of one data array, computed together.

    - **names** - one name per statistic.
    - **compute** - ``(x) -> (len(names),)`` array; a jax function (runs under ``vmap``).
    - **curves** - ``(title, first, last)`` index ranges of ``names`` that form a curve
      (plotted as a band, not as histograms); each point's x value is read from the last word
      of its name (a distance, a degree, "≥ 9", "inf"; see ``zhat.check.plots.curve_bins``).
    """

    names: tuple[str, ...]
    compute: Callable[[Array], Array]
    curves: tuple[tuple[str, int, int], ...] = ()


def _label_text(value: float) -> str:
    return str(int(value)) if float(value).is_integer() else f"{value:g}"


def join_counts(graph: Neighbours, x: ArrayLike, labels: Sequence[float]) -> Array:
    """Join counts of ``x`` over the edges of ``graph``, each undirected edge once.

    With two labels (a, b), in the order given: the counts of a–a, b–b and a–b pairs. With more
    labels: the counts of same-label and different-label pairs.
    """
    x = jnp.asarray(x).reshape(-1)
    if x.shape[0] != graph.num_sites:
        raise ValueError(f"x has {x.shape[0]} sites but the graph has {graph.num_sites}.")
    edges = np.asarray(graph.edges)
    left, right = x[edges[:, 0]], x[edges[:, 1]]
    dtype = jnp.result_type(float)
    same = jnp.sum(left == right).astype(dtype)
    if len(labels) == 2:
        a, b = labels
        both_a = jnp.sum((left == a) & (right == a)).astype(dtype)
        both_b = jnp.sum((left == b) & (right == b)).astype(dtype)
        mixed = jnp.sum(((left == a) & (right == b)) | ((left == b) & (right == a)))
        return jnp.stack([both_a, both_b, mixed.astype(dtype)])
    return jnp.stack([same, graph.num_edges - same])


def _grid_pairs(graph: Neighbours, d: int) -> np.ndarray:
    rows, cols = graph.shape
    idx = np.arange(rows * cols).reshape(rows, cols)
    periodic = graph.boundary == "periodic"
    pairs = []
    if d < cols and (not periodic or 2 * d <= cols):
        shifted = np.roll(idx, -d, axis=1)
        take = idx if periodic else idx[:, : cols - d]
        pairs.append(np.stack([take.ravel(), shifted[:, : take.shape[1]].ravel()], 1))
    if d < rows and (not periodic or 2 * d <= rows):
        shifted = np.roll(idx, -d, axis=0)
        take = idx if periodic else idx[: rows - d, :]
        pairs.append(np.stack([take.ravel(), shifted[: take.shape[0], :].ravel()], 1))
    if not pairs:
        return np.zeros((0, 2), dtype=np.int64)
    out = np.unique(np.sort(np.concatenate(pairs), axis=1), axis=0)
    return out[out[:, 0] != out[:, 1]]


def _hops(graph: Neighbours, max_distance: int) -> np.ndarray:
    """Shortest-path distances up to ``max_distance`` from every site at once (−1 beyond).

    Breadth-first search level by level for all sources together: the next frontier of each
    source is every not yet reached site with a neighbour in the current frontier (a gather
    through the padded neighbour table), so the cost is ``max_distance`` passes over N × N × degree.
    """
    n = graph.num_sites
    table = np.asarray(graph.table)
    dist = np.where(np.eye(n, dtype=bool), 0, -1)
    frontier = np.eye(n, dtype=bool)
    reached = frontier.copy()
    for level in range(1, int(max_distance) + 1):
        padded = np.concatenate([frontier, np.zeros((n, 1), dtype=bool)], axis=1)
        frontier = padded[:, table].any(axis=2) & ~reached
        if not frontier.any():
            break
        dist[frontier] = level
        reached |= frontier
    return dist


def distance_pairs(graph: Neighbours, max_distance: int) -> list[np.ndarray]:
    """For d = 1..max_distance, the unordered site pairs (P_d, 2) at distance d (i < j).

    Grids: lag d along a row or a column (periodic grids: lags up to half the side, so no pair
    is counted twice). Irregular graphs: shortest-path distance d. Distances with no pair give
    an empty (0, 2) array.
    """
    if int(max_distance) != max_distance or max_distance < 1:
        raise ValueError(f"max_distance must be a positive integer, got {max_distance!r}.")
    if graph.boundary is not None:
        return [_grid_pairs(graph, d) for d in range(1, int(max_distance) + 1)]
    dist = _hops(graph, int(max_distance))
    upper = np.triu(np.ones_like(dist, dtype=bool), 1)
    return [np.argwhere(upper & (dist == d)) for d in range(1, int(max_distance) + 1)]


def _pair_correlation(x: Array, pairs: np.ndarray, categorical: bool) -> Array:
    dtype = jnp.result_type(float)
    if pairs.shape[0] == 0:
        return jnp.array(jnp.nan, dtype)
    a, b = x[pairs[:, 0]], x[pairs[:, 1]]
    if categorical:
        return jnp.mean(a == b).astype(dtype)
    a, b = a.astype(dtype), b.astype(dtype)
    left, right = jnp.concatenate([a, b]), jnp.concatenate([b, a])  # both orders
    centred_l, centred_r = left - left.mean(), right - right.mean()
    var = jnp.mean(centred_l**2)
    cov = jnp.mean(centred_l * centred_r)
    return jnp.where(var > 0, cov / jnp.where(var > 0, var, 1.0), jnp.nan)


def correlation_by_distance(
    graph: Neighbours, x: ArrayLike, max_distance: int, *, categorical: bool = False
) -> Array:
    """Correlation of the labels of ``x`` at distance d = 1..max_distance, shape (max_distance,).

    ``categorical=True`` gives the fraction of pairs whose labels agree instead (for more than
    two labels). NaN where no pair is at that distance or the labels of the pairs are constant.
    """
    x = jnp.asarray(x).reshape(-1)
    if x.shape[0] != graph.num_sites:
        raise ValueError(f"x has {x.shape[0]} sites but the graph has {graph.num_sites}.")
    pairs = distance_pairs(graph, max_distance)
    return jnp.stack([_pair_correlation(x, p, categorical) for p in pairs])


def _largest_distance(graph: Neighbours, wanted: int) -> int:
    pairs = distance_pairs(graph, wanted)
    present = [d + 1 for d, p in enumerate(pairs) if p.shape[0]]
    return max(present, default=0)


def lattice_statistics(
    graph: Neighbours, labels: Sequence[float], *, site: str = "y", max_distance: int = 5
) -> StatisticSet:
    """Join counts and correlation by distance of label maps on ``graph`` as a statistic set.

    :param labels: the label values the counts distinguish (e.g. the distinct observed values).
    :param max_distance: the largest distance D; cut to the largest distance the graph has.
    """
    labels = tuple(float(v) for v in labels)
    if len(labels) == 2:
        a, b = (_label_text(v) for v in labels)
        names = [f"{site}: joins {a}–{a}", f"{site}: joins {b}–{b}", f"{site}: joins {a}–{b}"]
    else:
        names = [f"{site}: same-label joins", f"{site}: different-label joins"]
    depth = _largest_distance(graph, max_distance)
    categorical = len(labels) != 2
    what = "agreement" if categorical else "correlation"
    start = len(names)
    names += [f"{site}: {what} at distance {d}" for d in range(1, depth + 1)]
    pairs = distance_pairs(graph, depth) if depth else []

    def compute(x: Array) -> Array:
        x = jnp.asarray(x).reshape(-1)
        parts = [join_counts(graph, x, labels)]
        if pairs:
            parts.append(jnp.stack([_pair_correlation(x, p, categorical) for p in pairs]))
        return jnp.concatenate(parts)

    curves = ((f"{site}: {what} by distance", start, len(names)),) if depth else ()
    return StatisticSet(tuple(names), compute, curves)
