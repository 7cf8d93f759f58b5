"""``segcut maxcut``: solve max-cut on a graph file and report value, bound and gap."""

from __future__ import annotations

import json
import re
import sys
import time
from pathlib import Path

from ..common import EXIT_OK, UsageError

# A tiny graph with one non-unit weight: solving it once compiles (or loads from the
# cache) every kernel the method uses, including the SDP start of "tabu", so that
# ``solve_seconds`` measures the solver alone.
_WARM_UP_EDGES = ([0, 1, 2, 3, 4, 0], [1, 2, 3, 4, 0, 2], [1.0, 1.0, 1.0, 1.0, 1.0, -0.5])


def command_line_words(message: str) -> str:
    """Python keyword syntax in a solver's message as the command line's options.

    Examples
    --------
    >>> command_line_words("use method='tabu' or set time_limit=5")
    'use --method tabu or set --time-limit 5'
    """
    message = re.sub(r"\bmethod='([^']*)'", r"--method \1", message)
    return re.sub(r"\b([a-z]+)_([a-z]+)=", r"--\1-\2 ", message)


def _format_number(value) -> str:
    if value is None:
        return "none"
    if float(value).is_integer() and abs(value) < 1e15:
        return str(int(value))
    return f"{value:.10g}"


def maxcut(graph_path, *, method: str = "auto", time_limit: float | None = None, seed: int = 0,
           as_json: bool = False, sides_path=None) -> int:
    """Read a graph file, solve max-cut, print the answer; return the exit code.

    Parameters
    ----------
    graph_path : str or os.PathLike
        Edge list (``n m`` then ``i j w``) or ``.graphml`` file.
    method : str
        A registered max-cut method (plugins included).
    time_limit : float, optional
        Seconds the solver may use.
    seed : int
        Random seed; the same seed gives the same cut when no clock ends the search.
    as_json : bool
        Print one JSON object instead of text.
    sides_path : str or os.PathLike, optional
        Write one side label (1 or 0) per vertex there.

    Returns
    -------
    int
        0 on success.

    Raises
    ------
    UsageError
        An unknown method, a missing file, or a method that refuses this graph (the
        message in command-line words).
    segcut.errors.InputError
        An unreadable graph file (reported in one line, exit code 1).
    """
    from segcut.graph import graph_from_edges
    from segcut.maxcut import available_methods, solve_maxcut
    from segcut.maxcut.formats import read_graph, write_sides

    clock = time.perf_counter()
    methods = available_methods()
    if method not in methods:
        raise UsageError(f"maxcut: unknown method {method!r}; choose one of "
                         f"{', '.join(methods)}")
    if not Path(graph_path).exists():
        raise UsageError("no such file", path=graph_path)
    graph = read_graph(graph_path)
    warm_up = graph_from_edges(5, *_WARM_UP_EDGES)
    try:
        solve_maxcut(warm_up, method=method, time_limit=0.05, rng=0)
        result = solve_maxcut(graph, method=method, time_limit=time_limit, rng=seed)
    except ValueError as err:  # the method refuses this graph or an option
        raise UsageError(f"maxcut: {command_line_words(str(err))}", path=graph_path) from None
    if sides_path is not None:
        write_sides(result.sides, sides_path)
    seconds = time.perf_counter() - clock
    record = {
        "graph": str(graph_path),
        "value": result.value,
        "upper_bound": result.upper_bound,
        "gap": result.gap,
        "method": result.method,
        "status": result.status,
        "message": result.message,
        "iterations": result.n_iter,
        "seconds": round(seconds, 6),
        "solve_seconds": round(result.seconds, 6),
        "n_vertices": graph.n_vertices,
        "n_edges": graph.n_edges,
        "seed": seed,
        "time_limit": time_limit,
        "sides_file": None if sides_path is None else str(sides_path),
    }
    if as_json:
        sys.stdout.write(json.dumps(record) + "\n")
        return EXIT_OK
    gap = "" if result.gap is None else f" (gap {100.0 * result.gap:.3g}%)"
    lines = [
        f"graph        {graph_path}: {graph.n_vertices} vertices, {graph.n_edges} edges",
        f"cut value    {_format_number(result.value)}",
        f"upper bound  {_format_number(result.upper_bound)}{gap}",
        f"method       {result.method} ({result.status}: {result.message})",
        f"seconds      {seconds:.3f} (solver {result.seconds:.3f})",
    ]
    if sides_path is not None:
        lines.append(f"sides        written to {sides_path}")
    sys.stdout.write("\n".join(lines) + "\n")
    return EXIT_OK
