"""Shared validators and oracles for the max-cut tests.

``assert_valid_cut`` checks the certificate any method returns; ``brute_force_maxcut``
is an independent exhaustive reference (plain numpy, nothing from the solvers) for
graphs of up to about 20 vertices.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from segcut.graph import as_signed_graph, graph_from_edges
from segcut.maxcut import STATUSES, CutResult

__all__ = ["NUMPY_TRANSFORMS", "SHARED_DATA", "assert_valid_cut", "brute_force_maxcut", "reference_cut_value",
           "reference_gains"]


def reference_cut_value(graph, sides) -> float:
    """Cut value by a plain loop over the edges (independent of ``segcut.cut_value``)."""
    graph = as_signed_graph(graph)
    x = np.asarray(sides)
    total = 0.0
    n = graph.n_vertices
    for i in range(n):
        for k in range(graph.indptr[i], graph.indptr[i + 1]):
            j = graph.indices[k]
            if i < j and x[i] != x[j]:
                total += float(graph.weights[k])
    return total


def reference_gains(graph, sides) -> np.ndarray:
    """Change of the cut value when each vertex alone changes side, from the definition."""
    graph = as_signed_graph(graph)
    x = np.asarray(sides)
    gains = np.zeros(graph.n_vertices)
    for i in range(graph.n_vertices):
        for k in range(graph.indptr[i], graph.indptr[i + 1]):
            j = graph.indices[k]
            w = float(graph.weights[k])
            # the edge i-j becomes cut if it was uncut, and uncut if it was cut
            gains[i] += w if x[i] == x[j] else -w
    return gains


def _tolerance(graph) -> float:
    return 1e-9 * max(1.0, float(np.abs(graph.weights).sum() / 2.0))


def assert_valid_cut(graph, result, *, local_optimum: bool = False) -> None:
    """Check a :class:`~segcut.maxcut.CutResult` against its graph.

    Checks: ``sides`` has one entry per vertex, each -1 or +1; the reported value
    equals the value recomputed from the sides by an independent loop; the upper
    bound, when given, is >= the value; the gap is ``(bound - value) / |bound|``
    (None without a bound); the status is a known one. With ``local_optimum=True``
    also checks 1-flip optimality in both directions: no vertex of either side
    gains by moving to the other side.
    """
    graph = as_signed_graph(graph)
    assert isinstance(result, CutResult), f"expected CutResult, got {type(result).__name__}"
    sides = np.asarray(result.sides)
    assert sides.shape == (graph.n_vertices,), f"sides shape {sides.shape} != ({graph.n_vertices},)"
    assert np.all(np.isin(sides, (-1, 1))), f"sides not in {{-1, +1}}: {np.unique(sides)}"
    tol = _tolerance(graph)
    value = reference_cut_value(graph, sides)
    assert math.isfinite(result.value)
    assert abs(result.value - value) <= tol, f"reported value {result.value} != recomputed {value}"
    if result.upper_bound is None:
        assert result.gap is None, f"gap {result.gap} given without an upper bound"
    else:
        assert math.isfinite(result.upper_bound)
        assert result.upper_bound >= value - tol, (
            f"upper bound {result.upper_bound} below the value {value}")
        expected_gap = max(0.0, (result.upper_bound - result.value) / max(abs(result.upper_bound), 1e-12))
        assert result.gap is not None
        assert abs(result.gap - expected_gap) <= 1e-9 + 1e-9 * expected_gap, (
            f"gap {result.gap} inconsistent with value {result.value} and bound {result.upper_bound}")
    assert result.status in STATUSES, f"unknown status {result.status!r}"
    assert isinstance(result.method, str) and result.method
    if local_optimum:
        gains = reference_gains(graph, sides)
        up = gains[sides == 1]
        down = gains[sides == -1]
        assert up.size == 0 or up.max() <= tol, f"a +1 vertex gains {up.max()} by moving"
        assert down.size == 0 or down.max() <= tol, f"a -1 vertex gains {down.max()} by moving"


def brute_force_maxcut(graph) -> tuple[float, np.ndarray]:
    """The maximum cut by trying every split (vertex 0 fixed on side +1).

    Returns ``(value, sides)``. Plain numpy, vectorised in blocks; fine up to about
    20 vertices.
    """
    graph = as_signed_graph(graph)
    n = graph.n_vertices
    if n > 22:
        raise ValueError(f"brute force is for tiny graphs; got {n} vertices")
    if n <= 1:
        return 0.0, np.ones(n, dtype=np.int8)
    i, j, w = graph.edges()
    best_value = -math.inf
    best_sides = None
    free = n - 1
    block = 1 << min(free, 14)
    n_blocks = (1 << free) // block
    low = np.arange(block, dtype=np.int64)
    for b in range(n_blocks):
        codes = (b * block + low)[:, None]
        bits = (codes >> np.arange(free, dtype=np.int64)) & 1          # (block, n-1)
        sides = np.concatenate([np.ones((block, 1), dtype=np.int8),
                                np.where(bits == 1, -1, 1).astype(np.int8)], axis=1)
        values = (sides[:, i] != sides[:, j]).astype(np.float64) @ w
        k = int(np.argmax(values))
        if values[k] > best_value:
            best_value = float(values[k])
            best_sides = sides[k].copy()
    return best_value, best_sides


#: Public reference data (G-set graphs, dev photographs): ``../shared/data`` beside the
#: project root. Tests that need it skip, with the reason, when it is absent.
SHARED_DATA = Path(__file__).resolve().parents[1].parent / "shared" / "data"

#: The 8 flips and quarter turns of the square, written with plain numpy; each acts on
#: the first two axes (rows, columns) and channels ride along.
NUMPY_TRANSFORMS = {
    "identity": lambda a: a,
    "rot90": lambda a: np.rot90(a, 1),
    "rot180": lambda a: np.rot90(a, 2),
    "rot270": lambda a: np.rot90(a, 3),
    "flip_columns": np.fliplr,
    "transpose": lambda a: np.swapaxes(a, 0, 1),
    "flip_rows": np.flipud,
    "anti_transpose": lambda a: np.swapaxes(a[::-1, ::-1], 0, 1),
}


def signed_graph_with_m_edges(n, m, seed, weights):
    """m distinct random pairs of n vertices with +-1, normal or whole weights in [-10, 10]."""
    rng = np.random.default_rng(seed)
    i, j = rng.integers(0, n, 3 * m), rng.integers(0, n, 3 * m)
    keep = i != j
    a, b = np.minimum(i, j)[keep], np.maximum(i, j)[keep]
    _, first = np.unique(a * n + b, return_index=True)
    chosen = np.sort(first)[:m]
    w = {"pm": lambda: rng.choice([-1.0, 1.0], size=m), "normal": lambda: rng.normal(size=m),
         "whole": lambda: rng.integers(-10, 11, size=m).astype(float)}[weights]()
    return graph_from_edges(n, a[chosen], b[chosen], w)


def spots_with_halo(size, n_spots, radius, halo_radius, seed):
    """Bright round spots, each in a dim halo, on a dark field with Gaussian noise.

    A two-cluster scene of the kind fluorescence gives (test data only): returns the
    float image in [0, 1] (spots 0.9, halos 0.18, field 0.1, noise sigma 0.02) and the
    spots' true mask.
    """
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:size, :size]
    truth = np.zeros((size, size), bool)
    halo = np.zeros((size, size), bool)
    margin = max(12, size // 25)
    for r, c in rng.integers(margin, size - margin, (n_spots, 2)):
        d2 = (yy - r) ** 2 + (xx - c) ** 2
        truth |= d2 <= radius ** 2
        halo |= d2 <= halo_radius ** 2
    image = np.where(truth, 0.9, np.where(halo, 0.18, 0.1)) + rng.normal(0, 0.02, truth.shape)
    return image.clip(0.0, 1.0), truth
