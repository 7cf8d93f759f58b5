"""Shared plumbing of the max-cut solvers: the result type, the method registry,
option checks and the final re-check of every answer."""

from __future__ import annotations

import inspect
import math
import time
from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np

from .._plugins import check_new_name, first_doc_line, load_plugins
from ..graph import SignedGraph, as_signed_graph, cut_value

__all__ = [
    "CutResult",
    "MaxcutMethod",
    "STATUSES",
    "register_method",
    "get_method",
    "available_methods",
    "solve_maxcut",
    "relative_gap",
    "ENTRY_POINT_GROUP",
]

ENTRY_POINT_GROUP = "segcut.maxcut_methods"

#: Status strings a :class:`CutResult` may carry, and what each promises.
STATUSES = {
    "optimal": "the value is proven optimal (exhaustive search, or bound met)",
    "gap_reached": "the certified relative gap is at or below the requested tolerance",
    "local_optimum": "no single vertex flip improves the cut",
    "time_limit": "stopped at the time limit; the answer is valid but may improve with more time",
    "iteration_limit": "stopped at the iteration budget; the answer is valid",
}

# Absolute slack allowed when re-checking a reported value or bound, relative to
# the total absolute weight of the graph.
_CHECK_RTOL = 1e-9


@dataclass(frozen=True, eq=False)
class CutResult:
    """The answer of a max-cut solver.

    Attributes
    ----------
    sides : (n,) int8 ndarray
        Side of each vertex, -1 or +1.
    value : float
        Cut value of ``sides``: ``sum_{i<j} w_ij (1 - x_i x_j) / 2``.
    upper_bound : float or None
        A certified upper bound on the best cut value, or None when the method
        gives none.
    gap : float or None
        Relative gap ``(upper_bound - value) / max(|upper_bound|, tiny)``; None
        without a bound.
    method : str
        Name of the method that produced the answer.
    status : str
        One of :data:`STATUSES`.
    message : str
        One line on how the solve ended.
    n_iter : int
        Method-specific iteration count (moves, sweeps or nodes).
    seconds : float
        Wall time of the solve (validation and re-check included; file reading not).
    info : dict
        Method-specific extras (for example the SDP relaxation value).
    """

    sides: np.ndarray
    value: float
    upper_bound: float | None
    gap: float | None
    method: str
    status: str
    message: str = ""
    n_iter: int = 0
    seconds: float = 0.0
    info: dict = field(default_factory=dict)

    def __repr__(self) -> str:
        bound = "None" if self.upper_bound is None else f"{self.upper_bound:.6g}"
        gap = "None" if self.gap is None else f"{self.gap:.3g}"
        return (
            f"CutResult(method={self.method!r}, value={self.value:.6g}, upper_bound={bound}, "
            f"gap={gap}, status={self.status!r}, n_vertices={self.sides.shape[0]})"
        )


def relative_gap(value: float, upper_bound: float | None) -> float | None:
    """``(upper_bound - value) / max(|upper_bound|, 1e-12)``, clipped at 0; None without a bound.

    Examples
    --------
    >>> relative_gap(99.0, 100.0)
    0.01
    >>> relative_gap(5.0, None) is None
    True
    """
    if upper_bound is None:
        return None
    return max(0.0, (upper_bound - value) / max(abs(upper_bound), 1e-12))


@dataclass(frozen=True)
class MaxcutMethod:
    """A registered solver back-end.

    Attributes
    ----------
    name : str
        The name users pass as ``method=``.
    solve : callable
        ``solve(graph, *, time_limit, rng, **options) -> CutResult``, where ``graph`` is
        a validated :class:`~segcut.graph.SignedGraph`, ``time_limit`` a float in
        seconds or None and ``rng`` a ``numpy.random.Generator``.
    options : frozenset of str
        The keyword options ``solve`` accepts besides ``time_limit`` and ``rng``.
    description : str
        One line for listings (``segcut maxcut --help``).
    warm_start : bool
        True when ``solve`` takes a ``start`` option (an ``(n,)`` array of +-1) and
        searches from it, so a caller holding a good split can hand it over (the
        image pipeline passes the split of its colour-model rounds). Declared by
        the method, never guessed from its option names.
    """

    name: str
    solve: Callable
    options: frozenset = frozenset()
    description: str = ""
    warm_start: bool = False

    def __post_init__(self):
        if not isinstance(self.warm_start, bool):
            raise TypeError(f"warm_start of max-cut method {self.name!r} must be True or False; "
                            f"got {self.warm_start!r}")
        if self.warm_start and "start" not in self.options:
            raise ValueError(f"max-cut method {self.name!r} declares warm_start but takes no "
                             "'start' option")


