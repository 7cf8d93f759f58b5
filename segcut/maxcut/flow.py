"""Exact max-cut of attractive graphs with one terminal, through a minimum s-t cut.

A signed graph whose edges are all non-positive except those at one *terminal*
vertex ``t`` (pixel graphs of a boundary refinement look like this: neighbours
attract, appearance evidence ties each pixel to the terminal) has a max-cut that
is a minimum s-t cut. With ``a_i = w(t, i)`` and ``x_t = +1``:

.. math::

    \\max_x \\operatorname{cut}(x) = \\sum_{a_i > 0} a_i - \\min_S \\Big(
        \\sum_{a_i > 0, i \\in S} a_i + \\sum_{a_i < 0, i \\notin S} |a_i|
        + \\sum_{ij \\text{ split by } S} |w_{ij}| \\Big)

where ``S`` is the set of vertices on the terminal's side. The minimum is found
by a maximum flow (Boykov and Kolmogorov's augmenting paths, numba kernels in
:mod:`segcut.maxcut._flow_kernels`) on integer capacities, so every sum is
exact: each capacity is scaled and rounded *down*, the rounded minimum cut is
then at most the true one, and the maximum flow that proves it gives a
certified upper bound on the max-cut. The returned sides (the terminal's side
is the set the terminal reaches in the residual network) are optimal for the
rounded problem and their exact value is recomputed, so the gap only reflects
the rounding (about one part in 10^9 of the largest capacity sum per edge).
"""

from __future__ import annotations

import numpy as np

from ..graph import SignedGraph, cut_value
from ._common import CutResult, register_method
from ._flow_kernels import SOURCE_TREE, boykov_kolmogorov, sister_arcs

__all__ = ["attractive_terminal_maxcut", "is_attractive_with_terminal"]

# Largest capacity sum of the rounded network.
_CAPACITY_RANGE = 2.0 ** 30


def is_attractive_with_terminal(graph: SignedGraph, terminal: int) -> bool:
    """True when every edge not touching ``terminal`` has a weight <= 0.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> g = graph_from_edges(3, [0, 0, 1], [2, 1, 2], [1.0, -1.0, 2.0])
    >>> is_attractive_with_terminal(g, 2), is_attractive_with_terminal(g, 0)
    (True, False)
    """
    return not bool(np.any(_pair_capacities(graph, terminal) < 0.0))


def _pair_capacities(graph: SignedGraph, terminal: int) -> np.ndarray:
    """Per stored arc, minus its weight, and 0 on the arcs touching ``terminal``."""
    rows = np.repeat(np.arange(graph.n_vertices, dtype=np.int64), np.diff(graph.indptr))
    at_t = (rows == terminal) | (graph.indices == terminal)
    return np.where(at_t, 0.0, -graph.weights)


def attractive_terminal_maxcut(graph: SignedGraph, terminal: int | None = None):
    """Max-cut of an attractive graph with one terminal, with a certified upper bound.

    Parameters
    ----------
    graph : SignedGraph
        Every edge not touching ``terminal`` must have a weight <= 0.
    terminal : int, optional
        The terminal vertex; by default the last one.

    Returns
    -------
    sides : (n,) int8 ndarray
        +1 on the terminal's side.
    value : float
        Exact cut value of ``sides``.
    upper_bound : float
        Certified by the maximum flow of the rounded-down capacities.

    Raises
    ------
    ValueError
        When an edge away from the terminal is positive.

    Examples
    --------
    Two pixels that attract each other (edge -0.5), one held on the terminal's
    side (edge -3) and one pushed away from it (edge +1): pushing the second away
    gains 1 and costs 0.5, so the best cut is 0.5:

    >>> from segcut.graph import graph_from_edges
    >>> g = graph_from_edges(3, [2, 2, 0], [0, 1, 1], [-3.0, 1.0, -0.5])
    >>> sides, value, bound = attractive_terminal_maxcut(g)
    >>> sides.tolist(), value, round(bound, 6)
    ([1, -1, 1], 0.5, 0.5)
    """
    n = graph.n_vertices
    t = n - 1 if terminal is None else int(terminal)
    if not 0 <= t < n:
        raise ValueError(f"terminal {t} is not a vertex of a graph of {n} vertices")
    pair_w = _pair_capacities(graph, t)
    if np.any(pair_w < 0.0):
        raise ValueError("method 'flow' needs every edge away from the terminal to be <= 0 "
                         "(an attractive graph with one terminal)")
    a = np.zeros(n)
    lo, hi = graph.indptr[t], graph.indptr[t + 1]
    a[graph.indices[lo:hi]] = graph.weights[lo:hi]
    src_cap, sink_cap = np.maximum(-a, 0.0), np.maximum(a, 0.0)
    reward = float(np.sum(sink_cap))
    largest = max(float(src_cap.sum()), reward, float(pair_w.max()) if pair_w.size else 0.0)
    if largest <= 0.0:
        sides = np.ones(n, dtype=np.int8)
        return sides, cut_value(graph, sides), 0.0
    scale = _CAPACITY_RANGE / largest
    residual = np.floor(pair_w * scale).astype(np.int64)
    terminal = (np.floor(src_cap * scale) - np.floor(sink_cap * scale)).astype(np.int64)
    tree = np.empty(n, dtype=np.int8)
    flow_value = boykov_kolmogorov(graph.indptr, graph.indices,
                                   sister_arcs(graph.indptr, graph.indices), residual, terminal,
                                   tree)
    sides = np.where(tree == SOURCE_TREE, 1, -1).astype(np.int8)
    sides[t] = 1
    value = cut_value(graph, sides)
    bound = reward - float(flow_value) / scale
    bound = max(bound + 1e-12 * max(abs(bound), reward, 1.0), value)
    return sides, value, bound


def _solve_flow(graph: SignedGraph, *, terminal=None, time_limit=None, rng=None) -> CutResult:
    """Exact for attractive graphs with one terminal (minimum s-t cut); certified bound."""
    sides, value, bound = attractive_terminal_maxcut(graph, terminal)
    return CutResult(sides=sides, value=value, upper_bound=bound, gap=None, method="flow",
                     status="optimal", message="minimum s-t cut by maximum flow")


register_method("flow", _solve_flow, options=("terminal",))
