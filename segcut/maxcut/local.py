"""1-flip local search: one descent from one start.

The method ``"local"`` flips one vertex at a time while a flip raises the cut,
keeping every vertex's gain up to date incrementally (no O(n) scan per move), and
always ends at a 1-flip local optimum. Two rules pick the next flip:

``rule="first"`` (default)
    first improvement: vertices are examined in a random order and any vertex whose
    flip raises the cut is flipped; its neighbours are queued again. O(degree) per flip.
``rule="best"``
    best improvement (steepest ascent): always flip a vertex of largest gain, ties
    broken at random for the seed. Whole-number weights keep the vertices in gain
    buckets (O(degree) per flip for small weights); other weights in an indexed
    max-heap (O(degree log n) per flip at worst).

Method ``"local"`` at its defaults is an iterated 1-flip search: the best of
:data:`DEFAULT_STARTS` ascents from the empty cut (every vertex on side +1, the cut
of value 0, where networkx's ``one_exchange`` starts) and from random splits, then
kicks of :data:`KICK_STRENGTH` random flips, each followed by a descent and kept only
when the cut rose. A given start (``"empty"``, ``"random"`` or an array of +-1) runs
one descent by ``rule`` from there.
"""

from __future__ import annotations

import numpy as np

from ..graph import SignedGraph, cut_value, validate_sides
from . import _kernels
from ._common import CutResult, register_method

__all__ = ["descend", "flip_gains", "gain_tolerance", "RULES", "DEFAULT_STARTS", "KICK_STRENGTH"]

#: The move rules of :func:`descend` and of method ``"local"``.
RULES = ("first", "best")

_SELECTIONS = ("auto", "buckets", "heap", "tree")

# Steepest ascent keeps gains in buckets only when every weight is a whole number of at
# most this size (a gain change of 2 |w| costs 2 |w| swaps) and the weighted degrees fit
# a bucket array of modest length; otherwise it uses an indexed max-heap.
_MAX_BUCKET_WEIGHT = 16
_MAX_BUCKET_GAIN = 1 << 20


def gain_tolerance(graph: SignedGraph) -> float:
    """Smallest gain counted as an improvement: guards against float round-off cycles."""
    if graph.weights.size == 0:
        return 0.0
    return 1e-12 * float(np.abs(graph.weights).max()) * max(1.0, np.log2(graph.n_vertices + 1))


def flip_gains(graph: SignedGraph, sides) -> np.ndarray:
    """Change of the cut value caused by flipping each vertex alone.

    Parameters
    ----------
    graph : SignedGraph
    sides : (n,) array_like of +-1

    Returns
    -------
    (n,) float64 ndarray
        ``gain_i = x_i * sum_j w_ij x_j``; a 1-flip local optimum has no positive gain.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> g = graph_from_edges(3, [0, 1], [1, 2])
    >>> flip_gains(g, [1, 1, -1])
    array([ 1.,  0., -1.])
    """
    x = validate_sides(graph, sides)
    gains = np.empty(graph.n_vertices, dtype=np.float64)
    _kernels.compute_gains(graph.indptr, graph.indices, graph.weights, x, gains)
    return gains


def _weighted_degrees(graph: SignedGraph) -> np.ndarray:
    rows = np.repeat(np.arange(graph.n_vertices), np.diff(graph.indptr))
    return np.bincount(rows, weights=np.abs(graph.weights), minlength=graph.n_vertices)


def _buckets_fit(graph: SignedGraph, degrees: np.ndarray) -> bool:
    w = graph.weights
    if w.size == 0:
        return True
    return bool(np.all(w == np.round(w)) and np.abs(w).max() <= _MAX_BUCKET_WEIGHT
                and degrees.max() <= _MAX_BUCKET_GAIN)


def _ascend(graph: SignedGraph, x, gains, rng, limit: int, selection: str) -> tuple[int, str]:
    """Steepest ascent from ``x`` (changed in place); returns (flips, selection used)."""
    n = graph.n_vertices
    degrees = _weighted_degrees(graph)
    fits = _buckets_fit(graph, degrees)
    if selection == "auto":
        selection = "buckets" if fits else "heap"
    elif selection == "buckets" and not fits:
        raise ValueError(f"selection='buckets' needs whole-number weights of size at most "
                         f"{_MAX_BUCKET_WEIGHT} and weighted degrees up to {_MAX_BUCKET_GAIN}")
    if selection == "buckets":
        max_gain = int(degrees.max()) if n else 0
        order = np.empty(n, dtype=np.int64)
        pos = np.empty(n, dtype=np.int64)
        start = np.zeros(max_gain + 2, dtype=np.int64)
        _kernels.ascent_bucket_build(order, pos, start, gains)
        rng_state = np.array([rng.integers(1, 2 ** 63, dtype=np.int64)], dtype=np.uint64)
        moves = _kernels.ascend_buckets(graph.indptr, graph.indices, graph.weights, x, gains,
                                        order, pos, start, rng_state, limit)
    elif selection == "heap":
        tie = rng.integers(0, np.iinfo(np.uint64).max, size=n, dtype=np.uint64, endpoint=True)
        heap = np.empty(n, dtype=np.int64)
        hpos = np.empty(n, dtype=np.int64)
        moves = _kernels.ascend_heap(graph.indptr, graph.indices, graph.weights, x, gains, tie,
                                     heap, hpos, gain_tolerance(graph), limit)
    else:
        size = 1 << max(1, (n - 1).bit_length())
        win = np.empty(2 * size, dtype=np.int64)
        tie = rng.integers(0, np.iinfo(np.uint64).max, size=n, dtype=np.uint64, endpoint=True)
        moves = _kernels.ascend_tree(graph.indptr, graph.indices, graph.weights, x, gains, tie,
                                     win, size, gain_tolerance(graph), limit)
    return int(moves), selection


