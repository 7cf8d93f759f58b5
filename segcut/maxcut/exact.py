"""Exact max-cut for small graphs by branch and bound: the reference for tests.

The method ``"exact"`` fixes vertex 0 on side +1 and assigns the other vertices one
by one (largest total absolute weight first), pruning every branch whose optimistic
bound cannot beat the best cut found so far. The bound adds, to the cut among the
assigned vertices, the best each unassigned vertex could cut against them and a bound
on the cut among the unassigned ones (their positive weight, or ``k lambda_max / 4``
from the Laplacian of those ``k`` vertices, whichever is smaller). A few tabu-search
moves provide the first incumbent. The answer is proven optimal; its upper bound equals its value.
"""

from __future__ import annotations

import time

import numpy as np

from ..graph import SignedGraph, cut_value
from . import _kernels
from ._common import CutResult, register_method
from .tabu import tabu_search

__all__ = ["MAX_EXACT_VERTICES", "exact_maxcut"]

#: Largest graph the exact method accepts.
MAX_EXACT_VERTICES = 30

_NODE_CHUNK = 200_000


def exact_maxcut(graph: SignedGraph, *, time_limit: float | None = None, rng=None):
    """Maximum cut of a small graph, proven by branch and bound.

    Parameters
    ----------
    graph : SignedGraph
        At most :data:`MAX_EXACT_VERTICES` vertices.
    time_limit : float, optional
        Give up after about this many seconds (checked every 200,000 nodes).
    rng : None, int or numpy.random.Generator
        Seeds the search for the first incumbent; the optimum value does not depend on it.

    Returns
    -------
    sides : (n,) int8 ndarray
        A maximum cut (the best found when the time limit stopped the search).
    complete : bool
        True when the search finished, so ``sides`` is proven optimal.
    nodes : int
        Search-tree nodes visited.

    Raises
    ------
    ValueError
        When the graph has more than :data:`MAX_EXACT_VERTICES` vertices.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges, cut_value
    >>> c5 = graph_from_edges(5, [0, 1, 2, 3, 4], [1, 2, 3, 4, 0])
    >>> sides, complete, nodes = exact_maxcut(c5, rng=0)
    >>> cut_value(c5, sides), complete
    (4.0, True)
    """
    n = graph.n_vertices
    if n > MAX_EXACT_VERTICES:
        raise ValueError(
            f"the exact method handles at most {MAX_EXACT_VERTICES} vertices; this graph has {n} "
            "(use method='tabu' for a good cut or method='sdp' for a certified bound)"
        )
    rng = np.random.default_rng(rng)
    if n < 2 or graph.n_edges == 0:
        return np.ones(n, dtype=np.int8), True, 0
    clock = time.perf_counter()
    start = rng.choice(np.array([-1, 1], dtype=np.int8), size=n)
    incumbent, _ = tabu_search(graph, start, rng=rng, max_moves=200 * n)

    # branch on heavy vertices first: their side decides most of the cut
    strength = np.zeros(n)
    np.add.at(strength, np.repeat(np.arange(n), np.diff(graph.indptr)), np.abs(graph.weights))
    order = np.argsort(-strength, kind="stable")
    w = graph.to_scipy().toarray()[np.ix_(order, order)]
    # rest[d] bounds the cut among the vertices d..n-1 (in branching order) by the
    # smaller of their positive weight and the eigenvalue bound k * lambda_max(L) / 4
    rest = np.zeros(n + 1)
    for d in range(n - 2, -1, -1):
        sub = w[d:, d:]
        laplacian = np.diag(sub.sum(axis=1)) - sub
        spectral = (n - d) * float(np.linalg.eigvalsh(laplacian)[-1]) / 4.0
        positive = float(np.triu(np.maximum(sub, 0.0), k=1).sum())
        rest[d] = min(positive, spectral * (1.0 + 1e-12) + 1e-12)

    x = np.zeros(n, dtype=np.int8)
    best_x = incumbent[order].astype(np.int8)
    if best_x[0] != 1:
        best_x = -best_x
    s_plus = np.zeros(n)
    s_minus = np.zeros(n)
    choice = np.zeros(n, dtype=np.int64)
    state_i = np.array([1, 0], dtype=np.int64)
    scale = max(1.0, float(np.abs(graph.weights).sum()))
    eps = 1e-9 * scale
    # the incumbent's value, slightly lowered so an equally good cut is still accepted
    state_f = np.array([0.0, cut_value(graph, incumbent) - eps])
    _kernels._bb_assign(w, 0, 1, x, s_plus, s_minus, state_f)
    complete = False
    while not complete:
        complete = _kernels.branch_and_bound(w, rest, x, best_x, s_plus, s_minus, choice,
                                             state_i, state_f, eps, _NODE_CHUNK)
        if not complete and time_limit is not None and time.perf_counter() - clock >= time_limit:
            break
    sides = np.empty(n, dtype=np.int8)
    sides[order] = best_x
    return sides, complete, int(state_i[1])


def _solve_exact(graph: SignedGraph, *, time_limit=None, rng=None) -> CutResult:
    """Branch and bound, proven optimal; small graphs only (up to 30 vertices)."""
    sides, complete, nodes = exact_maxcut(graph, time_limit=time_limit, rng=rng)
    value = cut_value(graph, sides)
    if complete:
        return CutResult(sides=sides, value=value, upper_bound=value, gap=None, method="exact",
                         status="optimal", message=f"proven optimal after {nodes} search nodes",
                         n_iter=nodes)
    return CutResult(sides=sides, value=value, upper_bound=None, gap=None, method="exact",
                     status="time_limit",
                     message=f"time limit after {nodes} search nodes; optimality not proven",
                     n_iter=nodes)


register_method("exact", _solve_exact)
