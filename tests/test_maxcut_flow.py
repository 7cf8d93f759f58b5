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
