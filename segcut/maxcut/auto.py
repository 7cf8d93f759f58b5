"""The portfolio method ``"auto"``: a certified bound and the best cut of several searches.

The method ``"auto"`` solves the semidefinite relaxation (method ``"sdp"``'s
machinery, at the :data:`~segcut.maxcut.sdp.QUICK` settings) for a certified upper
bound, rounds its factor with Goemans-Williamson hyperplanes, and runs tabu search
(method ``"tabu"``) from each given start and from the rounding, each with the same
deterministic move budget. The best cut wins; ties go to the earlier start (the
given ones first). It is the method of :func:`segcut.split` (``SplitConfig.method``
default), of ``segcut maxcut`` and the bound behind :func:`segcut.score`.

The same graph, seed (generator state) and options give the same bound and cut:
the move budget, not the clock, ends every search unless ``time_limit`` is given.
"""

from __future__ import annotations

import math
import time

import numpy as np

from ..graph import SignedGraph, validate_sides
from . import sdp
from ._common import CutResult, register_method, solve_maxcut
from .local import gain_tolerance
from .tabu import default_max_moves

__all__ = ["MOVES_PER_VERTEX", "SDP_TIME_SHARE", "certify", "portfolio", "solve_warm"]

#: Move budget per vertex of each tabu search that the image pipeline asks for
#: (enough to polish an SDP rounding on superpixel graphs).
MOVES_PER_VERTEX = 20

#: Share of ``time_limit`` given to the relaxation when a time limit is set.
SDP_TIME_SHARE = 0.5


def solve_warm(graph, *, method: str, start, max_moves: int | None = None,
               time_limit: float | None = None, rng=None) -> CutResult:
    """Solve with ``method``, searching from ``start`` when the method declares ``warm_start``.

    This is how :func:`segcut.split` solves an image's graph and how
    :func:`segcut.score` computes its bound, so both give the same bound for the
    same graph, config and seed.

    Parameters
    ----------
    graph : SignedGraph
    method : str
        A registered method.
    start : (n,) array_like of +-1
        Handed to methods that declare ``warm_start``; others ignore it.
    max_moves : int, optional
        Move budget for methods that take ``max_moves``; by default
        :data:`MOVES_PER_VERTEX` per vertex.
    time_limit : float, optional
    rng : None, int or numpy.random.Generator

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> square = graph_from_edges(4, [0, 1, 2, 3], [1, 2, 3, 0])
    >>> solve_warm(square, method="auto", start=[1, 1, 1, 1], rng=0).value
    4.0
    """
    from ._common import get_method

    spec = get_method(method)
    options = {}
    if spec.warm_start:
        options["start"] = start
    if "max_moves" in spec.options:
        options["max_moves"] = (MOVES_PER_VERTEX * graph.n_vertices if max_moves is None
                                else max_moves)
    return solve_maxcut(graph, method=method, time_limit=time_limit, rng=rng, **options)


def certify(graph: SignedGraph, *, rng, time_limit: float | None = None,
            settings: sdp.SdpSettings | None = None) -> sdp.SdpSolution | None:
    """The relaxation behind the bound of method ``"auto"`` (None for a graph without edges).

    Parameters
    ----------
    graph : SignedGraph
    rng : numpy.random.Generator
        Draws the random start of the factor; the same generator state gives the
        same bound.
    time_limit : float, optional
        Seconds for the relaxation's sweeps.
    settings : SdpSettings, optional
        Accuracy of the relaxation; :data:`~segcut.maxcut.sdp.QUICK` by default.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> triangle = graph_from_edges(3, [0, 1, 0], [1, 2, 2])
    >>> solution = certify(triangle, rng=np.random.default_rng(0))
    >>> solution.certified, solution.upper_bound >= 2.0
    (True, True)
    """
    if graph.n_edges == 0:
        return None
    settings = sdp.QUICK if settings is None else settings
    return sdp.solve_sdp_relaxation(graph, tol=settings.tol, time_limit=time_limit, rng=rng)


