"""Tabu search with perturbations: the default max-cut method for quality.

The method ``"tabu"`` walks from one side assignment to the next by flipping one
vertex per move: the vertex whose flip raises the cut most (or lowers it least),
ties broken at random, among the vertices not flipped recently. A recently flipped
vertex is *tabu* for a few moves (its tenure) unless flipping it would beat the best
cut seen so far (aspiration). Plain tabu search can cycle around one region of the
search space, so after many moves without a new best the search returns to the best
sides found and flips a small random fraction of the vertices (1% to 10%, more after
each jump that led nowhere), which then stay tabu for one tenure so the jump is not
undone at once: in the spirit of Breakout Local Search (Benlic & Hao, 2013).

On large graphs and on graphs with real-valued weights a start from the
Goemans-Williamson rounding of the semidefinite relaxation (method ``"sdp"``) is much
better than a random one, and it brings a certified upper bound with it.

Without ``time_limit`` the search stops after :func:`default_max_moves` moves, so the
same seed gives the same cut on any machine; with ``time_limit`` the clock decides
(checked about every 0.05 s) unless ``max_moves`` runs out first.
"""

from __future__ import annotations

import math
import time

import numpy as np

from ..graph import SignedGraph, cut_value, validate_sides
from . import _kernels
from ._common import CutResult, register_method
from .local import descend, gain_tolerance

__all__ = ["tabu_search", "default_max_moves"]

START_FROM = ("random", "sdp", "auto")
SELECTIONS = ("auto", "buckets", "scan", "trees")

# Largest weighted degree for which integer gains are kept in buckets (one slot per value).
_MAX_BUCKET_GAIN = 1_000_000

#: Graphs with at least this many vertices start from the SDP rounding under
#: ``start_from="auto"`` (graphs with weights other than +-1 always do).
AUTO_SDP_MIN_VERTICES = 3000

# Seconds one call of the numba kernel should take before Python looks at the clock.
_CHUNK_SECONDS = 0.05


def default_max_moves(n_vertices: int) -> int:
    """Move budget used when neither ``time_limit`` nor ``max_moves`` is given.

    ``100_000 + 200 * n_vertices`` moves: well under a second on a sparse 1000-vertex
    graph with whole-number weights (a few seconds with real weights on a loaded
    machine), and deterministic for a seed because the budget, not the clock, ends
    the search. Pass ``time_limit`` for a longer search.

    Examples
    --------
    >>> default_max_moves(800)
    260000
    """
    return 100_000 + 200 * int(n_vertices)


def _is_plus_minus_one(graph: SignedGraph) -> bool:
    return bool(graph.weights.size == 0 or np.all(np.abs(graph.weights) == 1.0))


def _has_integer_weights(graph: SignedGraph) -> bool:
    w = graph.weights
    return bool(w.size == 0 or (np.all(w == np.round(w)) and np.abs(w).sum() < 2.0 ** 52))


def _sdp_start(graph: SignedGraph, *, time_limit, rng):
    """Rounded, 1-flip polished SDP start and the certified bound."""
    from . import sdp  # noqa: PLC0415 - optional at import time, the SDP side is separate

    solution = sdp.solve_sdp_relaxation(graph, tol=sdp.THOROUGH.tol, time_limit=time_limit,
                                        rng=rng)
    sides = sdp.round_hyperplanes(graph, solution.factor,
                                  n_hyperplanes=sdp.THOROUGH.n_hyperplanes, rng=rng)
    sides, _ = descend(graph, sides, rng=rng)
    return sides, float(solution.upper_bound)


