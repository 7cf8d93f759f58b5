"""Tests of the signed-graph type and its builders.

Outside references: scipy.sparse (symmetry, duplicate summation) and networkx
(`nx.cut_size` for the cut value).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from segcut.graph import SignedGraph, as_signed_graph, cut_value, graph_from_edges, validate_sides


@st.composite
def edge_lists(draw, max_vertices=12, max_edges=40):
    n = draw(st.integers(2, max_vertices))
    m = draw(st.integers(0, max_edges))
    pairs = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1))
                          .filter(lambda p: p[0] != p[1]), min_size=m, max_size=m))
    weights = draw(st.lists(st.integers(-5, 5).map(float), min_size=m, max_size=m))
    rows = np.array([p[0] for p in pairs], dtype=np.int64)
    cols = np.array([p[1] for p in pairs], dtype=np.int64)
    return n, rows, cols, np.array(weights, dtype=np.float64)


def check_csr(graph: SignedGraph):
    w = graph.to_scipy()
    if graph.n_edges:
        assert (abs(w - w.T)).max() == 0
    assert np.all(w.diagonal() == 0)
    assert np.all(np.isfinite(graph.weights))
    assert np.all(graph.weights != 0)
    for i in range(graph.n_vertices):
        row = graph.indices[graph.indptr[i]:graph.indptr[i + 1]]
        assert np.all(np.diff(row) > 0), "indices sorted and unique within each row"


@settings(max_examples=60, deadline=None)
@given(edge_lists())
def test_builder_sums_duplicates_into_a_symmetric_csr(data):
    n, rows, cols, w = data
    g = graph_from_edges(n, rows, cols, w)
    check_csr(g)
    # reference: scipy sums duplicate entries of a COO matrix
    dense = np.zeros((n, n))
    np.add.at(dense, (rows, cols), w)
    np.add.at(dense, (cols, rows), w)
    assert np.array_equal(g.to_scipy().toarray(), dense)
    assert g.total_weight == pytest.approx(w.sum())


@settings(max_examples=60, deadline=None)
@given(edge_lists(), st.randoms(use_true_random=False))
def test_cut_value_matches_networkx(data, random):
    n, rows, cols, w = data
    g = graph_from_edges(n, rows, cols, w)
    sides = np.array([random.choice((-1, 1)) for _ in range(n)])
    # reference: networkx cut_size on the same weighted graph
    h = nx.Graph()
    h.add_nodes_from(range(n))
    i, j, ww = g.edges()
    h.add_weighted_edges_from(zip(i.tolist(), j.tolist(), ww.tolist()))
    left = {v for v in range(n) if sides[v] == 1}
    expected = nx.cut_size(h, left, weight="weight") if h.number_of_edges() else 0.0
    assert cut_value(g, sides) == pytest.approx(expected, abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(edge_lists())
def test_conversions_agree(data):
    n, rows, cols, w = data
    g = graph_from_edges(n, rows, cols, w)
    from_scipy = as_signed_graph(g.to_scipy())
    from_dense = as_signed_graph(g.to_scipy().toarray())
    h = nx.Graph()
    h.add_nodes_from(range(n))
    i, j, ww = g.edges()
    h.add_weighted_edges_from(zip(i.tolist(), j.tolist(), ww.tolist()))
    from_nx = as_signed_graph(h)
    for other in (from_scipy, from_dense, from_nx):
        assert np.array_equal(other.indptr, g.indptr)
        assert np.array_equal(other.indices, g.indices)
        assert np.array_equal(other.weights, g.weights)


def test_laplacian_gives_the_cut():
    # common knowledge: cut(x) = x^T L x / 4
    g = graph_from_edges(4, [0, 1, 2, 0], [1, 2, 3, 2], [1.0, -2.0, 3.0, 0.5])
    x = np.array([1, -1, -1, 1])
    assert x @ (g.laplacian() @ x) / 4 == pytest.approx(cut_value(g, x))


def test_edges_summing_to_zero_are_dropped():
    g = graph_from_edges(3, [0, 1], [1, 0], [2.0, -2.0])
    assert g.n_edges == 0


@pytest.mark.parametrize(("args", "message"), [
    ((3, [0], [3]), "outside 0..2"),
    ((3, [-1], [1]), "outside 0..2"),
    ((3, [1], [1]), "self-loop on vertex 1"),
    ((3, [0, 1], [1]), "equal length"),
    ((3, [0], [1], [1.0, 2.0]), "one entry per edge"),
    ((3, [0], [1], [np.nan]), "non-finite weight"),
    ((3, [0], [1], [np.inf]), "non-finite weight"),
    ((3, [0.5], [1]), "vertex ids must be integers"),
    ((-1, [], []), "n_vertices must be >= 0"),
])
def test_bad_edges_are_refused(args, message):
    with pytest.raises(ValueError, match=message):
        graph_from_edges(*args)


def test_vertex_count_must_be_an_integer():
    with pytest.raises(TypeError, match="n_vertices must be an integer"):
        graph_from_edges(2.0, [0], [1])


@pytest.mark.parametrize(("matrix", "message"), [
    (np.array([[0.0, 1.0], [2.0, 0.0]]), "symmetric"),
    (np.array([[1.0, 1.0], [1.0, 0.0]]), "zero diagonal"),
    (np.zeros((2, 3)), "square"),
])
def test_bad_matrices_are_refused(matrix, message):
    with pytest.raises(ValueError, match=message):
        as_signed_graph(matrix)


def test_directed_networkx_graph_is_refused():
    with pytest.raises(TypeError, match="undirected"):
        as_signed_graph(nx.DiGraph([(0, 1)]))


def test_unsupported_type_is_refused():
    with pytest.raises(TypeError, match="cannot make a signed graph from list"):
        as_signed_graph([[0, 1], [1, 0]])


def test_sparse_input_with_explicit_duplicates():
    coo = sp.coo_array((np.array([1.0, 2.0, 1.0, 2.0]), (np.array([0, 0, 1, 1]), np.array([1, 1, 0, 0]))),
                       shape=(2, 2))
    assert as_signed_graph(coo).weights.tolist() == [3.0, 3.0]


@pytest.mark.parametrize("sides", [[1, 0, 1], [True, False, True], [1, -1, 1]])
def test_side_encodings_agree(sides):
    g = graph_from_edges(3, [0, 1], [1, 2])
    assert validate_sides(g, sides).tolist() == [1, -1, 1]


def test_bad_sides_are_refused():
    g = graph_from_edges(3, [0, 1], [1, 2])
    with pytest.raises(ValueError, match="one entry per vertex"):
        validate_sides(g, [1, -1])
    with pytest.raises(ValueError, match="sides must be -1/\\+1"):
        validate_sides(g, [1, 2, 1])


@settings(max_examples=50, deadline=None)
@given(seed=st.integers(0, 2 ** 32 - 1), n=st.integers(2, 12))
def test_weights_are_exactly_symmetric_with_duplicates_in_both_orientations(seed, n):
    # common knowledge: an undirected weight matrix is symmetric, w_ij == w_ji exactly;
    # summing duplicates given as (i, j) and (j, i) must not leave a last-bit difference
    rng = np.random.default_rng(seed)
    i, j = rng.integers(0, n, 40), rng.integers(0, n, 40)
    keep = i != j
    g = graph_from_edges(n, i[keep], j[keep], rng.normal(size=keep.sum()))
    dense = np.zeros((n, n))
    rows = np.repeat(np.arange(n), np.diff(g.indptr))
    dense[rows, g.indices] = g.weights
    assert np.array_equal(dense, dense.T)
