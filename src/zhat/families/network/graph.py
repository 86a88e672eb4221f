"""Graphs as 0/1 adjacency matrices: conversion and checks with errors that name the fix.

A graph is given either as a networkx ``Graph`` or ``DiGraph`` (networkx is optional and
imported only when such an object is passed; a tie is an edge, whatever attributes such as
weights it carries) or as a square 0/1 matrix with an empty diagonal: symmetric for an
undirected graph, any 0/1 pattern for a directed one, where entry [i, j] = 1 is the tie
i → j. Nodes keep the order of ``graph.nodes``.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np

__all__ = ["NetworkStructure", "adjacency", "check_adjacency", "is_directed", "node_values"]


class NetworkStructure(NamedTuple):
    """What a random graph family lives on: its number of nodes, statistics and directedness."""

    nodes: int
    statistics: tuple
    directed: bool = False


def _is_networkx(graph: Any) -> bool:
    return type(graph).__module__.startswith("networkx")


def is_directed(graph: Any, directed: bool | None = None) -> bool:
    """Whether a model of ``graph`` is directed: ``directed`` when given, else as a networkx
    graph says (``DiGraph``: directed), else undirected (a matrix or a number of nodes)."""
    if directed is not None and not isinstance(directed, (bool, np.bool_)):
        raise TypeError(
            f"directed must be True, False or None (None: as the graph says); got {directed!r}."
        )
    if directed is not None:
        return bool(directed)
    return bool(_is_networkx(graph) and graph.is_directed())


def _from_networkx(graph: Any, directed: bool) -> np.ndarray:
    import networkx as nx  # optional dependency: only needed for networkx input

    kind = type(graph).__name__
    if graph.is_directed() and not directed:
        raise ValueError(
            f"the graph is directed ({kind}), but this model is for undirected graphs. "
            "Convert it with graph.to_undirected() if ties have no direction, or pass "
            "directed=True (or leave directed unset) to model the directions."
        )
    if directed and not graph.is_directed():
        raise ValueError(
            f"directed=True, but the graph is undirected ({kind}). Pass graph.to_directed() "
            "if every tie runs both ways, or drop directed=True."
        )
    if graph.is_multigraph():
        simple = "networkx.DiGraph(graph)" if directed else "networkx.Graph(graph)"
        raise ValueError(
            f"the graph is a {kind} (repeated ties between a pair), but a tie here is present "
            f"or absent. Collapse it with {simple}."
        )
    loops = list(nx.selfloop_edges(graph))
    if loops:
        raise ValueError(
            f"the graph has {len(loops)} self-loop(s), e.g. at node {loops[0][0]!r}; a node "
            "cannot be tied to itself. Remove them with "
            "graph.remove_edges_from(networkx.selfloop_edges(graph))."
        )
    return nx.to_numpy_array(graph, nodelist=list(graph.nodes), weight=None, dtype=float)


def check_adjacency(matrix: Any, directed: bool = False) -> np.ndarray:
    """The matrix as a float array after checking it is a simple graph (entry [i, j] = 1: the
    tie i → j when ``directed``).

    Raises ``ValueError`` for a non-square or non-2-D array, NaN, entries other than 0 and 1
    (e.g. tie weights), a non-empty diagonal (self-loops) or, unless ``directed``, an
    asymmetric matrix.
    """
    arr = np.asarray(matrix)
    if arr.dtype == object or not (
        np.issubdtype(arr.dtype, np.number) or np.issubdtype(arr.dtype, np.bool_)
    ):
        raise TypeError(
            f"an adjacency matrix must be numeric, got dtype {arr.dtype}. Pass a 0/1 array "
            "or a networkx Graph."
        )
    if arr.ndim != 2 or arr.shape[0] != arr.shape[1]:
        raise ValueError(
            f"an adjacency matrix must be square (num_nodes, num_nodes); got shape {arr.shape}. "
            "Pass one row and one column per node."
        )
    arr = arr.astype(float)
    if np.isnan(arr).any():
        raise ValueError(
            f"the adjacency matrix contains NaN at {np.argwhere(np.isnan(arr))[:3].tolist()}; "
            "a missing tie must be coded 0 (absent) or 1 (present)."
        )
    bad = (arr != 0) & (arr != 1)
    if bad.any():
        values = sorted(set(arr[bad].tolist()))[:5]
        raise ValueError(
            f"adjacency entries must be 0 or 1; found {values} at {np.argwhere(bad)[:3].tolist()}. "
            "For tie weights, binarise first, e.g. (weights > 0).astype(int)."
        )
    loops = np.flatnonzero(np.diag(arr))
    if loops.size:
        raise ValueError(
            f"the diagonal must be 0 (no self-loops); nodes {loops[:5].tolist()} are tied to "
            "themselves. Set it to zero with numpy.fill_diagonal(matrix, 0)."
        )
    asym = np.argwhere(arr != arr.T)
    if asym.size and not directed:
        i, j = asym[0].tolist()
        raise ValueError(
            f"the adjacency matrix is not symmetric (entry [{i}, {j}] = {arr[i, j]:g} but "
            f"[{j}, {i}] = {arr[j, i]:g}); an undirected graph needs both. Use "
            "numpy.maximum(matrix, matrix.T) if a tie in either direction counts, or pass "
            "directed=True if entry [i, j] is the tie i → j."
        )
    return arr


def adjacency(graph: Any, directed: bool | None = None) -> np.ndarray:
    """The (num_nodes, num_nodes) 0/1 float adjacency matrix of ``graph`` (checked).

    :param graph: a networkx ``Graph`` or ``DiGraph``, or a square 0/1 matrix (symmetric
        unless directed; entry [i, j] = 1 is the tie i → j).
    :param directed: whether the graph is directed; default as a networkx graph says, and
        undirected for a matrix (then an asymmetric matrix is an error).
    """
    directed = is_directed(graph, directed)
    if _is_networkx(graph):
        return _from_networkx(graph, directed)
    return check_adjacency(graph, directed)


def node_values(graph: Any, attribute: str) -> list:
    """The values of a node attribute of a networkx graph, in node order (for covariates)."""
    if not _is_networkx(graph):
        raise TypeError(f"node_values needs a networkx graph; got {type(graph).__name__}.")
    missing = [v for v, data in graph.nodes(data=True) if attribute not in data]
    if missing:
        raise ValueError(
            f"{len(missing)} node(s) have no attribute {attribute!r}, e.g. node {missing[0]!r}. "
            "Set it on every node first."
        )
    return [data[attribute] for _, data in graph.nodes(data=True)]
