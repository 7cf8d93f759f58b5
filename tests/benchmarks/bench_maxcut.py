"""Max-cut benchmark: value / best known, bound and time per instance and method, and the
1-flip local search against networkx ``one_exchange`` side by side.

Usage (from the project root)::

    python tests/benchmarks/bench_maxcut.py                      # ../shared/data/gset, 10 s
    python tests/benchmarks/bench_maxcut.py --time-limit 2 --instances G11 G14
    python tests/benchmarks/bench_maxcut.py --folder my_graphs --best-known my_graphs/best.csv

The folder holds edge-list files (``n m`` then ``i j w``); the CSV has the columns
``instance`` and ``best_known_cut`` (other columns are ignored). Prints markdown tables.
Times are wall-clock seconds of the solver alone (kernels compiled or loaded from the
cache beforehand); on a shared machine they depend on the load.
"""

from __future__ import annotations

import argparse
import csv
import platform
import sys
import time
from pathlib import Path

import numpy as np

from segcut.graph import cut_value, graph_from_edges

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from checks import signed_graph_with_m_edges  # noqa: E402  (tests/checks.py)
from segcut.maxcut import available_methods, solve_maxcut
from segcut.maxcut.formats import read_graph
from segcut.maxcut.local import descend
from segcut.maxcut.tabu import tabu_search

PROJECT_ROOT = Path(__file__).resolve().parents[2]
DEFAULT_FOLDER = PROJECT_ROOT.parent / "shared" / "data" / "gset"


def read_best_known(path: Path) -> dict[str, float]:
    with open(path, newline="", encoding="utf-8") as fh:
        return {row["instance"]: float(row["best_known_cut"]) for row in csv.DictReader(fh)}


def warm_up(methods) -> None:
    tiny = graph_from_edges(5, [0, 1, 2, 3, 4, 0], [1, 2, 3, 4, 0, 2], [1, 1, 1, 1, 1, -0.5])
    for method in methods:
        solve_maxcut(tiny, method=method, time_limit=0.05, rng=0)
    solve_maxcut(graph_from_edges(3, [0, 1], [1, 2]), method="tabu", max_moves=10, rng=0)
    for rule in ("first", "best"):
        descend(tiny, np.ones(5, dtype=np.int8), rng=0, rule=rule)
        descend(graph_from_edges(3, [0, 1], [1, 2]), np.ones(3, dtype=np.int8), rng=0, rule=rule)


def solve_row(name, graph, method, best, time_limit, seed):
    limit = time_limit if method in ("tabu",) else None
    result = solve_maxcut(graph, method=method, time_limit=limit, rng=seed)
    bound = "" if result.upper_bound is None else f"{result.upper_bound:.2f}"
    ratio = "" if best is None else f"{result.value / best:.4f}"
    return (f"| {name} | {graph.n_vertices} | {method} | {result.value:g} | {ratio} | {bound} | "
            f"{result.status} | {result.seconds:.4g} |"), result


def induced_subgraph(graph, n_keep):
    i, j, w = graph.edges()
    keep = (i < n_keep) & (j < n_keep)
    return graph_from_edges(min(n_keep, graph.n_vertices), i[keep], j[keep], w[keep])


def _descents_until(graph, target, *, rule, empty_start, max_descents, repeats=5):
    """Descents (seeds 0, 1, ...) until the best cut is >= ``target``; only the descents
    are timed. The same sequence is run ``repeats`` times and the fastest total kept (a
    millisecond sequence is easily stretched by other work on a shared machine).
    Returns (best cut, first cut, descents, seconds summed)."""
    totals = []
    for _ in range(repeats):
        rng = np.random.default_rng(0)
        seconds = 0.0
        best = -np.inf
        first = None
        descents = 0
        while descents < max_descents and best < target - 1e-9:
            if empty_start:
                start = np.ones(graph.n_vertices, dtype=np.int8)
                seed = descents
            else:
                start = rng.choice(np.array([-1, 1], dtype=np.int8), size=graph.n_vertices)
                seed = rng
            t0 = time.perf_counter()
            sides, _ = descend(graph, start, rng=seed, rule=rule)
            seconds += time.perf_counter() - t0
            value = cut_value(graph, sides)
            first = value if first is None else first
            best = max(best, value)
            descents += 1
        totals.append(seconds)
    return best, first, descents, min(totals)


