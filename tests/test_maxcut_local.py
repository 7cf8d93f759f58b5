"""Tests of the 1-flip local search (method "local").

Outside references: networkx `one_exchange` (a slow, independent 1-exchange local
search), the gain formula from its definition (tests/checks.py), and textbook facts
(common knowledge).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from networkx.algorithms.approximation.maxcut import one_exchange

from checks import assert_valid_cut, reference_gains, signed_graph_with_m_edges
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


@pytest.mark.parametrize("n, m, weights, seed", [
    (300, 1200, "pm", 15),
    *[(150, 600, w, s) for w in ("pm", "normal", "whole") for s in (0, 1)],
])
def test_local_at_its_defaults_does_not_lose_to_networkx_one_exchange(n, m, weights, seed):
    # reference: networkx one_exchange (steepest ascent from the empty cut,
    # weight="weight") on the same random signed graph, one run with its own seed.
    # (300, 1200, +-1 weights, seed 15) is a graph where the best of 16 plain ascents
    # lost (266 against 269) before the kicks were added.
    g = signed_graph_with_m_edges(n, m, seed, weights)
    nx_value, _ = one_exchange(to_networkx(g), seed=0, weight="weight")
    result = solve_maxcut(g, method="local", rng=0)
    assert_valid_cut(g, result, local_optimum=True)
    assert result.value >= nx_value - 1e-9


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


# --- best improvement (rule="best") ----------------------------------------------------

def plus_minus_one_graph(n, degree, seed):
    """Signed graph with weights +-1: many tied gains."""
    rng = np.random.default_rng(seed)
    m = max(1, n * degree // 2)
    i = rng.integers(0, n, m)
    j = rng.integers(0, n, m)
    keep = i != j
    pairs = {(min(a, b), max(a, b)) for a, b in zip(i[keep].tolist(), j[keep].tolist())}
    ends = np.array(sorted(pairs), dtype=np.int64).reshape(-1, 2)
    return graph_from_edges(n, ends[:, 0], ends[:, 1], rng.choice([-1.0, 1.0], size=len(ends)))


def reference_steepest_ascent(graph, sides):
    """Steepest 1-flip ascent by recomputing every gain from its definition each move.

    Returns the final sides and the number of flips, or None when two largest gains
    come within 1e-9 of each other on the way (the order of such moves is not well
    defined across implementations, so the comparison is skipped).
    """
    x = np.array(sides, dtype=np.int64)
    moves = 0
    while True:
        gains = reference_gains(graph, x)
        top_two = np.sort(gains)[-2:] if gains.size > 1 else gains
        if gains.size > 1 and top_two[1] > 1e-9 and top_two[1] - top_two[0] <= 1e-9:
            return None
        v = int(np.argmax(gains))
        if gains[v] <= 1e-9:
            return x, moves
        x[v] = -x[v]
        moves += 1


@settings(max_examples=40, deadline=None)
@given(n=st.integers(2, 80), seed=st.integers(0, 2 ** 32 - 1),
       kind=st.sampled_from(["signed", "nonnegative", "plus_minus_one"]),
       start=st.sampled_from(["empty", None]))
def test_best_rule_ends_at_a_local_optimum(n, seed, kind, start):
    if kind == "plus_minus_one":
        g = plus_minus_one_graph(n, 5, seed)
    else:
        g = random_graph(n, 5, seed, signed=kind == "signed")
    result = solve_maxcut(g, method="local", rule="best", start=start, rng=seed)
    assert_valid_cut(g, result, local_optimum=True)
    assert result.status == "local_optimum"


@settings(max_examples=30, deadline=None)
@given(n=st.integers(2, 50), seed=st.integers(0, 2 ** 32 - 1), empty=st.booleans())
def test_best_rule_matches_a_reference_steepest_ascent_when_gains_are_distinct(n, seed, empty):
    # reference: steepest ascent written out in plain Python, every gain recomputed from
    # its definition before each move; normal weights make tied gains almost impossible
    g = random_graph(n, 4, seed)
    if empty:
        start = np.ones(n, dtype=np.int8)
    else:
        start = np.random.default_rng(seed).choice([-1, 1], size=n)
    expected = reference_steepest_ascent(g, start)
    assume(expected is not None)
    for selection in ("auto", "heap", "tree"):
        sides, moves = descend(g, start, rule="best", selection=selection, rng=seed)
        assert np.array_equal(sides, expected[0])
        assert moves == expected[1]


@pytest.mark.parametrize("seed", range(6))
def test_best_rule_from_the_empty_cut_equals_networkx_one_exchange(seed):
    # reference: networkx one_exchange (weight="weight"), a steepest ascent from the empty
    # cut. With normal weights no two gains tie, so both make the same moves and end at
    # the same cut. Where gains tie (e.g. weights +-1) the two break ties differently and
    # either may end higher; then only "both are local optima" holds.
    g = random_graph(40, 4, seed)
    nx_value, (flipped, _) = one_exchange(to_networkx(g), seed=seed, weight="weight")
    result = solve_maxcut(g, method="local", rule="best", start="empty", rng=seed)
    assert result.value >= nx_value - 1e-9
    assert result.value == pytest.approx(nx_value, rel=1e-12, abs=1e-12)
    assert set(np.flatnonzero(result.sides == -1).tolist()) == set(flipped)


@pytest.mark.parametrize("selection", ["buckets", "heap", "tree"])
@pytest.mark.parametrize("seed", range(3))
def test_every_best_move_takes_a_largest_gain_when_gains_tie(selection, seed):
    # checked against gains recomputed from their definition (tests/checks.py): the
    # descent cut short after k flips and after k + 1 flips differ in one vertex, whose
    # gain was a largest one
    g = plus_minus_one_graph(30, 4, seed)
    start = np.ones(30, dtype=np.int8)
    _, total = descend(g, start, rule="best", selection=selection, rng=seed)
    assert total > 0
    before = start
    for k in range(1, total + 1):
        after, moves = descend(g, start, rule="best", selection=selection, rng=seed, max_moves=k)
        assert moves == k
        changed = np.flatnonzero(after != before)
        assert changed.size == 1
        gains = reference_gains(g, before)
        assert gains[changed[0]] == gains.max() > 0
        before = after
    assert reference_gains(g, before).max() <= 0


@pytest.mark.parametrize("seed", range(3))
def test_heap_and_tree_make_the_same_moves(seed):
    # both order vertices by gain and break ties by the same random keys (an internal
    # consistency check; the references are in the tests above)
    g = plus_minus_one_graph(400, 5, seed)
    start = np.random.default_rng(seed).choice([-1, 1], size=400)
    heap = descend(g, start, rule="best", selection="heap", rng=seed)
    tree = descend(g, start, rule="best", selection="tree", rng=seed)
    assert np.array_equal(heap[0], tree[0])
    assert heap[1] == tree[1] > 0


def test_best_rule_same_seed_same_answer():
    g = plus_minus_one_graph(300, 4, 2)
    a = solve_maxcut(g, method="local", rule="best", start="empty", rng=5)
    b = solve_maxcut(g, method="local", rule="best", start="empty", rng=5)
    assert np.array_equal(a.sides, b.sides)


def test_empty_start_puts_every_vertex_on_one_side_before_the_descent():
    g = random_graph(50, 4, 3)
    result = solve_maxcut(g, method="local", rule="first", start="empty", rng=0)
    expected, _ = descend(g, np.ones(50, dtype=np.int8), rng=np.random.default_rng(0))
    assert_valid_cut(g, result, local_optimum=True)
    assert np.array_equal(result.sides, expected)


def test_unknown_rule_is_refused():
    g = random_graph(10, 3, 0)
    with pytest.raises(ValueError, match="rule must be one of first, best"):
        solve_maxcut(g, method="local", rule="steepest")


def test_unknown_start_word_is_refused():
    g = random_graph(10, 3, 0)
    with pytest.raises(ValueError, match="start must be None, 'empty', 'random' or an array"):
        solve_maxcut(g, method="local", start="full")


def test_buckets_need_whole_number_weights():
    g = random_graph(10, 3, 0)
    with pytest.raises(ValueError, match="selection='buckets' needs whole-number weights"):
        descend(g, np.ones(10, dtype=np.int8), rule="best", selection="buckets")
