"""How sure a split is, region by region and pixel by pixel.

The certified gap says the solver found (nearly) the best cut of the image's graph;
it says nothing about which parts of that cut the graph barely prefers. This module
measures that: for every vertex, how much cut value is lost by the best cut found
that puts it on the other side.

For a vertex ``i`` with side ``x_i`` in the reference cut (value ``V``), let
``V_other(i)`` be the best cut value seen, over an ensemble of near-optimal cuts,
among those that put ``i`` on the other side, and ``V_same(i)`` the best among those
that keep it (at least ``V``). The *flip cost* is ``d_i = V_same(i) - V_other(i)``
and the confidence

``c_i = 1/2 + 1/2 * clip(d_i / (margin * D_i), -1, 1)``,

with ``D_i = sum_j |w_ij|`` the weight of the vertex's edges (terminal edge
included) and ``margin`` a global setting (:data:`DEFAULT_MARGIN`). Moving ``i``
alone costs ``sum |w_ij|`` over its satisfied edges (repulsive edges cut,
attractive ones not) minus the same over its unsatisfied ones, so with
``margin = 1`` and no cascade, ``c_i`` is the share of the vertex's edge weight
that is satisfied: 1 when every edge holds it in place, :data:`TIE` (1/2) when
moving it costs nothing, below 1/2 when a better cut moves it. The cascades
below lower the cost to that of the cheapest segment found around ``i``, so
``c_i`` is the share of its edge weight that still holds it when its neighbours
may follow. A vertex with no edges is a free choice (:data:`TIE`). The ensemble:

- for every free vertex ``i``, the *forced flip*: ``i`` moved and locked, then the
  cascade of improving 1-flips of the other vertices (first in, first out, at most
  ``max_moves`` flips); every vertex it leaves moved gets that value as a
  candidate for ``V_other``. A cascade is how a whole segment changes side: a
  region tied to its neighbours pulls them along, so the cost is that of the
  cheapest segment found around it, not of the region alone. Each cascade finds a
  real cut, so ``d_i`` is never below the exact flip cost (the best over all cuts)
  and ``c_i`` never below the exact confidence;
- optionally, Goemans-Williamson roundings of an SDP factor by random hyperplanes,
  each polished by a 1-flip descent (far-reaching alternatives the cascades miss,
  such as two components turning over together).

:func:`segcut.split` uses the forced flips only (a few milliseconds per image). On
the dev sets (``tests/benchmarks/bench_confidence.py``, no prior), adding 8 or 32
polished roundings of a relaxation solved to 1e-3 changed the Spearman
correlation of ``uncertain_fraction`` with ``1 - IoU`` by at most 0.007
(photographs 0.569 without, 0.566 and 0.562 with; microscopy 0.600 in all three)
for a median 0.10-0.12 s more per image: the relaxations of these graphs are
nearly of rank one, so the roundings repeat the best cut.

Pixels take their region's value (:func:`pixel_confidence`); ``uncertain_fraction``
is the share of pixels below :data:`DEFAULT_LEVEL`.

Without a terminal vertex the sides mean something only up to a global flip: a
cut is compared with the reference after flipping it to the side of agreement,
and a cascade may move at most half the vertices (moving more is moving the
rest).
"""

from __future__ import annotations

import numpy as np

from . import _numba_cache

_numba_cache.configure_numba_cache()

from . import _confidence_kernels  # noqa: E402
from .graph import SignedGraph, as_signed_graph, cut_value, validate_sides  # noqa: E402
from .maxcut import _kernels  # noqa: E402
from .maxcut.local import gain_tolerance  # noqa: E402

__all__ = ["vertex_confidence", "region_confidence", "pixel_confidence", "uncertain_fraction",
           "confident_disagreement", "confident_reference", "split_confidence", "flip_costs",
           "confidence_to_uint8", "TIE", "DEFAULT_MARGIN", "DEFAULT_LEVEL"]

#: Confidence of a vertex (or pixel) whose side costs nothing to change.
TIE = 0.5

#: Share of a vertex's edge weight its flip must cost to be certain (1: all of it).
#: Chosen on the dev sets (``tests/benchmarks/bench_confidence.py``): 0.7 and 1.0
#: gave Spearman 0.44 / 0.57 (photographs) and 0.64 / 0.60 (microscopy).
DEFAULT_MARGIN = 1.0