NX_ROWS = (  # label, rule, start from the empty cut
    ("local rule=first, random starts", "first", False),
    ("local rule=best, random starts", "best", False),
    ("local rule=best, start=empty (seeds break ties)", "best", True),
    ("local rule=first, start=empty (seeds set the order)", "first", True),
)


def compare_with_networkx(name, graph, max_descents=100):
    """networkx one_exchange (from the empty cut, its default) vs. our descents, each kind
    repeated with seeds 0, 1, ... until our best cut is equal or better (at most
    ``max_descents``), times summed; then the tabu search with a doubling move budget.
    Returns markdown rows."""
    import networkx as nx
    from networkx.algorithms.approximation.maxcut import one_exchange

    h = nx.Graph()
    h.add_nodes_from(range(graph.n_vertices))
    i, j, w = graph.edges()
    h.add_weighted_edges_from(zip(i.tolist(), j.tolist(), w.tolist()))
    t0 = time.perf_counter()
    nx_value, _ = one_exchange(h, seed=0, weight="weight")
    nx_seconds = time.perf_counter() - t0

    head = f"| {name} | {graph.n_vertices} | {graph.n_edges} | {nx_value:g} | {nx_seconds:.2f} |"
    rows = []
    for label, rule, empty_start in NX_ROWS:
        best, first, runs, seconds = _descents_until(graph, nx_value, rule=rule,
                                                     empty_start=empty_start,
                                                     max_descents=max_descents)
        reached = best >= nx_value - 1e-9
        ratio = f"{nx_seconds / seconds:,.0f}x" if reached else "not reached"
        rows.append(f"{head} {label} | {first:g} | {best:g} | {runs} | {seconds * 1e3:.3f} | "
                    f"{nx_seconds / (seconds / runs):,.0f}x | {ratio} |")

    # the tabu search (1-flip moves too) with a doubling move budget until it matches
    moves = 500
    while True:
        start = np.random.default_rng(1).choice(np.array([-1, 1], dtype=np.int8),
                                                 size=graph.n_vertices)
        tabu_seconds = np.inf
        for _ in range(3):  # fastest of 3 identical runs
            t0 = time.perf_counter()
            sides, _ = tabu_search(graph, start, rng=1, max_moves=moves)
            tabu_seconds = min(tabu_seconds, time.perf_counter() - t0)
        tabu_value = cut_value(graph, sides)
        if tabu_value >= nx_value - 1e-9 or moves >= 10 ** 8:
            break
        moves *= 2
    ratio = f"{nx_seconds / tabu_seconds:,.0f}x" if tabu_value >= nx_value - 1e-9 else "not reached"
    rows.append(f"{head} tabu, random start, {moves} moves | {tabu_value:g} | {tabu_value:g} | 1 | "
                f"{tabu_seconds * 1e3:.3f} | {nx_seconds / tabu_seconds:,.0f}x | {ratio} |")
    return rows


def defaults_against_networkx(n=300, m=1200, seeds=range(4), kinds=("pm", "normal", "whole")):
    """``solve_maxcut(method="local")`` at its defaults (the whole call: validation and
    re-check included; fastest of 20) against one networkx one_exchange run on the same
    random signed graph, side by side. Returns markdown rows."""
    import networkx as nx
    from networkx.algorithms.approximation.maxcut import one_exchange

    rows = []
    for kind in kinds:
        for seed in seeds:
            graph = signed_graph_with_m_edges(n, m, seed, kind)
            h = nx.Graph()
            h.add_nodes_from(range(n))
            i, j, w = graph.edges()
            h.add_weighted_edges_from(zip(i.tolist(), j.tolist(), w.tolist()))
            t0 = time.perf_counter()
            nx_value, _ = one_exchange(h, seed=0, weight="weight")
            nx_seconds = time.perf_counter() - t0
            ours = np.inf
            for _ in range(20):
                t0 = time.perf_counter()
                result = solve_maxcut(graph, method="local", rng=0)
                ours = min(ours, time.perf_counter() - t0)
            verdict = "ok" if result.value >= nx_value - 1e-9 else "LOST"
            rows.append(f"| {kind} | {seed} | {nx_value:.6g} | {nx_seconds:.2f} | "
                        f"{result.value:.6g} | {ours * 1e3:.3f} | {nx_seconds / ours:,.0f}x | "
                        f"{verdict} |")
    return rows


