"""Neighbour structures: grids and irregular maps, their validation, colourings and sides.

References: the grid edge lists of ``tests/references/lattice_exact.py`` (independent code of the
same row-major convention) and networkx's own graph algorithms (``networkx.is_bipartite``,
``networkx.to_numpy_array``).
"""

import networkx as nx
import numpy as np
import pytest

from tests.references.lattice_exact import grid_edges
from zhat.families.lattice import Neighbours, from_adjacency, grid

GRIDS = [
    (1, 1, "free"),
    (1, 5, "free"),
    (3, 4, "free"),
    (5, 5, "free"),
    (3, 3, "periodic"),
    (4, 4, "periodic"),
    (3, 5, "periodic"),
    (6, 4, "periodic"),
]


def edge_set(edges) -> set[tuple[int, int]]:
    return {(min(int(i), int(j)), max(int(i), int(j))) for i, j in np.asarray(edges)}


def check_structure(nb: Neighbours, expected_edges: set[tuple[int, int]]) -> None:
    """Edges, table, degrees and colouring agree with each other and with ``expected_edges``."""
    n = nb.num_sites
    assert edge_set(nb.edges) == expected_edges
    assert nb.num_edges == len(expected_edges)
    assert np.all(nb.edges[:, 0] < nb.edges[:, 1])  # each undirected edge once, i < j
    lists = [[] for _ in range(n)]
    for i, j in expected_edges:
        lists[i].append(j)
        lists[j].append(i)
    np.testing.assert_array_equal(nb.degree, [len(row) for row in lists])
    for i, row in enumerate(lists):
        listed = nb.table[i]
        assert sorted(listed[listed < n].tolist()) == sorted(row)
        assert np.all(listed[len(row) :] == n)  # padding with the sentinel num_sites
    adjacency = nb.dense_adjacency()
    np.testing.assert_array_equal(adjacency, adjacency.T)
    assert adjacency.sum() == 2 * len(expected_edges)
    # a proper colouring: no edge inside a colour class
    colours = np.asarray(nb.colours)
    assert colours.shape == (n,)
    assert set(colours.tolist()) <= set(range(nb.num_colours))
    for i, j in expected_edges:
        assert colours[i] != colours[j], (i, j)


@pytest.mark.parametrize("rows,cols,boundary", GRIDS)
def test_grid_matches_reference_edges(rows, cols, boundary):
    nb = grid(rows, cols, boundary)
    assert nb.shape == (rows, cols)
    assert nb.boundary == boundary
    assert nb.num_sites == rows * cols
    expected = edge_set(grid_edges(rows, cols, boundary))
    check_structure(nb, expected)
    # edge counts (common practice): free r(c−1) + c(r−1), torus 2rc
    count = rows * (cols - 1) + cols * (rows - 1) if boundary == "free" else 2 * rows * cols
    assert nb.num_edges == count


@pytest.mark.parametrize("rows,cols,boundary", GRIDS)
def test_grid_bipartite_detection(rows, cols, boundary):
    nb = grid(rows, cols, boundary)
    graph = nx.Graph(list(map(tuple, nb.edges.tolist())))
    graph.add_nodes_from(range(nb.num_sites))
    assert nb.bipartite == nx.is_bipartite(graph)
    # free grids are bipartite; a torus is bipartite iff both sides are even (common practice)
    expect = boundary == "free" or (rows % 2 == 0 and cols % 2 == 0)
    assert nb.bipartite == expect
    if nb.bipartite:
        sides = np.asarray(nb.sides)
        assert set(sides.tolist()) <= {0, 1}
        for i, j in nb.edges:
            assert sides[i] != sides[j]
        assert nb.num_colours == (2 if nb.num_edges else 1)
    else:
        assert nb.sides is None
        assert nb.num_colours >= 3


@pytest.mark.parametrize("rows,cols", [(2, 3), (3, 2), (1, 4), (2, 2)])
def test_periodic_grid_needs_three_per_side(rows, cols):
    with pytest.raises(ValueError, match="at least 3 rows and 3 columns"):
        grid(rows, cols, "periodic")


def test_grid_argument_errors():
    with pytest.raises(ValueError, match="at least one row"):
        grid(0, 3)
    with pytest.raises(ValueError, match="boundary must be"):
        grid(3, 3, "torus")
    with pytest.raises(TypeError, match="integers"):
        grid(2.0, 3)


def petersen_inputs():
    graph = nx.petersen_graph()
    matrix = nx.to_numpy_array(graph, nodelist=range(10))
    lists = [sorted(graph.neighbors(i)) for i in range(10)]
    return graph, matrix, lists