#: Confidence below which a pixel counts as uncertain (``uncertain_fraction``).
DEFAULT_LEVEL = 0.9


def _edge_weight(graph: SignedGraph) -> np.ndarray:
    """``D_i = sum_j |w_ij|`` of every vertex."""
    n = graph.n_vertices
    rows = np.repeat(np.arange(n), np.diff(graph.indptr))
    return np.bincount(rows, weights=np.abs(graph.weights), minlength=n).astype(np.float64)


def _aligned(sides, reference, terminal):
    """``sides`` flipped, if need be, to the reference's orientation."""
    if terminal is not None:
        return sides if sides[terminal] == reference[terminal] else -sides
    return sides if np.count_nonzero(sides == reference) * 2 >= sides.size else -sides


def _hyperplane_cuts(graph, factor, n_hyperplanes, rng):
    from .maxcut.local import descend

    factor = np.asarray(factor, dtype=np.float64)
    if factor.ndim != 2 or factor.shape[0] != graph.n_vertices:
        raise ValueError(f"factor must have shape (n_vertices, k) = ({graph.n_vertices}, k); "
                         f"got {factor.shape}")
    normals = rng.standard_normal((factor.shape[1], n_hyperplanes))
    signs = np.where(factor @ normals >= 0.0, 1, -1).astype(np.int8)
    return [descend(graph, signs[:, h], rng=rng)[0] for h in range(n_hyperplanes)]


def flip_costs(graph, sides, *, terminal=None, max_moves=None, factor=None,
               n_hyperplanes=16, rng=None):
    """Flip cost ``d_i`` of every vertex (see the module notes) and the cut value.

    The terminal's cost is ``inf``. Arguments as for :func:`vertex_confidence`.

    Examples
    --------
    >>> from segcut.graph import graph_from_edges
    >>> g = graph_from_edges(3, [0, 1], [1, 2], [2.0, 1.0])
    >>> cost, value = flip_costs(g, [1, -1, 1])
    >>> cost.tolist(), value
    ([2.0, 3.0, 1.0], 3.0)
    """
    graph = as_signed_graph(graph)
    reference = validate_sides(graph, sides).copy()
    n = graph.n_vertices
    moves = n if max_moves is None else int(max_moves)
    value = cut_value(graph, reference)
    candidates = []
    if factor is not None:
        candidates = _hyperplane_cuts(graph, factor, n_hyperplanes, np.random.default_rng(rng))
    best_same = np.full(n, value)
    best_other = np.full(n, -np.inf)
    for cut in candidates:  # best_other is relative to the reference value
        cut = _aligned(cut, reference, terminal)
        change = cut_value(graph, cut) - value
        agree = cut == reference
        best_same[agree] = np.maximum(best_same[agree], value + change)
        best_other[~agree] = np.maximum(best_other[~agree], change)
    gains = np.empty(n, dtype=np.float64)
    _kernels.compute_gains(graph.indptr, graph.indices, graph.weights, reference, gains)
    _confidence_kernels.forced_flip_values(
        graph.indptr, graph.indices, graph.weights, reference, gains,
        -1 if terminal is None else int(terminal), gain_tolerance(graph), moves, best_other)
    return best_same - (value + best_other), value