def descend(graph: SignedGraph, sides, *, rng=None, max_moves: int | None = None,
            rule: str = "first", selection: str = "auto") -> tuple[np.ndarray, int]:
    """Run one 1-flip descent from ``sides``: first or best improvement.

    Parameters
    ----------
    graph : SignedGraph
    sides : (n,) array_like of +-1
        The start; not modified.
    rng : None, int or numpy.random.Generator
        With ``rule="first"`` decides the order in which vertices are first examined;
        with ``rule="best"`` breaks ties between vertices of equal largest gain.
    max_moves : int, optional
        Stop after this many flips (no limit by default).
    rule : {"first", "best"}
        ``"first"``: flip any vertex whose flip raises the cut, examined from a work
        queue (O(degree) per flip). ``"best"``: always flip a vertex of largest gain
        (steepest ascent).
    selection : {"auto", "buckets", "heap", "tree"}
        How ``rule="best"`` finds the largest gain: gain buckets (whole-number weights
        of size at most 16; O(degree) per flip), an indexed max-heap or a tournament
        tree (any weights; O(degree log n) per flip at worst). "auto" takes buckets
        when the weights allow, else the heap (2 to 6 times faster than the tree on
        G-set graphs). Heap and tree make the same moves for a seed; buckets break
        ties differently, so on graphs with tied gains they may end at another local
        optimum. Ignored by ``rule="first"``.

    Returns
    -------
    sides : (n,) int8 ndarray
        A 1-flip local optimum (unless ``max_moves`` stopped the descent).
    n_moves : int
        Flips made.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges, cut_value
    >>> triangle = graph_from_edges(3, [0, 1, 0], [1, 2, 2])
    >>> sides, moves = descend(triangle, [1, 1, 1], rng=0)
    >>> cut_value(triangle, sides)
    2.0

    Steepest ascent on a star with one heavy edge flips the centre first:

    >>> star = graph_from_edges(4, [0, 0, 0], [1, 2, 3], [1.0, 1.0, 2.5])
    >>> sides, moves = descend(star, [1, 1, 1, 1], rule="best", rng=0)
    >>> sides.tolist(), moves, cut_value(star, sides)
    ([-1, 1, 1, 1], 1, 4.5)
    """
    if rule not in RULES:
        raise ValueError(f"rule must be one of {', '.join(RULES)}; got {rule!r}")
    if selection not in _SELECTIONS:
        raise ValueError(f"selection must be one of {', '.join(_SELECTIONS)}; got {selection!r}")
    x = validate_sides(graph, sides).copy()
    rng = np.random.default_rng(rng)
    gains = np.empty(graph.n_vertices, dtype=np.float64)
    _kernels.compute_gains(graph.indptr, graph.indices, graph.weights, x, gains)
    limit = np.iinfo(np.int64).max if max_moves is None else int(max_moves)
    if rule == "best":
        moves, _ = _ascend(graph, x, gains, rng, limit, selection)
        return x, moves
    order = rng.permutation(graph.n_vertices).astype(np.int64)
    moves = _kernels.descend_1flip(graph.indptr, graph.indices, graph.weights, x, gains,
                                   order, gain_tolerance(graph), limit)
    return x, int(moves)


#: Ascents of method ``"local"`` at its defaults.
DEFAULT_STARTS = 8
#: Vertices flipped by each kick of the iterated search of method ``"local"``.
KICK_STRENGTH = 2