def portfolio(graph: SignedGraph, starts, *, rng, max_moves: int,
              time_limit: float | None = None) -> tuple[np.ndarray, float, list[dict]]:
    """Tabu search from each start with the same move budget; the best cut wins.

    Returns ``(sides, value, runs)``, ``runs`` holding each search's value and moves
    (ties: the earlier start).
    """
    best, best_value, runs = None, -math.inf, []
    clock = time.perf_counter()
    for k, start in enumerate(starts):
        left = None
        if time_limit is not None:
            left = max(1e-9, (time_limit - (time.perf_counter() - clock)) / (len(starts) - k))
        result = solve_maxcut(graph, method="tabu", rng=rng, start=start, max_moves=max_moves,
                              time_limit=left)
        runs.append({"value": result.value, "moves": result.n_iter})
        if best is None or result.value > best_value:
            best, best_value = result.sides, result.value
    return best, best_value, runs


def _solve_auto(graph: SignedGraph, *, time_limit=None, rng=None, start=None,
                max_moves=None) -> CutResult:
    """Portfolio: SDP bound (certified), Goemans-Williamson rounding, tabu from every start.

    Parameters
    ----------
    graph : SignedGraph
    time_limit : float, optional
        Seconds for the whole solve: :data:`SDP_TIME_SHARE` of it for the relaxation,
        the rest shared by the tabu searches. Without it the move budget decides and
        the answer is reproducible.
    rng : numpy.random.Generator
    start : (n,) array_like of +-1, optional
        A split to search from besides the rounding (searched first).
    max_moves : int, optional
        Moves of each tabu search; by default :func:`~segcut.maxcut.tabu.default_max_moves`.
    """
    if max_moves is not None and (isinstance(max_moves, bool) or int(max_moves) != max_moves
                                  or max_moves < 1):
        raise ValueError(f"max_moves must be a whole number >= 1; got {max_moves!r}")
    rng = np.random.default_rng(rng)
    n = graph.n_vertices
    budget = default_max_moves(n) if max_moves is None else int(max_moves)
    starts = [] if start is None else [validate_sides(graph, start)]
    clock = time.perf_counter()
    sdp_time = None if time_limit is None else SDP_TIME_SHARE * time_limit
    relaxation = certify(graph, rng=rng, time_limit=sdp_time)
    bound = 0.0 if graph.n_edges == 0 else None  # without edges every cut is 0
    if relaxation is not None:
        if relaxation.certified:
            bound = float(relaxation.upper_bound)
        starts.append(sdp.round_hyperplanes(graph, relaxation.factor,
                                            n_hyperplanes=sdp.QUICK.n_hyperplanes, rng=rng))
    if not starts:
        starts.append(np.ones(n, dtype=np.int8))  # no edges: every split cuts 0
    left = None if time_limit is None else max(1e-9, time_limit - (time.perf_counter() - clock))
    sides, value, runs = portfolio(graph, starts, rng=rng, max_moves=budget, time_limit=left)
    return CutResult(sides=sides, value=value, upper_bound=bound, gap=None,
                     method="tabu+sdp" if relaxation is not None else "tabu",
                     status=_status(graph, value, bound, relaxation, time_limit),
                     message=_message(relaxation, runs, budget),
                     n_iter=sum(run["moves"] for run in runs),
                     info={"runs": runs, "relaxation_value": None if relaxation is None
                           else relaxation.relaxation_value})


def _status(graph, value, bound, relaxation, time_limit) -> str:
    if bound is not None and value >= bound - gain_tolerance(graph):
        return "optimal"
    integral = bool(np.all(graph.weights == np.round(graph.weights)))
    if bound is not None and integral and value > bound - 1.0:
        return "optimal"  # no whole-number cut lies between value and a bound below value + 1
    if time_limit is not None:
        return "time_limit"
    return "iteration_limit"


def _message(relaxation, runs, budget) -> str:
    searches = f"best of {len(runs)} tabu search(es) of {budget} moves"
    if relaxation is None:
        return f"no edges; {searches}"
    if relaxation.certified:
        about = (f"relaxation certified within relative {relaxation.gap:.2g} after "
                 f"{relaxation.n_sweeps} sweeps")
    else:
        about = "relaxation bound not confirmed by a factorisation, none reported"
    return f"{about}; {searches}, from the given start(s) and a hyperplane rounding"


register_method("auto", _solve_auto, warm_start=True)
