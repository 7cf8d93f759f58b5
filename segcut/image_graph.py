"""The signed graph of one image and how its vertices map to pixels.

:class:`ImageGraph` ties a :class:`~segcut.graph.SignedGraph` to the superpixel labels;
:func:`assemble_graph` merges hard-seeded regions into the terminal vertex and adds the
evidence edges; :func:`mask_to_sides` projects any pixel mask onto the vertices, so any
mask can be scored on the graph :func:`segcut.split` solved.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .graph import SignedGraph, graph_from_edges

__all__ = ["ImageGraph", "PixelContext", "assemble_graph", "mask_to_sides", "vertex_start", "frame_pixels"]


@dataclass(frozen=True, eq=False)
class ImageGraph:
    """The signed graph of one image, and how its vertices map to pixels.

    Attributes
    ----------
    labels : (M, N) or (P, M, N) int64 ndarray
        Region (superpixel) of every pixel, consecutive from 0, in the caller's
        orientation (the regions were made in the canonical one).
    graph : SignedGraph
        Vertices are the free regions, then the terminal (when there is one).
    terminal : int or None
        Index of the terminal vertex; its side is the foreground.
    region_vertex : (n_regions,) int64 ndarray
        Vertex of each region; hard-seeded regions map to the terminal.
    merged : (n_regions,) int8 ndarray
        0 for a free region, +1 for a region merged into the terminal as foreground,
        -1 for one merged as background (its spin is minus the terminal's).
    offset : float
        Constant dropped by the merging: the cut value of a split on the unmerged
        graph is ``cut_value(graph, sides) + offset``.
    orientation : str
        What decides the foreground side (see :data:`ORIENTATIONS`).
    threshold : float
        Distance threshold of the affinity model (where weights change sign).
    start : (n_vertices,) int8 ndarray
        The split reached by the colour-model rounds (a good solver start).
    warnings : list of str
    seconds : dict
        Seconds per stage spent building the graph.
    canonical_transform : str
        The flip or turn (a key of :data:`~segcut.orientation.CANONICAL_TRANSFORMS`)
        that took the image to the orientation it was processed in (see
        :func:`segcut.split`, Notes).
    hypothesis : str
        The start hypothesis whose colour models built the graph (a key of
        :data:`segcut.appearance.HYPOTHESES`).
    choice_rule : str
        How that hypothesis was chosen (a key of :data:`segcut.appearance.CHOICE_RULES`).
    hypothesis_disagreement : float
        1 - IoU between the kept end point and the closest other hypothesis's.
    background : dict or None
        The flattening decision (:meth:`segcut.background.BackgroundDecision.to_record`).
    pixel_context : PixelContext or None
        What the pixel refinement needs, in the processing orientation.
    """

    labels: np.ndarray
    graph: SignedGraph
    terminal: int | None
    region_vertex: np.ndarray
    merged: np.ndarray
    offset: float
    orientation: str
    threshold: float
    start: np.ndarray
    warnings: list = field(default_factory=list)
    seconds: dict = field(default_factory=dict)
    canonical_transform: str = "identity"
    hypothesis: str = "prior"
    choice_rule: str = "only"
    hypothesis_disagreement: float = 0.0
    background: dict | None = None
    pixel_context: object = field(default=None, repr=False)

    @property
    def n_regions(self) -> int:
        return int(self.region_vertex.shape[0])

    def region_foreground(self, sides) -> np.ndarray:
        """Foreground flag of every region for vertex ``sides`` (terminal side = foreground)."""
        sides = np.asarray(sides)
        if self.terminal is None:
            return sides[self.region_vertex] == 1
        spin = sides[self.region_vertex] * sides[self.terminal]
        spin = np.where(self.merged == -1, -spin, spin)
        return spin == 1

    def paint(self, sides) -> np.ndarray:
        """The pixel mask of vertex ``sides``."""
        return self.region_foreground(sides)[self.labels]

    def __repr__(self) -> str:
        return (f"ImageGraph(n_regions={self.n_regions}, graph={self.graph!r}, "
                f"terminal={self.terminal}, orientation={self.orientation!r})")


@dataclass(frozen=True, eq=False)
class PixelContext:
    """Pixel data of one image in its processing orientation (for the refinement).

    Attributes
    ----------
    features : (..., C) float ndarray
        CIELAB (or 100 x gray) features.
    labels : int ndarray
        Superpixel labels in the processing orientation.
    words : int ndarray
        Colour word of every pixel.
    n_words : int
    fixed : int8 ndarray
        0 for a pixel whose side may change, +1 for a foreground seed, -1 for a
        background seed or a pixel outside the box.
    transform : str
        The canonical transform (labels were moved back with its inverse).
    """

    features: np.ndarray
    labels: np.ndarray
    words: np.ndarray
    n_words: int
    fixed: np.ndarray
    transform: str


def assemble_graph(n_regions, merged, rows, cols, weights, evidence, with_terminal):
    """Merge seeded regions into the terminal and add the evidence edges.

    Region spin ``s_a * y_v`` (``s = -1`` for background-merged regions): an edge
    between a region of sign ``s_a`` and one of ``s_b`` becomes an edge of weight
    ``s_a s_b w`` between their vertices, plus the constant ``w`` when
    ``s_a s_b = -1`` (since ``[y != -z] = 1 - [y != z]``).
    """
    if not with_terminal:
        g = graph_from_edges(n_regions, rows, cols, weights)
        return g, None, np.arange(n_regions, dtype=np.int64), 0.0
    free = merged == 0
    k = int(np.count_nonzero(free))
    region_vertex = np.full(n_regions, k, dtype=np.int64)
    region_vertex[free] = np.arange(k)
    sign = np.where(merged == 0, 1, merged).astype(np.float64)
    vi, vj = region_vertex[rows], region_vertex[cols]
    prod = sign[rows] * sign[cols]
    offset = float(np.sum(weights[prod < 0]))
    inner = vi != vj
    # Both ends merged: the pair is decided by the seeds; only the constant remains.
    e_rows = [vi[inner]]
    e_cols = [vj[inner]]
    e_w = [(prod * weights)[inner]]
    # Evidence u: edge (t, i) with weight -u pays -u when region i is background.
    e_rows.append(np.full(k, k, dtype=np.int64))
    e_cols.append(np.arange(k, dtype=np.int64))
    e_w.append(-evidence[free])
    offset += float(-np.sum(evidence[merged == -1]))
    g = graph_from_edges(k + 1, np.concatenate(e_rows), np.concatenate(e_cols),
                         np.concatenate(e_w))
    return g, k, region_vertex, offset


def vertex_start(region_fg, region_vertex, merged, terminal, n_vertices):
    sides = np.full(n_vertices, -1, dtype=np.int8)
    free = merged == 0
    sides[region_vertex[free]] = np.where(region_fg[free], 1, -1)
    if terminal is not None:
        sides[terminal] = 1
    return sides


def mask_to_sides(image_graph: ImageGraph, mask) -> tuple[np.ndarray, float]:
    """Project a pixel mask onto the vertices of an image graph.

    Each free region takes the side of the majority of its pixels (background on a
    tie); the terminal takes the foreground side (+1); seeded regions keep their
    seed.

    Parameters
    ----------
    image_graph : ImageGraph
    mask : bool ndarray, the shape of ``image_graph.labels``

    Returns
    -------
    sides : (n_vertices,) int8 ndarray of +-1
    agreement : float
        Share of pixels where ``mask`` equals the painted projection (1.0 when the
        mask follows the regions exactly).

    Examples
    --------
    >>> from segcut import SplitConfig, build_image_graph
    >>> ig = build_image_graph(np.eye(8), SplitConfig(colour_model=False))
    >>> sides, agreement = mask_to_sides(ig, np.eye(8, dtype=bool))
    >>> int(sides.sum()), agreement
    (-48, 1.0)
    """
    mask = np.asarray(mask)
    labels = image_graph.labels
    if mask.shape != labels.shape:
        raise ValueError(f"mask shape {mask.shape} does not match the image's spatial shape "
                         f"{labels.shape}")
    mask = mask.astype(bool)
    n = image_graph.n_regions
    fg = np.bincount(labels.ravel(), weights=mask.ravel().astype(np.float64), minlength=n)
    area = np.bincount(labels.ravel(), minlength=n)
    region_fg = 2.0 * fg > area
    region_fg = np.where(image_graph.merged == 1, True,
                         np.where(image_graph.merged == -1, False, region_fg))
    sides = vertex_start(region_fg, image_graph.region_vertex, image_graph.merged,
                          image_graph.terminal, image_graph.graph.n_vertices)
    agreement = float(np.mean(region_fg[labels] == mask))
    return sides, agreement


def frame_pixels(labels):
    n = int(labels.max()) + 1
    frame = np.zeros(labels.shape, dtype=bool)
    rows_axis, cols_axis = labels.ndim - 2, labels.ndim - 1
    for axis in (rows_axis, cols_axis):
        index = [slice(None)] * labels.ndim
        index[axis] = 0
        frame[tuple(index)] = True
        index[axis] = -1
        frame[tuple(index)] = True
    return np.bincount(labels.ravel(), weights=frame.ravel().astype(float), minlength=n)
