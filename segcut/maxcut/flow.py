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
by a maximum flow (scipy's Dinic). scipy's flow takes integer capacities, so
each capacity is scaled and rounded *down*: the rounded minimum cut is then at
most the true one, and the maximum flow that proves it gives a certified upper
bound on the max-cut; the returned sides are optimal for the rounded problem and
their exact value is recomputed, so the gap only reflects the rounding (about
one part in 10^9 of the largest capacity sum per edge).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import breadth_first_order, maximum_flow

from ..graph import SignedGraph, cut_value
from ._common import CutResult, register_method

__all__ = ["attractive_terminal_maxcut", "is_attractive_with_terminal"]

# Largest capacity sum handed to scipy's 32-bit flow.
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
    rows, cols, w = graph.edges()
    inner = (rows != terminal) & (cols != terminal)
    return bool(np.all(w[inner] <= 0.0))


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
    if not is_attractive_with_terminal(graph, t):
        raise ValueError("method 'flow' needs every edge away from the terminal to be <= 0 "
                         "(an attractive graph with one terminal)")
    rows, cols, w = graph.edges()
    at_t = (rows == t) | (cols == t)
    other = np.where(rows == t, cols, rows)[at_t]
    a = np.bincount(other, weights=w[at_t], minlength=n)
    pair_r, pair_c, pair_w = rows[~at_t], cols[~at_t], -w[~at_t]
    sink = n
    src_cap, sink_cap = np.maximum(-a, 0.0), np.maximum(a, 0.0)
    src_cap[t] = sink_cap[t] = 0.0
    reward = float(np.sum(sink_cap))
    largest = max(float(src_cap.sum()), reward, float(pair_w.max()) if pair_w.size else 0.0)
    if largest <= 0.0:
        sides = np.ones(n, dtype=np.int8)
        return sides, cut_value(graph, sides), 0.0
    scale = _CAPACITY_RANGE / largest
    vertices = np.arange(n)
    r = np.concatenate([pair_r, pair_c, np.full(n, t), vertices])
    c = np.concatenate([pair_c, pair_r, vertices, np.full(n, sink)])
    cap = np.floor(np.concatenate([pair_w, pair_w, src_cap, sink_cap]) * scale)
    keep = cap > 0
    capacity = sp.csr_array((cap[keep].astype(np.int32), (r[keep], c[keep])),
                            shape=(n + 1, n + 1))
    capacity.sum_duplicates()
    flow = maximum_flow(capacity, t, sink, method="dinic")
    residual = sp.csr_array(capacity - flow.flow)
    residual.data[residual.data < 0] = 0
    residual.eliminate_zeros()
    reached = breadth_first_order(residual, t, directed=True, return_predecessors=False)
    sides = -np.ones(n + 1, dtype=np.int8)
    sides[reached] = 1
    sides = sides[:n]
    value = cut_value(graph, sides)
    bound = reward - float(flow.flow_value) / scale
    bound = max(bound + 1e-12 * max(abs(bound), reward, 1.0), value)
    return sides, value, bound


def _solve_flow(graph: SignedGraph, *, terminal=None, time_limit=None, rng=None) -> CutResult:
    """Exact for attractive graphs with one terminal (minimum s-t cut); certified bound."""
    sides, value, bound = attractive_terminal_maxcut(graph, terminal)
    return CutResult(sides=sides, value=value, upper_bound=bound, gap=None, method="flow",
                     status="optimal", message="minimum s-t cut by maximum flow")


register_method("flow", _solve_flow, options=("terminal",))