def vertex_confidence(graph, sides, *, terminal: int | None = None,
                      margin: float = DEFAULT_MARGIN, max_moves: int | None = None,
                      factor=None, n_hyperplanes: int = 16, rng=None) -> np.ndarray:
    """Confidence in [0, 1] of every vertex's side in a (near-)optimal cut.

    Parameters
    ----------
    graph : SignedGraph or graph-like
    sides : (n,) array_like of +-1
        The reference cut (the solver's answer).
    terminal : int, optional
        A vertex whose side is fixed (it orients the cut); it is never moved and
        gets confidence 1. Without one, cuts are compared up to a global flip.
    margin : float, default :data:`DEFAULT_MARGIN`
        A flip costing ``margin * D_i`` or more is certain.
    max_moves : int, optional
        Flips per forced-flip cascade (by default the number of vertices).
    factor : (n, k) array_like, optional
        Unit rows of an SDP relaxation (``SdpSolution.factor``); when given,
        ``n_hyperplanes`` roundings by random hyperplanes, each polished by a 1-flip
        descent, join the ensemble.
    n_hyperplanes : int, default 16
    rng : None, int or numpy.random.Generator
        Seed of the hyperplanes and of the polish (only used with ``factor``).

    Returns
    -------
    (n,) float64 ndarray
        ``c_i = 1/2 + 1/2 * clip(d_i / (margin * D_i), -1, 1)`` (see the module
        notes: ``d_i`` the flip cost, ``D_i`` the weight of the vertex's edges);
        1 = certain, :data:`TIE` = a free choice.

    Raises
    ------
    ValueError
        For sides of the wrong length or values, a bad terminal, margin or factor.

    Notes
    -----
    The forced flips cost O(n * max_moves * degree) in the worst case; on image
    graphs the cascades stop after a few flips and the whole pass is linear in the
    number of edges times a small constant. The result is deterministic (the
    forced flips use no randomness; the roundings follow ``rng``).

    Examples
    --------
    Two strongly tied pairs (0-1 and 2-3) joined by one weak edge: moving vertex 1
    alone costs its 9 + 1 edge weight, but vertex 0 follows it and the pair moves
    for the weak edge only, 1/10 of vertex 1's edge weight (1/9 of vertex 0's):

    >>> from segcut.graph import graph_from_edges
    >>> g = graph_from_edges(4, [0, 1, 2], [1, 2, 3], [9.0, 1.0, 9.0])
    >>> vertex_confidence(g, [1, -1, 1, -1]).round(3).tolist()
    [0.556, 0.55, 0.55, 0.556]
    """
    graph = as_signed_graph(graph)
    reference = validate_sides(graph, sides).copy()
    n = graph.n_vertices
    if not (isinstance(margin, (int, float)) and not isinstance(margin, bool)
            and np.isfinite(margin) and margin > 0):
        raise ValueError(f"margin must be a number > 0; got {margin!r}")
    if terminal is not None and not (0 <= int(terminal) < n):
        raise ValueError(f"terminal must be a vertex index in [0, {n}); got {terminal!r}")
    moves = n if max_moves is None else int(max_moves)
    if moves < 1:
        raise ValueError(f"max_moves must be >= 1; got {max_moves!r}")
    cost, value = flip_costs(graph, reference, terminal=terminal, max_moves=moves,
                             factor=factor, n_hyperplanes=n_hyperplanes, rng=rng)
    scale = margin * _edge_weight(graph)
    ratio = np.divide(cost, scale, out=np.zeros(n), where=scale > 0)
    confidence = TIE + TIE * np.clip(ratio, -1.0, 1.0)
    if terminal is not None:
        confidence[int(terminal)] = 1.0
    return confidence


def region_confidence(image_graph, vertex_values) -> np.ndarray:
    """Confidence of every region: its vertex's; 1 for regions merged into a seed."""
    values = np.asarray(vertex_values, dtype=np.float64)[image_graph.region_vertex]
    return np.where(image_graph.merged != 0, 1.0, values)


def pixel_confidence(image_graph, vertex_values) -> np.ndarray:
    """Paint vertex confidences onto the pixels of an image graph.

    Every pixel takes its region's confidence (:func:`region_confidence`), also
    where the pixel refinement moved it: the pixel graph is solved exactly and its
    own margins are not measured, so the region's value stands for its pixels.

    Parameters
    ----------
    image_graph : ImageGraph
    vertex_values : (n_vertices,) array_like
        From :func:`vertex_confidence`.

    Returns
    -------
    float64 ndarray, shape of the labels
        Values in [0, 1]; 1 = certain. The labels, and hence the map, are in the
        caller's orientation, so the map moves with the image under flips and turns.

    Examples
    --------
    >>> from segcut import SplitConfig, build_image_graph
    >>> ig = build_image_graph(np.eye(4), SplitConfig(colour_model=False))
    >>> values = np.linspace(0.5, 1.0, ig.graph.n_vertices)
    >>> bool((pixel_confidence(ig, values) == values[ig.labels]).all())
    True
    """
    return region_confidence(image_graph, vertex_values)[image_graph.labels]


def uncertain_fraction(confidence, level: float = DEFAULT_LEVEL) -> float:
    """Share of the pixels whose confidence is below ``level``.

    Examples
    --------
    >>> uncertain_fraction(np.array([[1.0, 0.95], [0.5, 0.89]]))
    0.5
    """
    confidence = np.asarray(confidence, dtype=np.float64)
    if confidence.size == 0:
        return 0.0
    return float(np.count_nonzero(confidence < level)) / confidence.size


