"""The 'flow' max-cut method: attractive graphs with one terminal, as a minimum s-t cut.

References: brute force over all splits, and networkx's minimum_cut on the s-t
network of the same problem (the max-flow min-cut theorem; common knowledge).
"""

import itertools

import networkx as nx
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from segcut.graph import cut_value, graph_from_edges
from segcut.maxcut import solve_maxcut
from segcut.maxcut.flow import attractive_terminal_maxcut


def _attractive_graph(n, seed, density=0.5):
    """n free vertices and a terminal (the last vertex): inner edges <= 0, terminal edges of
    either sign."""
    rng = np.random.default_rng(seed)
    pairs = [(i, j) for i, j in itertools.combinations(range(n), 2) if rng.random() < density]
    rows = [i for i, _ in pairs] + [n] * n
    cols = [j for _, j in pairs] + list(range(n))
    weights = list(-rng.random(len(pairs)) * 3) + list(rng.normal(0, 2, n))
    return graph_from_edges(n + 1, rows, cols, weights)


def _brute_force(graph):
    n = graph.n_vertices
    best = -np.inf
    for bits in itertools.product((-1, 1), repeat=n - 1):
        sides = np.array(bits + (1,), dtype=np.int8)
        best = max(best, cut_value(graph, sides))
    return best


def _networkx_min_cut_value(graph, terminal):
    """max-cut = (sum of positive terminal edges) - (minimum s-t cut), built in networkx."""
    rows, cols, w = graph.edges()
    g = nx.DiGraph()
    sink = "sink"
    reward = 0.0
    for i, j, wij in zip(rows.tolist(), cols.tolist(), w.tolist()):
        if terminal in (i, j):
            other = j if i == terminal else i
            if wij > 0:  # paid when `other` stays on the terminal's side
                g.add_edge(other, sink, capacity=wij)
                reward += wij
            elif wij < 0:  # paid when `other` leaves the terminal's side
                g.add_edge(terminal, other, capacity=-wij)
        else:
            g.add_edge(i, j, capacity=-wij)
            g.add_edge(j, i, capacity=-wij)
    g.add_node(terminal)
    g.add_node(sink)
    cut, _ = nx.minimum_cut(g, terminal, sink)
    return reward - cut


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 10), seed=st.integers(0, 10_000))
def test_flow_equals_brute_force_and_networkx(n, seed):
    graph = _attractive_graph(n, seed)
    result = solve_maxcut(graph, method="flow")
    best = _brute_force(graph)
    assert result.value == pytest.approx(best, rel=1e-7, abs=1e-7)
    assert result.value == pytest.approx(_networkx_min_cut_value(graph, n), rel=1e-7, abs=1e-7)
    assert result.upper_bound >= best - 1e-9
    assert result.upper_bound - result.value <= 1e-6 * max(1.0, abs(best))
    assert result.sides[n] == 1  # the terminal's side is +1


def test_flow_on_a_larger_graph_matches_networkx():
    graph = _attractive_graph(60, 3, density=0.1)
    sides, value, bound = attractive_terminal_maxcut(graph)
    assert value == pytest.approx(_networkx_min_cut_value(graph, 60), rel=1e-7)
    assert value <= bound <= value + 1e-6 * abs(value)


def test_flow_refuses_a_repulsive_edge_away_from_the_terminal():
    graph = graph_from_edges(3, [0, 0], [1, 2], [1.0, 1.0])
    with pytest.raises(ValueError, match="every edge away from the terminal"):
        solve_maxcut(graph, method="flow")


def test_flow_takes_the_terminal_as_an_option():
    graph = graph_from_edges(3, [0, 0, 1], [1, 2, 2], [2.0, 3.0, -1.0])  # terminal 0
    result = solve_maxcut(graph, method="flow", terminal=0)
    assert result.value == pytest.approx(_brute_force_any_terminal(graph))


def _brute_force_any_terminal(graph):
    return max(cut_value(graph, np.array(s, dtype=np.int8))
               for s in itertools.product((-1, 1), repeat=graph.n_vertices))


def _grid_graph(side, seed, levels):
    """A side x side 4-connected pixel grid (inner edges <= 0) and a terminal tied to every
    pixel; small integer weights make many equal paths and many minimum cuts."""
    rng = np.random.default_rng(seed)
    index = np.arange(side * side).reshape(side, side)
    rows = list(index[:, :-1].ravel()) + list(index[:-1, :].ravel())
    cols = list(index[:, 1:].ravel()) + list(index[1:, :].ravel())
    weights = list(-rng.integers(0, levels, len(rows)).astype(float))
    n = side * side
    rows += [n] * n
    cols += list(range(n))
    weights += list(rng.integers(-levels, levels + 1, n).astype(float))
    return graph_from_edges(n + 1, rows, cols, weights)


@settings(max_examples=25, deadline=None)
@given(side=st.integers(2, 14), seed=st.integers(0, 10_000), levels=st.integers(1, 4))
def test_flow_on_grids_with_ties_matches_networkx(side, seed, levels):
    graph = _grid_graph(side, seed, levels)
    sides, value, bound = attractive_terminal_maxcut(graph)
    assert value == pytest.approx(_networkx_min_cut_value(graph, side * side), abs=1e-6)
    assert value <= bound <= value + 1e-6 * max(1.0, abs(value))


def test_flow_sides_are_what_the_terminal_reaches_in_scipy_residual():
    # reference: scipy's maximum_flow (Dinic) on the same integer network; the set the
    # source reaches in the residual network is the same for every maximum flow (the
    # smallest minimum cut; common knowledge), so the sides must match exactly
    import scipy.sparse as sp
    from scipy.sparse.csgraph import breadth_first_order, maximum_flow

    graph = _grid_graph(40, 7, 3)
    n = graph.n_vertices
    t, sink = n - 1, n
    rows, cols, w = graph.edges()
    inner = cols != t
    r = np.concatenate([rows[inner], cols[inner], np.full(n - 1, t), np.arange(n - 1)])
    c = np.concatenate([cols[inner], rows[inner], np.arange(n - 1), np.full(n - 1, sink)])
    a = np.zeros(n)
    a[rows[~inner]] = w[~inner]
    cap = np.concatenate([-w[inner], -w[inner], np.maximum(-a[:-1], 0), np.maximum(a[:-1], 0)])
    keep = cap > 0
    capacity = sp.csr_array((cap[keep].astype(np.int32), (r[keep], c[keep])), shape=(n + 1, n + 1))
    flow = maximum_flow(capacity, t, sink, method="dinic")
    residual = sp.csr_array(capacity - flow.flow)
    residual.data[residual.data < 0] = 0
    residual.eliminate_zeros()
    reached = breadth_first_order(residual, t, directed=True, return_predecessors=False)
    expected = -np.ones(n, dtype=np.int8)
    expected[reached[reached < n]] = 1
    sides, value, bound = attractive_terminal_maxcut(graph)
    assert np.array_equal(sides, expected)
    exact = float(np.sum(np.maximum(a, 0))) - flow.flow_value  # integer weights: exact
    assert value == pytest.approx(exact, abs=1e-9)
    assert exact <= bound <= exact + 1e-5 * abs(exact)