def _multi_start(graph: SignedGraph, rng, n_starts: int, tol: float):
    """Best of ``n_starts`` ascents (see :func:`_solve_local`); ties between ends go to
    the earlier. Returns (sides, value, flips)."""
    n = graph.n_vertices
    degrees = _weighted_degrees(graph)
    buckets = n > 0 and _buckets_fit(graph, degrees)
    max_gain = int(degrees.max()) if buckets else -1
    starts = np.empty((n_starts, n), dtype=np.int8)
    values = np.empty(n_starts, dtype=np.float64)
    rng_state = np.array([rng.integers(1, 2 ** 63, dtype=np.int64)], dtype=np.uint64)
    flips = _kernels.ascend_many(graph.indptr, graph.indices, graph.weights, starts,
                                 (n_starts + 1) // 2 if buckets else 1, values, rng_state,
                                 max_gain, tol)
    best = 0
    for k in range(1, n_starts):
        if values[k] > values[best] + tol:
            best = k
    return starts[best].copy(), float(values[best]), int(flips)


def _kick(graph: SignedGraph, sides, rng, n_kicks: int, tol: float):
    """``n_kicks`` kicks of :data:`KICK_STRENGTH` random flips, each followed by a
    first-improvement descent and kept only when the cut rose; ends with a full
    descent, so the answer is a 1-flip local optimum. Returns (sides, value, kicks kept),
    the value from the gains: ``(sum_{i<j} w_ij - sum_i gain_i / 2) / 2``."""
    x = np.ascontiguousarray(sides, dtype=np.int8).copy()
    gains = np.empty(graph.n_vertices, dtype=np.float64)
    _kernels.compute_gains(graph.indptr, graph.indices, graph.weights, x, gains)
    rng_state = np.array([rng.integers(1, 2 ** 63, dtype=np.int64)], dtype=np.uint64)
    kept = _kernels.kick_and_descend(graph.indptr, graph.indices, graph.weights, x, gains,
                                     n_kicks, KICK_STRENGTH, rng_state, tol)
    _kernels.descend_1flip(graph.indptr, graph.indices, graph.weights, x, gains,
                           np.arange(graph.n_vertices, dtype=np.int64), tol,
                           np.iinfo(np.int64).max)
    value = 0.5 * (0.5 * float(graph.weights.sum()) - 0.5 * float(gains.sum()))
    return x, value, int(kept)


def _solve_local(graph: SignedGraph, *, time_limit=None, rng=None, start=None,
                 rule="first", n_starts=DEFAULT_STARTS, n_kicks=None) -> CutResult:
    """Iterated 1-flip search from a few ascents (default), or one descent from a given start.

    By default ``n_starts`` ascents run and the best is improved by ``n_kicks``
    kicks (default ``n // 3``): :data:`KICK_STRENGTH` random flips, a
    first-improvement descent, kept only when the cut rose. With small
    whole-number weights (gains tie often; moves from gain buckets) half the ascents
    are steepest ascents from the empty cut (all vertices on side +1, as networkx's
    ``one_exchange`` starts), each breaking ties at random differently, and half
    steepest ascents from random splits. Otherwise one steepest ascent from the
    empty cut (distinct gains: the moves of ``one_exchange``) and first-improvement
    descents from random splits. ``start="empty"``, ``"random"`` or an array of +-1
    runs one descent by ``rule`` from there instead. Always a 1-flip local optimum."""
    if rule not in RULES:
        raise ValueError(f"rule must be one of {', '.join(RULES)}; got {rule!r}")
    for name, value, low in (("n_starts", n_starts, 1), ("n_kicks", n_kicks, 0)):
        if value is not None and (isinstance(value, bool)
                                  or not isinstance(value, (int, np.integer)) or value < low):
            raise ValueError(f"{name} must be an integer >= {low}; got {value!r}")
    rng = np.random.default_rng(rng)
    kind = "best" if rule == "best" else "first"
    if start is None:
        tol = gain_tolerance(graph)
        sides, _, moves = _multi_start(graph, rng, int(n_starts), tol)
        kicks = graph.n_vertices // 3 if n_kicks is None else int(n_kicks)
        sides, value, kept = _kick(graph, sides, rng, kicks, tol)
        how = (f"best of {n_starts} ascents from the empty cut and random splits, then "
               f"{kicks} kicks ({kept} kept)")
    else:
        if isinstance(start, str):
            if start not in ("empty", "random"):
                raise ValueError("start must be None, 'empty', 'random' or an array of +-1; "
                                 f"got {start!r}")
            x0 = (np.ones(graph.n_vertices, dtype=np.int8) if start == "empty" else
                  rng.choice(np.array([-1, 1], dtype=np.int8), size=graph.n_vertices))
        else:
            x0 = validate_sides(graph, start)
        sides, moves = descend(graph, x0, rng=rng, rule=rule)
        how = f"{kind} improvement"
        value = cut_value(graph, sides)
    return CutResult(sides=sides, value=value, upper_bound=None, gap=None, method="local",
                     status="local_optimum",
                     message=f"1-flip local optimum ({how}; {moves} flips in the ascents)",
                     n_iter=moves)


register_method("local", _solve_local, warm_start=True)