def confident_disagreement(mask, reference_mask, confidence, level: float = DEFAULT_LEVEL
                           ) -> float:
    """Share of the pixels where ``mask`` contradicts a confident pixel of a reference split.

    ``count(mask != reference_mask and confidence >= level) / n_pixels``: 0 when the
    mask agrees with every confident pixel of the reference (it may differ freely
    where the reference is unsure).

    Examples
    --------
    >>> ref = np.array([True, True, False, False])
    >>> confident_disagreement(np.array([False, True, True, False]), ref,
    ...                        np.array([1.0, 1.0, 0.5, 1.0]))
    0.25
    """
    mask = np.asarray(mask, dtype=bool)
    reference_mask = np.asarray(reference_mask, dtype=bool)
    confidence = np.asarray(confidence, dtype=np.float64)
    if not (mask.shape == reference_mask.shape == confidence.shape):
        raise ValueError(f"mask shape {mask.shape}, reference shape {reference_mask.shape} and "
                         f"confidence shape {confidence.shape} must be equal")
    if mask.size == 0:
        return 0.0
    wrong = (mask != reference_mask) & (confidence >= level)
    return float(np.count_nonzero(wrong)) / mask.size


def split_confidence(image_graph, sides, *, margin: float = DEFAULT_MARGIN) -> np.ndarray:
    """The pixel confidence map of one split (the stage :func:`segcut.split` runs).

    :func:`vertex_confidence` of the solved ``sides`` on ``image_graph.graph``
    (its terminal fixed), painted by :func:`pixel_confidence`.

    Examples
    --------
    >>> from segcut import split
    >>> image = np.zeros((24, 24)); image[6:18, 6:18] = 1.0
    >>> r = split(image, rng=0)
    >>> r.confidence.shape, float(r.confidence.min()) >= 0.0
    ((24, 24), True)
    """
    values = vertex_confidence(image_graph.graph, sides, terminal=image_graph.terminal,
                               margin=margin)
    return pixel_confidence(image_graph, values)


def confident_reference(image_graph, sides, *, margin: float = DEFAULT_MARGIN):
    """The mask of ``sides`` oriented as :func:`segcut.split` orients it, and its confidence.

    The terminal's side is foreground; without a terminal, the side with fewer
    pixels on the image frame. Used by :func:`segcut.scoring.score` to find where a
    given mask contradicts the confident part of segcut's own split.

    Returns
    -------
    mask : bool ndarray
    confidence : float64 ndarray
        Both of the shape of ``image_graph.labels``.

    Examples
    --------
    >>> from segcut import SplitConfig, build_image_graph
    >>> image = np.zeros((20, 20)); image[5:15, 5:15] = 1.0
    >>> ig = build_image_graph(image, SplitConfig(prior=("border",)))
    >>> mask, confidence = confident_reference(ig, ig.start)
    >>> bool(mask[10, 10]), bool(mask[0, 0]), confidence.shape
    (True, False, (20, 20))
    """
    from .appearance import border_rule
    from .image_graph import frame_pixels

    mask = image_graph.paint(sides)
    if image_graph.terminal is None and border_rule(image_graph.region_foreground(sides),
                                                    frame_pixels(image_graph.labels)):
        mask = ~mask
    return mask, split_confidence(image_graph, sides, margin=margin)


def confidence_to_uint8(confidence) -> np.ndarray:
    """The confidence map as 8-bit gray levels: ``round(255 * c)`` (255 = certain).

    What ``segcut split --confidence`` writes as ``confidence/<stem>.png``.

    Examples
    --------
    >>> confidence_to_uint8(np.array([[0.0, 0.5, 0.9, 1.0]]))
    array([[  0, 128, 230, 255]], dtype=uint8)
    """
    confidence = np.asarray(confidence)
    if confidence.ndim < 2:
        return _to_uint8(confidence)
    out = np.empty(confidence.shape, dtype=np.uint8)
    step = max(1, (1 << 20) // max(1, confidence[0].size))  # rows of about a megapixel
    for r0 in range(0, confidence.shape[0], step):
        out[r0:r0 + step] = _to_uint8(confidence[r0:r0 + step])
    return out


def _to_uint8(confidence):
    x = np.asarray(confidence, dtype=np.float64)
    return np.rint(255.0 * np.clip(x, 0.0, 1.0)).astype(np.uint8)
