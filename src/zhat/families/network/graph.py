"""Undirected graphs as 0/1 adjacency matrices: conversion and checks with errors that name the fix.

A graph is given either as a networkx ``Graph`` (networkx is optional and imported only when
such an object is passed; a tie is an edge, whatever attributes it carries) or as a square,
symmetric 0/1 matrix with an empty diagonal. Nodes keep the order of ``graph.nodes``.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np

__all__ = ["NetworkStructure", "adjacency", "check_adjacency", "node_values"]


class NetworkStructure(NamedTuple):
    """What a random graph family lives on: its number of nodes, statistics and directedness."""

    nodes: int
    statistics: tuple
    directed: bool = False


def _is_networkx(graph: Any) -> bool:
    return type(graph).__module__.startswith("networkx")


def _from_networkx(graph: Any) -> np.ndarray:
    import networkx as nx  # optional dependency: only needed for networkx input

    if graph.is_directed():
        raise ValueError(
            f"the graph is directed ({type(graph).__name__}), but this model is for undirected "
            "graphs. Convert it with graph.to_undirected() if ties have no direction."
        )
    if graph.is_multigraph():
        raise ValueError(
            f"the graph is a {type(graph).__name__} (repeated ties between a pair), but a tie "
            "here is present or absent. Collapse it with networkx.Graph(graph)."
        )
    loops = list(nx.selfloop_edges(graph))
    if loops:
        raise ValueError(
            f"the graph has {len(loops)} self-loop(s), e.g. at node {loops[0][0]!r}; a node "
            "cannot be tied to itself. Remove them with "
            "graph.remove_edges_from(networkx.selfloop_edges(graph))."
        )
    return nx.to_numpy_array(graph, nodelist=list(graph.nodes), weight=None, dtype=float)


def check_adjacency(matrix: Any) -> np.ndarray:
    """The matrix as a float array after checking it is a simple undirected graph.

    Raises ``ValueError`` for a non-square or non-2-D array, NaN, entries other than 0 and 1
    (e.g. tie weights), a non-empty diagonal (self-loops) or an asymmetric matrix.
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
    if asym.size:
        i, j = asym[0].tolist()
        raise ValueError(
            f"the adjacency matrix is not symmetric (entry [{i}, {j}] = {arr[i, j]:g} but "
            f"[{j}, {i}] = {arr[j, i]:g}); an undirected graph needs both. Use "
            "numpy.maximum(matrix, matrix.T) if a tie in either direction counts."
        )
    return arr


def adjacency(graph: Any) -> np.ndarray:
    """The (num_nodes, num_nodes) 0/1 float adjacency matrix of ``graph`` (checked).

    :param graph: a networkx ``Graph`` or a square symmetric 0/1 matrix.
    """
    if _is_networkx(graph):
        return _from_networkx(graph)
    return check_adjacency(graph)


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