def print_defaults_table() -> None:
    print("`local` at its defaults vs networkx one_exchange (steepest ascent from the empty "
          "cut, weight=\"weight\", seed 0), random signed graphs n=300, m=1200:")
    print()
    print("| weights | graph seed | networkx cut | networkx s | local cut | local ms | speed-up "
          "| not lower |")
    print("|---|---|---|---|---|---|---|---|")
    for row in defaults_against_networkx():
        print(row, flush=True)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--folder", type=Path, default=DEFAULT_FOLDER,
                        help="folder of edge-list files (default ../shared/data/gset)")
    parser.add_argument("--best-known", type=Path, default=None,
                        help="CSV with columns instance,best_known_cut (default FOLDER/best_known.csv)")
    parser.add_argument("--instances", nargs="*", default=None, help="instance names (default all)")
    parser.add_argument("--methods", nargs="*", default=["tabu", "local", "sdp"])
    parser.add_argument("--time-limit", type=float, default=10.0, help="seconds per tabu run")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--nx-instances", nargs="*", default=None,
                        help="instances for the networkx comparison (default: the one with the "
                             "fewest edges; networkx needs minutes on a whole 800-vertex graph)")
    parser.add_argument("--nx-vertices", type=int, default=0,
                        help="compare on the subgraph induced by the first N vertices (0 = whole graph)")
    parser.add_argument("--local-defaults", action="store_true",
                        help="only compare 'local' at its defaults with networkx on random "
                             "signed graphs (n=300, m=1200)")
    args = parser.parse_args(argv)

    if args.local_defaults:
        warm_up(["local"])
        print_defaults_table()
        return 0
    if not args.folder.is_dir():
        print(f"no graph folder at {args.folder}; nothing to benchmark", file=sys.stderr)
        return 0
    best_path = args.best_known or args.folder / "best_known.csv"
    best_known = read_best_known(best_path) if best_path.exists() else {}
    files = sorted(p for p in args.folder.iterdir() if p.suffix in (".txt", ".graphml"))
    if args.instances:
        files = [p for p in files if p.stem in args.instances]
    files.sort(key=lambda p: (len(p.stem), p.stem))
    methods = [m for m in args.methods if m in available_methods()]

    print(f"# max-cut benchmark ({platform.processor() or platform.machine()}, "
          f"python {platform.python_version()})")
    print(f"command: python tests/benchmarks/bench_maxcut.py {' '.join(argv or sys.argv[1:])}")
    print()
    warm_up(methods)
    print("| instance | n | method | value | value/best | upper bound | status | seconds |")
    print("|---|---|---|---|---|---|---|---|")
    ratios: dict[str, list[float]] = {m: [] for m in methods}
    graphs = {}
    for path in files:
        graph = read_graph(path)
        graphs[path.stem] = graph
        best = best_known.get(path.stem)
        for method in methods:
            row, result = solve_row(path.stem, graph, method, best, args.time_limit, args.seed)
            print(row, flush=True)
            if best:
                ratios[method].append(result.value / best)
    print()
    print("| method | instances | mean value/best | min value/best |")
    print("|---|---|---|---|")
    for method, values in ratios.items():
        if values:
            print(f"| {method} | {len(values)} | {np.mean(values):.4f} | {np.min(values):.4f} |")

    chosen = args.nx_instances
    if chosen is None:
        chosen = sorted(graphs, key=lambda k: graphs[k].n_edges)[:1]
    if chosen:
        print()
        print("1-flip local search vs networkx one_exchange. networkx: one run from its "
              "default start, the empty cut (steepest ascent, random ties). Ours: descents of "
              "each kind, seeds 0, 1, ..., until the best cut is equal or better (at most 100), "
              "their times summed (fastest of 5 repeats of the whole sequence); then the tabu "
              "search from a random start with a doubling move budget until it is equal or "
              "better (the last budget's time, fastest of 3). networkx is run once.")
        print()
        print("| instance | n | m | networkx cut | networkx s | ours | first cut | best cut "
              "| runs | ms (all runs) | speed-up per run | speed-up at equal or better cut |")
        print("|---|---|---|---|---|---|---|---|---|---|---|---|")
        for name in chosen:
            if name not in graphs:
                continue
            graph = graphs[name]
            if args.nx_vertices:
                graph = induced_subgraph(graph, args.nx_vertices)
                name = f"{name}[:{args.nx_vertices}]"
            for row in compare_with_networkx(name, graph):
                print(row, flush=True)
        print()
        print_defaults_table()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