def test_from_adjacency_three_inputs_agree():
    graph, matrix, lists = petersen_inputs()
    expected = edge_set(graph.edges)
    built = [
        from_adjacency(graph),
        from_adjacency(matrix),
        from_adjacency(matrix.astype(bool)),
        from_adjacency(matrix.astype(int).tolist()),
        from_adjacency(lists),
        from_adjacency(tuple(tuple(row) for row in lists)),
    ]
    for nb in built:
        assert nb.shape == (10,)
        assert nb.boundary is None
        check_structure(nb, expected)
        np.testing.assert_array_equal(nb.edges, built[0].edges)
        np.testing.assert_array_equal(nb.table, built[0].table)
        np.testing.assert_array_equal(nb.degree, np.full(10, 3))  # Petersen graph is 3-regular
    # the Petersen graph has odd (5-)cycles and chromatic number 3 (networkx: not bipartite)
    assert not nx.is_bipartite(graph)
    assert not built[0].bipartite
    assert built[0].num_colours >= 3


def test_from_networkx_relabels_nodes_in_order():
    graph = nx.Graph()
    graph.add_nodes_from(["c", "a", "b", "d"])
    graph.add_edges_from([("c", "a"), ("a", "b"), ("b", "d")])
    nb = from_adjacency(graph)
    # nodes are numbered in graph.nodes order: c=0, a=1, b=2, d=3
    assert edge_set(nb.edges) == {(0, 1), (1, 2), (2, 3)}
    assert nb.bipartite


@pytest.mark.parametrize("n,bipartite", [(3, False), (4, True), (5, False), (6, True), (7, False)])
def test_cycle_bipartite_detection(n, bipartite):
    # a cycle is bipartite iff its length is even (common practice; networkx.is_bipartite agrees)
    graph = nx.cycle_graph(n)
    assert nx.is_bipartite(graph) == bipartite
    nb = from_adjacency(graph)
    check_structure(nb, edge_set(graph.edges))
    assert nb.bipartite == bipartite
    assert nb.num_colours == (2 if bipartite else 3)


def test_graph_with_isolated_sites_and_components():
    graph = nx.disjoint_union(nx.cycle_graph(4), nx.cycle_graph(5))
    graph.add_node(9)
    nb = from_adjacency(graph)
    check_structure(nb, edge_set(graph.edges))
    assert nb.degree[9] == 0
    assert not nb.bipartite  # the 5-cycle component
    empty = from_adjacency(np.zeros((3, 3)))
    assert empty.num_edges == 0 and empty.bipartite and empty.num_colours == 1


def test_larger_irregular_graph_colouring():
    graph = nx.random_regular_graph(5, 300, seed=3)
    nb = from_adjacency(graph)
    check_structure(nb, edge_set(graph.edges))
    # greedy colouring by decreasing degree uses at most max degree + 1 colours
    # (Welsh & Powell 1967, Comput. J. 10(1))
    assert nb.num_colours <= 6


@pytest.mark.parametrize(
    "adjacency,message",
    [
        (np.ones((2, 3)), "must be square; got shape \\(2, 3\\)"),
        (np.zeros((2, 2, 2)), "must be square"),
        (np.array([[0, 1], [0, 0]]), "not symmetric: entry \\(0, 1\\)"),
        (np.array([[0, 2], [2, 0]]), "0/1 only; found values \\[2\\]"),
        (np.array([[0, -1], [-1, 0]]), "0/1 only; found values \\[-1\\]"),
        (np.array([[0.0, 0.5], [0.5, 0.0]]), "0/1 only; found values \\[0.5\\]"),
        (np.array([[0.0, np.nan], [np.nan, 0.0]]), "contains NaN"),
        (np.array([[0, 1, 0], [1, 1, 0], [0, 0, 0]]), "self-loops at sites \\[1\\]"),
        ([[1], [0, 5]], "Site 1 lists neighbour 5, not a site index in 0..1"),
        ([[-1], [0]], "Site 0 lists neighbour -1"),
        ([[1.5], [0]], "Site 0 lists neighbour 1.5"),
        ([["a"], [0]], "Site 0 lists neighbour 'a'"),
        ([[1], []], "Site 0 lists 1 as a neighbour but site 1 does not list 0"),
        ([[1, 2], [0, 1], [0]], "Site 1 lists itself as a neighbour"),
    ],
)
def test_from_adjacency_validation(adjacency, message):
    with pytest.raises(ValueError, match=message):
        from_adjacency(adjacency)


def test_from_adjacency_rejects_non_numeric_matrix():
    with pytest.raises(TypeError, match="numeric"):
        from_adjacency(np.array([["0", "1"], ["1", "0"]]))


def test_from_networkx_validation():
    with pytest.raises(ValueError, match="undirected graph; got a directed networkx graph"):
        from_adjacency(nx.DiGraph([(0, 1), (1, 0)]))
    with pytest.raises(ValueError, match="multigraph"):
        from_adjacency(nx.MultiGraph([(0, 1), (0, 1)]))
    looped = nx.cycle_graph(4)
    looped.add_edge(2, 2)
    with pytest.raises(ValueError, match="self-loops at nodes \\[2\\]"):
        from_adjacency(looped)


def test_repr_names_kind_and_size():
    assert repr(grid(3, 4)) == "Neighbours(grid (3, 4) (free), 12 sites, 17 edges)"
    assert repr(from_adjacency(nx.petersen_graph())) == "Neighbours(graph, 10 sites, 15 edges)"
