"""Tests of the 1-flip local search (method "local").

Outside references: networkx `one_exchange` (a slow, independent 1-exchange local
search), the gain formula from its definition (tests/checks.py), and textbook facts
(common knowledge).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from networkx.algorithms.approximation.maxcut import one_exchange

from checks import assert_valid_cut, reference_gains
from segcut.graph import cut_value, graph_from_edges
from segcut.maxcut import solve_maxcut
from segcut.maxcut.local import descend, flip_gains


def random_graph(n, degree, seed, *, signed=True):
    rng = np.random.default_rng(seed)
    m = max(1, n * degree // 2)
    i = rng.integers(0, n, m)
    j = rng.integers(0, n, m)
    keep = i != j
    w = rng.normal(size=keep.sum()) if signed else rng.uniform(0.1, 3.0, size=keep.sum())
    return graph_from_edges(n, i[keep], j[keep], w)


def to_networkx(graph):
    h = nx.Graph()
    h.add_nodes_from(range(graph.n_vertices))
    i, j, w = graph.edges()
    h.add_weighted_edges_from(zip(i.tolist(), j.tolist(), w.tolist()))
    return h


@settings(max_examples=40, deadline=None)
@given(n=st.integers(2, 60), seed=st.integers(0, 2 ** 32 - 1), signed=st.booleans())
def test_gains_match_their_definition(n, seed, signed):
    g = random_graph(n, 4, seed, signed=signed)
    x = np.random.default_rng(seed).choice([-1, 1], size=n)
    assert np.allclose(flip_gains(g, x), reference_gains(g, x), atol=1e-12)


@settings(max_examples=40, deadline=None)
@given(n=st.integers(2, 80), seed=st.integers(0, 2 ** 32 - 1), signed=st.booleans())
def test_result_is_a_local_optimum(n, seed, signed):
    g = random_graph(n, 5, seed, signed=signed)
    result = solve_maxcut(g, method="local", rng=seed)
    assert_valid_cut(g, result, local_optimum=True)
    assert result.status == "local_optimum"


@settings(max_examples=40, deadline=None)
@given(n=st.integers(2, 80), seed=st.integers(0, 2 ** 32 - 1))
def test_local_optimum_cuts_half_the_weight_of_a_nonnegative_graph(n, seed):
    # common knowledge: at a 1-flip local optimum every vertex cuts at least half of
    # its incident weight, so the cut holds at least half the total weight
    g = random_graph(n, 5, seed, signed=False)
    result = solve_maxcut(g, method="local", rng=seed)
    assert result.value >= g.total_weight / 2 - 1e-9


def test_four_cycle_has_a_local_optimum_at_exactly_half():
    # common knowledge: on C_4, sides (+,+,-,-) cut 2 of 4 edges and no flip helps
    square = graph_from_edges(4, [0, 1, 2, 3], [1, 2, 3, 0])
    result = solve_maxcut(square, method="local", start=[1, 1, -1, -1], rng=0)
    assert result.value == 2.0
    assert_valid_cut(square, result, local_optimum=True)


@pytest.mark.parametrize("seed", range(4))
def test_against_networkx_one_exchange(seed):
    g = random_graph(40, 4, seed)
    h = to_networkx(g)
    # reference: networkx one_exchange (weight="weight": it ignores weights otherwise)
    nx_value, (left, _) = one_exchange(h, seed=seed, weight="weight")
    nx_sides = np.array([1 if v in left else -1 for v in range(g.n_vertices)])
    assert cut_value(g, nx_sides) == pytest.approx(nx_value)
    # from networkx's own start (the empty cut) our descent also ends at a local optimum
    result = solve_maxcut(g, method="local", start=np.ones(40, dtype=np.int8), rng=seed)
    assert_valid_cut(g, result, local_optimum=True)
    # networkx's answer is a local optimum by our gains as well
    assert np.all(flip_gains(g, nx_sides) <= 1e-9)
    # and the best of a few of our descents is at least as good
    best = max(solve_maxcut(g, method="local", rng=100 * seed + k).value for k in range(8))
    assert best >= nx_value - 1e-9


def test_descend_respects_max_moves():
    g = random_graph(200, 4, 0)
    start = np.ones(200, dtype=np.int8)
    sides, moves = descend(g, start, rng=0, max_moves=5)
    assert moves == 5
    assert int(np.sum(sides != start)) <= 5
    assert np.array_equal(start, np.ones(200, dtype=np.int8))  # the start is not modified


def test_same_seed_same_answer():
    g = random_graph(300, 4, 1)
    a = solve_maxcut(g, method="local", rng=3)
    b = solve_maxcut(g, method="local", rng=3)
    assert np.array_equal(a.sides, b.sides)


def test_bad_start_is_refused():
    g = random_graph(10, 3, 0)
    with pytest.raises(ValueError, match="one entry per vertex"):
        solve_maxcut(g, method="local", start=[1, -1])