_REGISTRY: dict[str, MaxcutMethod] = {}
_ENTRY_POINTS_LOADED = False


def register_method(name: str, solve: Callable, *, options=None, description: str = "",
                    warm_start: bool = False, replace_existing: bool = False) -> MaxcutMethod:
    """Register a max-cut back-end under ``name``.

    Parameters
    ----------
    name : str
        Lower-case method name.
    solve : callable
        See :class:`MaxcutMethod`.
    options : iterable of str, optional
        Accepted options; by default the keyword-only parameters of ``solve`` other
        than ``time_limit`` and ``rng``.
    description : str
        One line for listings; by default the first line of ``solve.__doc__``.
    warm_start : bool, default False
        The method searches from a given ``start`` (see :class:`MaxcutMethod`).
    replace_existing : bool
        Allow replacing a method of the same name.

    Returns
    -------
    MaxcutMethod

    Examples
    --------
    >>> import numpy as np
    >>> def all_on_one_side(graph, *, time_limit=None, rng=None):
    ...     '''Put every vertex on side +1.'''
    ...     sides = np.ones(graph.n_vertices, dtype=np.int8)
    ...     return CutResult(sides, 0.0, None, None, "everything_left", "iteration_limit")
    >>> register_method("everything_left", all_on_one_side).description
    'Put every vertex on side +1.'
    >>> unregister_method("everything_left")
    """
    check_new_name(_REGISTRY, name, "max-cut method", replace_existing=replace_existing)
    if options is None:
        params = inspect.signature(solve).parameters.values()
        options = [p.name for p in params
                   if p.kind == p.KEYWORD_ONLY and p.name not in ("time_limit", "rng")]
    description = description or first_doc_line(solve)
    method = MaxcutMethod(name=name, solve=solve, options=frozenset(options),
                          description=description, warm_start=warm_start)
    _REGISTRY[name] = method
    return method


def unregister_method(name: str) -> None:
    """Remove a method from the registry (mainly for tests)."""
    _REGISTRY.pop(name, None)


def _load_entry_points() -> None:
    global _ENTRY_POINTS_LOADED
    if not _ENTRY_POINTS_LOADED:
        _ENTRY_POINTS_LOADED = True
        load_plugins(ENTRY_POINT_GROUP, _REGISTRY, MaxcutMethod, register_method)


def available_methods() -> dict[str, MaxcutMethod]:
    """All registered methods by name, plugins from the entry-point group included."""
    _load_entry_points()
    return dict(sorted(_REGISTRY.items()))


def get_method(name: str) -> MaxcutMethod:
    """The registered method called ``name``; ValueError listing the known ones otherwise."""
    methods = available_methods()
    if name not in methods:
        raise ValueError(
            f"unknown max-cut method {name!r}; choose one of {', '.join(methods)}"
        )
    return methods[name]