def tabu_search(graph: SignedGraph, start, *, rng=None, max_moves: int | None = None,
                time_limit: float | None = None, tenure: int | None = None,
                stall_moves: int | None = None, target: float | None = None,
                selection: str = "auto", tenure_spread: int | None = None,
                keep_jump: bool = True):
    """Run tabu search with perturbations from ``start``; the engine of method ``"tabu"``.

    Parameters
    ----------
    graph : SignedGraph
    start : (n,) array_like of +-1
        The first sides (not modified).
    rng : None, int or numpy.random.Generator
        Seeds the search's own random stream (tie-breaking, tenures, perturbations).
    max_moves : int, optional
        Stop after this many moves. With ``max_moves`` the search is deterministic for a
        seed, whatever the machine; at least one of ``max_moves`` and ``time_limit`` is
        needed.
    time_limit : float, optional
        Stop after about this many seconds (checked every ~0.05 s).
    tenure : int, optional
        Shortest tabu tenure; default ``n // 40`` (at least ``min(3, n // 4)`` and 1).
    tenure_spread : int, optional
        Each flip's tenure adds a random 0 to ``tenure_spread`` moves; default
        ``max(tenure // 2, 3 n // 40)``, so tenures range from about ``n / 40`` to ``n / 10``.
    stall_moves : int, optional
        Moves without a new best before a perturbation; default ``5 n`` (at least 1000).
    target : float, optional
        Stop as soon as the best cut reaches this value (e.g. a proven upper bound).
    selection : {"auto", "buckets", "scan", "trees"}
        How the best move is found: gain buckets (whole-number weights only; O(1) per
        move and per changed gain), a full O(n) scan per move, or two tournament trees
        updated in O(log n) per changed gain. "auto" takes buckets when the weights
        allow, else scans when ``n`` is below 25 times the mean degree times ``log2 n``
        (small dense graphs), else trees.
    keep_jump : bool, default True
        Make the vertices flipped by a perturbation tabu, so the search cannot undo
        the jump at once (as Breakout Local Search does with its perturbation moves).

    Returns
    -------
    sides : (n,) int8 ndarray
        The best sides seen.
    info : dict
        ``moves``, ``perturbations``, ``reason`` ("max_moves", "time_limit" or "target").

    Examples
    --------
    >>> from segcut.graph import graph_from_edges, cut_value
    >>> c5 = graph_from_edges(5, [0, 1, 2, 3, 4], [1, 2, 3, 4, 0])
    >>> sides, info = tabu_search(c5, [1, 1, 1, 1, 1], rng=0, max_moves=100)
    >>> cut_value(c5, sides), info["moves"]
    (4.0, 100)
    """
    if max_moves is None and time_limit is None:
        raise ValueError("tabu_search needs max_moves or time_limit (or both)")
    if selection not in SELECTIONS:
        raise ValueError(f"selection must be one of {', '.join(SELECTIONS)}; got {selection!r}")
    x = validate_sides(graph, start).copy()
    rng = np.random.default_rng(rng)
    n = graph.n_vertices
    best = x.copy()
    info = {"moves": 0, "perturbations": 0, "reason": "max_moves"}
    if n < 2 or graph.n_edges == 0:
        info["reason"] = "target"
        return best, info
    base, spread, stall, min_strength, max_strength = _search_parameters(
        n, tenure, tenure_spread, stall_moves)
    size = 1 << max(1, (n - 1).bit_length())
    gains = np.empty(n, dtype=np.float64)
    tie = np.empty(n, dtype=np.uint64)
    tabu = np.zeros(n, dtype=np.int8)
    tabu_until = np.zeros(n, dtype=np.int64)
    win_free = np.empty(2 * size, dtype=np.int64)
    win_tabu = np.empty(2 * size, dtype=np.int64)
    heap_cap = base + spread + 3 + max_strength
    istate = np.zeros(_kernels.TS_N_ISTATE, dtype=np.int64)
    fstate = np.zeros(_kernels.TS_N_FSTATE, dtype=np.float64)
    rng_state = np.array([rng.integers(1, 2 ** 63, dtype=np.int64)], dtype=np.uint64)
    tol = gain_tolerance(graph)
    goal = math.inf if target is None else float(target) - tol
    args = (graph.indptr, graph.indices, graph.weights, x, gains, tie, tabu, tabu_until,
            win_free, win_tabu, size)
    selection, max_degree = _choose_selection(graph, selection, size)
    info["selection"] = selection
    _kernels.tabu_init(*args, best, istate, fstate, rng_state, min_strength)
    if selection == "buckets":
        offset = int(max_degree) + 1
        order, pos = np.empty(n, dtype=np.int64), np.empty(n, dtype=np.int64)
        start_of = np.zeros(2 * offset + 1, dtype=np.int64)
        istate[_kernels.TS_TOP] = _kernels.bucket_build(order, pos, start_of, gains, tabu, offset)
        bucket_args = (graph.indptr, graph.indices, graph.weights, x, gains, tie, tabu,
                       tabu_until, order, pos, start_of, offset)
    heaps = (np.empty(heap_cap, dtype=np.int64), np.empty(heap_cap, dtype=np.int64))
    flipped = np.empty(max_strength, dtype=np.int64)

    def run(step):
        if selection == "buckets":
            _kernels.tabu_search_buckets(*bucket_args, *heaps, best, istate, fstate, rng_state,
                                         base, spread, stall, min_strength, max_strength, goal,
                                         step, flipped, keep_jump)
        else:
            _kernels.tabu_search(*args, *heaps, best, istate, fstate, rng_state, base, spread,
                                 stall, min_strength, max_strength, tol, goal, step,
                                 selection == "scan", flipped, keep_jump)

    info["reason"] = _run_in_chunks(run, istate, fstate, goal, max_moves, time_limit)
    info["moves"] = int(istate[_kernels.TS_MOVE])
    info["perturbations"] = int(istate[_kernels.TS_N_PERTURB])
    return best, info


