"""Neighbourhood structures for lattice and map models.

One sparse structure serves regular grids and irregular maps: a padded neighbour table
(site × max degree, padded with the sentinel index ``num_sites``), the undirected edge list, and
a proper colouring of the sites. Sites of one colour have no edge between them, so a heat-bath
update of a whole colour class at once is a valid Gibbs step (the chequerboard update of a
bipartite grid is the two-colour case; common practice).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

import numpy as np

__all__ = ["Neighbours", "from_adjacency", "grid"]


@dataclasses.dataclass(frozen=True, eq=False)
class Neighbours:
    """Sparse neighbour structure of ``num_sites`` sites (static numpy arrays).

    - **shape** - shape of a label array: ``(rows, cols)`` for grids, ``(num_sites,)`` otherwise.
    - **edges** - int array (E, 2), each undirected edge once, i < j.
    - **table** - int array (N, max_degree) of neighbours, padded with ``num_sites``.
    - **degree** - int array (N,).
    - **colours** - int array (N,), a proper colouring; **num_colours** colours.
    - **sides** - int array (N,) of 0/1 sublattice labels when the graph is bipartite, else None.
    - **boundary** - ``"free"``/``"periodic"`` for grids, ``None`` for graphs.
    """

    shape: tuple[int, ...]
    edges: np.ndarray
    table: np.ndarray
    degree: np.ndarray
    colours: np.ndarray
    num_colours: int
    sides: np.ndarray | None
    boundary: str | None = None

    @property
    def num_sites(self) -> int:
        return int(self.degree.shape[0])

    @property
    def num_edges(self) -> int:
        return int(self.edges.shape[0])

    @property
    def bipartite(self) -> bool:
        return self.sides is not None

    def dense_adjacency(self) -> np.ndarray:
        """The 0/1 adjacency matrix (N, N)."""
        a = np.zeros((self.num_sites, self.num_sites), dtype=np.float32)
        a[self.edges[:, 0], self.edges[:, 1]] = 1.0
        a[self.edges[:, 1], self.edges[:, 0]] = 1.0
        return a

    def __repr__(self) -> str:
        kind = f"grid {self.shape} ({self.boundary})" if self.boundary else "graph"
        return f"Neighbours({kind}, {self.num_sites} sites, {self.num_edges} edges)"


def _build(shape: tuple[int, ...], edges: np.ndarray, boundary: str | None) -> Neighbours:
    n = int(np.prod(shape))
    edges = np.asarray(edges, dtype=np.int32).reshape(-1, 2)
    edges = np.sort(edges, axis=1)
    edges = np.unique(edges, axis=0) if edges.size else edges
    lists: list[list[int]] = [[] for _ in range(n)]
    for i, j in edges:
        lists[i].append(int(j))
        lists[j].append(int(i))
    degree = np.array([len(nb) for nb in lists], dtype=np.int32)
    width = max(int(degree.max(initial=0)), 1)
    table = np.full((n, width), n, dtype=np.int32)
    for i, nb in enumerate(lists):
        table[i, : len(nb)] = sorted(nb)
    sides = _two_colouring(lists)
    if sides is not None:
        colours, num_colours = sides.copy(), 2 if edges.size else 1
    else:
        colours, num_colours = _greedy_colouring(lists)
    return Neighbours(tuple(shape), edges, table, degree, colours, num_colours, sides, boundary)


def _two_colouring(lists: list[list[int]]) -> np.ndarray | None:
    """Sublattice labels by breadth-first search, or None when the graph has an odd cycle."""
    n = len(lists)
    side = np.full(n, -1, dtype=np.int32)
    for start in range(n):
        if side[start] >= 0:
            continue
        side[start] = 0
        queue = [start]
        while queue:
            i = queue.pop()
            for j in lists[i]:
                if side[j] < 0:
                    side[j] = 1 - side[i]
                    queue.append(j)
                elif side[j] == side[i]:
                    return None
    return side


def _greedy_colouring(lists: list[list[int]]) -> tuple[np.ndarray, int]:
    """Greedy colouring in order of decreasing degree (Welsh & Powell 1967)."""
    n = len(lists)
    colour = np.full(n, -1, dtype=np.int32)
    for i in sorted(range(n), key=lambda k: -len(lists[k])):
        used = {int(colour[j]) for j in lists[i] if colour[j] >= 0}
        c = 0
        while c in used:
            c += 1
        colour[i] = c
    return colour, int(colour.max(initial=0)) + 1


def grid(rows: int, cols: int, boundary: str = "free") -> Neighbours:
    """Nearest-neighbour grid of ``rows × cols`` sites, row-major (site r·cols + c).

    ``boundary="free"`` links horizontal and vertical neighbours inside the grid;
    ``"periodic"`` also wraps around both directions (a torus; needs rows, cols ≥ 3 so that no
    edge is doubled).
    """
    if not (isinstance(rows, (int, np.integer)) and isinstance(cols, (int, np.integer))):
        raise TypeError(f"grid(rows, cols) needs integers, got {rows!r}, {cols!r}.")
    if rows < 1 or cols < 1:
        raise ValueError(f"grid needs at least one row and column, got {rows}×{cols}.")
    if boundary not in ("free", "periodic"):
        raise ValueError(f"boundary must be 'free' or 'periodic', got {boundary!r}.")
    if boundary == "periodic" and (rows < 3 or cols < 3):
        raise ValueError(
            f"A periodic grid needs at least 3 rows and 3 columns (got {rows}×{cols}); smaller "
            "tori would link the same pair of sites twice. Use boundary='free'."
        )
    idx = np.arange(rows * cols).reshape(rows, cols)
    right = idx if boundary == "periodic" else idx[:, :-1]
    down = idx if boundary == "periodic" else idx[:-1, :]
    edges = np.concatenate(
        [
            np.stack([right.ravel(), np.roll(idx, -1, axis=1)[:, : right.shape[1]].ravel()], 1),
            np.stack([down.ravel(), np.roll(idx, -1, axis=0)[: down.shape[0], :].ravel()], 1),
        ]
    )
    return _build((rows, cols), edges, boundary)


def from_adjacency(adjacency: Any) -> Neighbours:
    """Neighbour structure of an irregular map from an adjacency matrix, list or networkx graph.

    :param adjacency: a square symmetric 0/1 matrix with a zero diagonal; a sequence whose
        entry i lists the neighbours of site i; or an undirected ``networkx.Graph`` (its nodes
        are numbered in ``graph.nodes`` order).
    """
    if _is_networkx(adjacency):
        return _from_networkx(adjacency)
    if not _is_square_array(adjacency):
        if isinstance(adjacency, Sequence) and not isinstance(adjacency, (str, bytes)):
            return _from_lists([list(row) for row in adjacency])
    matrix = np.asarray(adjacency)
    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1]:
        raise ValueError(f"An adjacency matrix must be square; got shape {matrix.shape}.")
    if not np.issubdtype(matrix.dtype, np.number) and matrix.dtype != bool:
        raise TypeError(f"An adjacency matrix must be numeric; got dtype {matrix.dtype}.")
    if np.isnan(matrix.astype(float)).any():
        raise ValueError("The adjacency matrix contains NaN.")
    if not np.isin(matrix, (0, 1)).all():
        bad = sorted(set(np.unique(matrix[~np.isin(matrix, (0, 1))]).tolist()))[:5]
        raise ValueError(f"An adjacency matrix must hold 0/1 only; found values {bad}.")
    if np.any(np.diag(matrix)):
        loops = np.flatnonzero(np.diag(matrix))[:5].tolist()
        raise ValueError(f"The adjacency matrix has self-loops at sites {loops}; zero them.")
    if not np.array_equal(matrix, matrix.T):
        i, j = np.argwhere(matrix != matrix.T)[0]
        raise ValueError(
            f"The adjacency matrix is not symmetric: entry ({i}, {j}) is {matrix[i, j]} but "
            f"({j}, {i}) is {matrix[j, i]}. Neighbour relations must go both ways."
        )
    i, j = np.nonzero(np.triu(matrix, 1))
    return _build((matrix.shape[0],), np.stack([i, j], 1), None)


def _is_square_array(obj: Any) -> bool:
    """A square 2-D array (an adjacency matrix) rather than ragged neighbour lists."""
    try:
        arr = np.asarray(obj)
    except ValueError:
        return False
    return arr.ndim == 2 and arr.shape[0] == arr.shape[1] and arr.dtype != object


def _from_lists(lists: list[list[Any]]) -> Neighbours:
    n = len(lists)
    edges = []
    for i, row in enumerate(lists):
        for j in row:
            if not isinstance(j, (int, np.integer)) or not 0 <= j < n:
                raise ValueError(f"Site {i} lists neighbour {j!r}, not a site index in 0..{n - 1}.")
            if j == i:
                raise ValueError(f"Site {i} lists itself as a neighbour; remove the self-loop.")
            if i not in lists[j]:
                raise ValueError(
                    f"Site {i} lists {j} as a neighbour but site {j} does not list {i}. "
                    "Neighbour relations must go both ways."
                )
            edges.append((i, int(j)))
    return _build((n,), np.array(edges, dtype=np.int32).reshape(-1, 2), None)


def _is_networkx(obj: Any) -> bool:
    return type(obj).__module__.startswith("networkx")


def _from_networkx(graph: Any) -> Neighbours:
    if graph.is_directed():
        raise ValueError("Lattice models need an undirected graph; got a directed networkx graph.")
    if graph.is_multigraph():
        raise ValueError("Lattice models need a simple graph; got a networkx multigraph.")
    index = {node: k for k, node in enumerate(graph.nodes)}
    loops = [u for u, v in graph.edges if u == v]
    if loops:
        raise ValueError(f"The graph has self-loops at nodes {loops[:5]}; remove them.")
    edges = np.array([(index[u], index[v]) for u, v in graph.edges], dtype=np.int32)
    return _build((len(index),), edges.reshape(-1, 2), None)