def solve_maxcut(graph, *, method: str = "tabu", time_limit: float | None = None,
                 rng=None, **options) -> CutResult:
    """Split the vertices of a signed graph in two, maximising the cut value.

    Parameters
    ----------
    graph : SignedGraph or graph-like
        Anything :func:`~segcut.graph.as_signed_graph` accepts.
    method : str, default "tabu"
        A registered method (see :func:`available_methods`): ``"local"`` (one 1-flip
        descent), ``"tabu"`` (time-boxed tabu search with perturbations; the default
        for quality), ``"sdp"`` (semidefinite relaxation, certified upper bound,
        Goemans-Williamson rounding), ``"exact"`` (exhaustive, small graphs), plus
        any plugins.
    time_limit : float, optional
        Seconds the method may use; methods stop early when they finish sooner.
    rng : None, int or numpy.random.Generator
        Seed or generator; the same seed gives the same answer (for time-limited
        methods: when the iteration budget, not the clock, ends the search).
    **options
        Method-specific options; unknown ones are refused before any work.

    Returns
    -------
    CutResult
        Re-checked before it is returned: ``value`` is recomputed from ``sides`` and
        ``upper_bound >= value``.

    Raises
    ------
    ValueError
        For an unknown method or option, or a bad time limit.

    Notes
    -----
    With spins :math:`x_i \\in \\{-1, +1\\}` the cut value is
    :math:`\\sum_{i<j} w_{ij}(1 - x_i x_j)/2 = x^T L x / 4` with the Laplacian
    :math:`L = \\mathrm{diag}(W\\mathbf{1}) - W`. Weights may be negative.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> square = graph_from_edges(4, [0, 1, 2, 3], [1, 2, 3, 0])
    >>> solve_maxcut(square, method="exact").value
    4.0
    """
    spec = get_method(method)
    stray = sorted(set(options) - spec.options)
    if stray:
        accepted = ", ".join(sorted(spec.options)) or "none"
        raise ValueError(
            f"method {method!r} does not take option(s) {', '.join(stray)}; it accepts: {accepted}"
        )
    if time_limit is not None:
        if isinstance(time_limit, bool) or not isinstance(time_limit, (int, float, np.number)) \
                or not math.isfinite(time_limit) or time_limit <= 0:
            raise ValueError(f"time_limit must be a positive number of seconds; got {time_limit!r}")
        time_limit = float(time_limit)
    graph = as_signed_graph(graph)
    generator = np.random.default_rng(rng)
    start = time.perf_counter()
    result = spec.solve(graph, time_limit=time_limit, rng=generator, **options)
    return check_result(graph, result, seconds=time.perf_counter() - start, method=method)


def check_result(graph: SignedGraph, result: CutResult, *, seconds: float | None = None,
                 method: str | None = None) -> CutResult:
    """Re-check a back-end's answer: recompute the value, check the bound, fill the gap.

    Raises
    ------
    RuntimeError
        When the reported value differs from the recomputed one, or the bound is
        below the value: both are bugs in the back-end, never the user's fault.
    """
    if not isinstance(result, CutResult):
        raise RuntimeError(f"max-cut method {method!r} returned {type(result).__name__}, not CutResult")
    sides = np.ascontiguousarray(result.sides, dtype=np.int8)
    if sides.shape != (graph.n_vertices,) or not np.all(np.abs(sides) == 1):
        raise RuntimeError(f"max-cut method {method or result.method!r} returned invalid sides")
    value = cut_value(graph, sides)
    scale = max(1.0, float(np.abs(graph.weights).sum() / 2.0))
    tol = _CHECK_RTOL * scale
    if abs(value - result.value) > max(tol, 1e-9 * abs(value)):
        raise RuntimeError(
            f"max-cut method {result.method!r} reported value {result.value!r} but its sides cut {value!r}"
        )
    bound = result.upper_bound
    if bound is not None:
        bound = float(bound)
        if bound < value - max(tol, 1e-9 * abs(value)):
            raise RuntimeError(
                f"max-cut method {result.method!r} reported upper bound {bound!r} below its value {value!r}"
            )
        bound = max(bound, value)
    if result.status not in STATUSES:
        raise RuntimeError(f"max-cut method {result.method!r} returned unknown status {result.status!r}")
    return replace(
        result,
        sides=sides,
        value=value,
        upper_bound=bound,
        gap=relative_gap(value, bound),
        method=result.method or (method or ""),
        seconds=result.seconds if seconds is None else float(seconds),
    )