def _search_parameters(n, tenure, tenure_spread, stall_moves):
    """Shortest tenure, tenure spread, stall length and perturbation strengths for n vertices."""
    base = max(n // 40, min(3, n // 4), 1) if tenure is None else int(tenure)
    base = min(base, n - 1)
    if tenure_spread is None:
        tenure_spread = max(base // 2, (3 * n) // 40)  # tenures up to about n / 10
    spread = max(0, min(int(tenure_spread), n - 1 - base))
    stall = max(1000, 5 * n) if stall_moves is None else int(stall_moves)
    min_strength = max(1, round(0.01 * n))
    # small graphs need relatively larger jumps to leave a local optimum's basin
    max_strength = max(min_strength, round(0.1 * n), min(5, n // 2))
    return base, spread, stall, min_strength, max_strength


def _choose_selection(graph: SignedGraph, selection: str, size: int) -> tuple[str, float]:
    """The move selection "auto" stands for (see :func:`tabu_search`), checked; and the
    largest weighted degree."""
    n = graph.n_vertices
    rows = np.repeat(np.arange(n), np.diff(graph.indptr))
    max_degree = float(np.bincount(rows, weights=np.abs(graph.weights), minlength=n).max())
    buckets_fit = _has_integer_weights(graph) and max_degree <= _MAX_BUCKET_GAIN
    if selection == "auto":
        if buckets_fit:
            selection = "buckets"
        elif n <= 25.0 * (2 * graph.n_edges / n) * max(1, size.bit_length() - 1):
            selection = "scan"
        else:
            selection = "trees"
    if selection == "buckets" and not buckets_fit:
        raise ValueError("selection='buckets' needs whole-number weights with weighted degrees "
                         f"up to {_MAX_BUCKET_GAIN}")
    return selection, max_degree


def _run_in_chunks(run, istate, fstate, goal, max_moves, time_limit) -> str:
    """Call ``run(moves)`` in chunks of about :data:`_CHUNK_SECONDS` until the move budget,
    the goal or the clock ends the search; returns which one did."""
    budget = np.iinfo(np.int64).max if max_moves is None else int(max_moves)
    clock = time.perf_counter()
    chunk = 2000
    while True:
        left = budget - int(istate[_kernels.TS_MOVE])
        if left <= 0:
            return "max_moves"
        if fstate[_kernels.TS_BEST] >= goal:
            return "target"
        if time_limit is not None and time.perf_counter() - clock >= time_limit:
            return "time_limit"
        step = min(left, chunk)
        t0 = time.perf_counter()
        run(step)
        took = time.perf_counter() - t0
        if took > 0:
            chunk = int(min(max(1000, step * _CHUNK_SECONDS / took), 10 * chunk + 1000))


def _solve_tabu(graph: SignedGraph, *, time_limit=None, rng=None, max_moves=None, start=None,
                start_from="auto", tenure=None, stall_moves=None) -> CutResult:
    """Tabu search with perturbations (Breakout Local Search style); the default method.

    Parameters
    ----------
    graph : SignedGraph
    time_limit : float, optional
        Seconds for the whole solve (SDP start included). Without it and without
        ``max_moves`` the search makes :func:`default_max_moves` moves.
    rng : numpy.random.Generator
    max_moves : int, optional
        Move budget; when it (not the clock) ends the search, the answer is the same
        for the same seed on any machine.
    start : (n,) array_like of +-1, optional
        Initial sides; when given, ``start_from`` is not used.
    start_from : {"auto", "random", "sdp"}
        "sdp" starts from the Goemans-Williamson rounding (1-flip polished) of the SDP
        relaxation and reports its certified upper bound (the search then stops as
        soon as the cut meets the bound, or its floor for whole-number weights).
        "auto" does so when ``n >= 3000`` or the weights are not all +-1.
    tenure, stall_moves : int, optional
        See :func:`tabu_search`.
    """
    if start_from not in START_FROM:
        raise ValueError(f"start_from must be one of {', '.join(START_FROM)}; got {start_from!r}")
    if max_moves is not None and (isinstance(max_moves, bool) or int(max_moves) != max_moves
                                  or max_moves < 0):
        raise ValueError(f"max_moves must be a whole number >= 0; got {max_moves!r}")
    for name, value in (("tenure", tenure), ("stall_moves", stall_moves)):
        if value is not None and (isinstance(value, bool) or int(value) != value or value < 1):
            raise ValueError(f"{name} must be a whole number >= 1; got {value!r}")
    if start is not None:
        start = validate_sides(graph, start)
    if graph.n_edges == 0:
        sides = start if start is not None else np.ones(graph.n_vertices, dtype=np.int8)
        return CutResult(sides=sides, value=0.0, upper_bound=0.0, gap=None, method="tabu",
                         status="optimal", message="no edges: every split cuts 0")
    rng = np.random.default_rng(rng)
    clock = time.perf_counter()
    n = graph.n_vertices
    if max_moves is None and time_limit is None:
        max_moves = default_max_moves(n)

    use_sdp = False
    if start is None and n >= 2 and graph.n_edges > 0:
        if start_from == "sdp":
            use_sdp = True
        elif start_from == "auto":
            use_sdp = n >= AUTO_SDP_MIN_VERTICES or not _is_plus_minus_one(graph)
    upper_bound = None
    start_used = "given" if start is not None else "random"
    if use_sdp:
        sdp_time = None if time_limit is None else 0.4 * time_limit
        try:
            start, upper_bound = _sdp_start(graph, time_limit=sdp_time, rng=rng)
            start_used = "sdp"
        except ImportError:
            if start_from == "sdp":
                raise ValueError("start_from='sdp' needs the 'sdp' method, which is not installed") from None
    if start is None:
        start = rng.choice(np.array([-1, 1], dtype=np.int8), size=n)

    target = None
    if upper_bound is not None:
        target = math.floor(upper_bound + 1e-9) if _has_integer_weights(graph) else upper_bound
    remaining = None
    if time_limit is not None:
        remaining = max(1e-9, time_limit - (time.perf_counter() - clock))
    sides, info = tabu_search(graph, start, rng=rng, max_moves=max_moves, time_limit=remaining,
                              tenure=tenure, stall_moves=stall_moves, target=target)
    # the best sides are a 1-flip local optimum unless the budget ended in mid-descent
    sides, _ = descend(graph, sides, rng=rng)
    value = cut_value(graph, sides)
    if target is not None and value >= target - gain_tolerance(graph):
        status = "optimal"
    elif info["reason"] == "time_limit":
        status = "time_limit"
    else:
        status = "iteration_limit"
    message = (f"{info['moves']} moves, {info['perturbations']} perturbations, "
               f"start: {start_used}, stopped by {info['reason'].replace('_', ' ')}")
    return CutResult(sides=sides, value=value, upper_bound=upper_bound, gap=None, method="tabu",
                     status=status, message=message, n_iter=info["moves"],
                     info={"start_from": start_used, "perturbations": info["perturbations"],
                           "stopped_by": info["reason"]})


register_method("tabu", _solve_tabu, warm_start=True)
