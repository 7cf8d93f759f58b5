"""The path of one image: superpixels, region graph, priors and colour models, max-cut, mask.

:func:`split` is the main job of segcut: numpy image in, boolean mask out, with the
cut value, its certified upper bound and the gap. :func:`build_image_graph` gives
the signed graph that :func:`split` solves, and :func:`mask_to_sides` projects any
mask onto it, so any mask can be scored on the same graph:

>>> image = np.zeros((40, 40)); image[10:30, 12:28] = 1.0
>>> result = split(image, rng=0)
>>> result.mask[20, 20], result.mask[2, 2]
(np.True_, np.False_)
>>> sides, agreement = mask_to_sides(result.image_graph, result.mask)
>>> cut_value(result.image_graph.graph, sides) == result.value, agreement
(True, 1.0)
"""

from __future__ import annotations

import time
import warnings as _warnings
from dataclasses import dataclass, field

import numpy as np

from .affinity import edge_weights, knn_edges
from .config import SplitConfig
from .errors import SegcutWarning
from .graph import SignedGraph, cut_value, graph_from_edges
from .maxcut import available_methods, relative_gap, solve_maxcut
from .maxcut.local import descend
from .priors import SEED_BACKGROUND, SEED_FOREGROUND, colour_evidence, prior_map, seeded_regions
from .regions import describe_regions, region_adjacency, word_histograms
from .superpixels import oversegment

__all__ = ["ImageGraph", "SplitResult", "build_image_graph", "mask_to_sides", "split",
           "ORIENTATIONS", "CANONICAL_TRANSFORMS", "apply_transform", "canonical_transform"]

#: What may decide which side is foreground (``SplitResult.orientation``).
ORIENTATIONS = {
    "terminal": "priors or seeds: the terminal vertex's side is foreground",
    "border_rule": "no prior: the side with fewer pixels on the image frame is foreground",
    "no_contrast": "the image has no contrast: the mask is empty",
}


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
        The flip or turn (a key of :data:`CANONICAL_TRANSFORMS`) that took the image
        to the orientation it was processed in (see :func:`split`, Notes).
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
class SplitResult:
    """The outcome of :func:`split` for one image.

    Attributes
    ----------
    mask : bool ndarray, spatial shape of the image
        True for foreground.
    labels : int64 ndarray, same shape
        Superpixel of every pixel.
    value : float
        Cut value of the final mask on ``image_graph.graph``:
        ``cut_value(graph, mask_to_sides(image_graph, mask)[0])``.
    upper_bound : float or None
        Certified upper bound on the best cut of that graph (None when the method
        gives none).
    gap : float or None
        ``(upper_bound - value) / |upper_bound|``.
    foreground_fraction : float
    n_superpixels : int
    orientation : str
        See :data:`ORIENTATIONS`.
    seconds : dict
        Seconds per stage.
    warnings : list of str
    cleanup : dict
        ``value_before`` and ``value_after`` the clean-up, pixels changed.
    method : str
        Max-cut method used for the final solve.
    seed : int or None
    image_graph : ImageGraph
        The graph that was solved.
    canonical_transform : str
        The flip or turn that took the image to the orientation it was processed
        in (a key of :data:`CANONICAL_TRANSFORMS`; see :func:`split`, Notes).
    """

    mask: np.ndarray
    labels: np.ndarray
    value: float
    upper_bound: float | None
    gap: float | None
    foreground_fraction: float
    n_superpixels: int
    orientation: str
    seconds: dict
    warnings: list
    cleanup: dict
    method: str
    seed: int | None = None
    image_graph: ImageGraph | None = field(default=None, repr=False)
    canonical_transform: str = "identity"

    def to_record(self) -> dict:
        """The JSON-serialisable statistics of this split (no arrays).

        Examples
        --------
        >>> r = split(np.eye(8), rng=0)
        >>> sorted(r.to_record())[:4]
        ['canonical_transform', 'cleanup', 'foreground_fraction', 'gap']
        """
        return {
            "value": float(self.value),
            "upper_bound": None if self.upper_bound is None else float(self.upper_bound),
            "gap": None if self.gap is None else float(self.gap),
            "foreground_fraction": float(self.foreground_fraction),
            "n_superpixels": int(self.n_superpixels),
            "orientation": self.orientation,
            "canonical_transform": self.canonical_transform,
            "method": self.method,
            "seed": self.seed,
            "seconds": {k: round(float(v), 6) for k, v in self.seconds.items()},
            "warnings": list(self.warnings),
            "cleanup": dict(self.cleanup),
        }

    def __repr__(self) -> str:
        bound = "None" if self.upper_bound is None else f"{self.upper_bound:.6g}"
        gap = "None" if self.gap is None else f"{self.gap:.3g}"
        return (f"SplitResult(shape={self.mask.shape}, foreground_fraction="
                f"{self.foreground_fraction:.3g}, value={self.value:.6g}, upper_bound={bound}, "
                f"gap={gap}, n_superpixels={self.n_superpixels}, orientation={self.orientation!r})")


# -- image preparation -----------------------------------------------------------------

def _prepare(image, channel_axis):
    """Image -> (values in [0, 1], warnings, has_contrast).

    Only exact operations that act on each pixel alone (indexing, IEEE arithmetic,
    minimum and maximum, a fill value that does not depend on the pixel order), so
    a flipped or rotated image gives the correspondingly moved values, bit for bit.
    """
    arr = np.asarray(image)
    if arr.dtype == object or not (np.issubdtype(arr.dtype, np.number) or arr.dtype == bool):
        raise TypeError(f"image must be a numeric array; got dtype {arr.dtype}")
    if channel_axis is not None and arr.ndim >= 3:
        arr = np.moveaxis(arr, channel_axis, -1)
        if arr.shape[-1] > 4:
            raise ValueError(
                f"image has {arr.shape[-1]} channels along channel_axis={channel_axis}; for a "
                "3-D stack without channels pass channel_axis=None")
    else:
        arr = arr[..., None]
    if arr.ndim - 1 not in (2, 3):
        raise ValueError(f"image must be 2-D or a 3-D stack (with optional channels); got shape "
                         f"{np.asarray(image).shape} with channel_axis={channel_axis}")
    if min(arr.shape[:-1]) < 2:
        raise ValueError(f"image is too small to split: spatial shape {arr.shape[:-1]}")
    warnings = []
    channels = arr.shape[-1]
    if channels in (2, 4):  # drop alpha
        arr = arr[..., :channels - 1]
    if arr.dtype == bool:
        x = arr.astype(np.float64)
    elif np.issubdtype(arr.dtype, np.unsignedinteger):
        x = arr.astype(np.float64) / float(np.iinfo(arr.dtype).max)
    elif np.issubdtype(arr.dtype, np.integer):
        info = np.iinfo(arr.dtype)
        x = (arr.astype(np.float64) - info.min) / float(info.max - info.min)
    else:
        x = arr.astype(np.float64)
        finite = np.isfinite(x)
        if not finite.any():
            raise ValueError("image has no finite values (all NaN or infinite)")
        if not finite.all():
            n_bad = int(np.count_nonzero(~finite))
            # summed in sorted order: the same fill for any order of the pixels
            fill = float(np.sum(np.sort(x[finite]))) / float(np.count_nonzero(finite))
            x = np.where(finite, x, fill)
            warnings.append(f"{n_bad} non-finite value(s) replaced by the image mean")
        lo, hi = float(x.min()), float(x.max())
        if lo < 0.0 or hi > 1.0:
            x = (x - lo) / (hi - lo) if hi > lo else np.zeros_like(x)
    has_contrast = bool(np.ptp(x.reshape(-1, x.shape[-1]), axis=0).max() > 0)
    if x.shape[-1] != 3:
        x = x[..., :1]
    return x, warnings, has_contrast


def _features(x):
    """Values in [0, 1] -> features: CIELAB for colour, 100 * gray otherwise."""
    if x.shape[-1] == 3:
        from skimage.color import rgb2lab

        feats = rgb2lab(np.clip(x, 0.0, 1.0), channel_axis=-1)
    else:
        feats = 100.0 * x
    return np.ascontiguousarray(feats, dtype=np.float64)


# -- canonical orientation -------------------------------------------------------------

#: The eight flips and quarter turns of the image plane, in tie-break order. Entry
#: ``(flip, k)`` maps an array ``a`` to ``np.rot90(np.flip(a, axis=col) if flip else a,
#: k, axes=(row, col))`` (numpy's ``rot90`` turns counter-clockwise).
CANONICAL_TRANSFORMS = {
    "identity": (False, 0),
    "rot90": (False, 1),
    "rot180": (False, 2),
    "rot270": (False, 3),
    "flip_columns": (True, 0),
    "transpose": (True, 1),
    "flip_rows": (True, 2),
    "anti_transpose": (True, 3),
}

# Blocks per side of the content signature (odd), and the levels values are rounded to.
_KEY_BLOCKS = 9
_KEY_LEVELS = 65535


def apply_transform(array, name: str, *, axes=(-2, -1), inverse: bool = False) -> np.ndarray:
    """Apply one of :data:`CANONICAL_TRANSFORMS` (or its inverse) to the plane ``axes``.

    Parameters
    ----------
    array : ndarray
    name : str
        A key of :data:`CANONICAL_TRANSFORMS`.
    axes : (int, int)
        The row and column axes of the image plane.
    inverse : bool
        Apply the inverse transform instead.

    Returns
    -------
    ndarray
        A view of ``array`` (not a copy).

    Examples
    --------
    >>> a = np.arange(6).reshape(2, 3)
    >>> apply_transform(a, "transpose")
    array([[0, 3],
           [1, 4],
           [2, 5]])
    >>> np.array_equal(apply_transform(apply_transform(a, "rot90"), "rot90", inverse=True), a)
    True
    """
    if name not in CANONICAL_TRANSFORMS:
        raise ValueError(f"unknown transform {name!r}; choose one of "
                         f"{', '.join(CANONICAL_TRANSFORMS)}")
    flip, k = CANONICAL_TRANSFORMS[name]
    row, col = axes
    if inverse:
        out = np.rot90(array, -k, axes=(row, col))
        return np.flip(out, axis=col) if flip else out
    out = np.flip(array, axis=col) if flip else array
    return np.rot90(out, k, axes=(row, col))


def _symmetric_edges(length, blocks):
    """Block edges along one side, mirror-symmetric: ``edge[b - i] = length - edge[i]``.

    ``blocks`` is odd, so the middle block is centred for odd and even lengths.
    """
    half = [(i * length) // blocks for i in range((blocks + 1) // 2)]
    return np.array(half + [length - e for e in reversed(half)], dtype=np.int64)


def _block_sums(values):
    """Exact integer sums of rounded values over a mirror-symmetric grid of blocks.

    ``values``: (M, N, C) or (P, M, N, C) in [0, 1]; returns (blocks, blocks, C) int64.
    Integer sums have no round-off, and the grid is mirror-symmetric, so the sums of
    a flipped or rotated image are the correspondingly moved sums, exactly.
    """
    q = (values * float(_KEY_LEVELS) + 0.5).astype(np.int64)  # round half up (values >= 0)
    if q.ndim == 4:
        q = q.sum(axis=0)
    for axis in (0, 1):
        edges = _symmetric_edges(q.shape[axis], _KEY_BLOCKS)
        starts = np.minimum(edges[:-1], q.shape[axis] - 1)
        q = np.add.reduceat(q, starts, axis=axis)
        empty = edges[:-1] == edges[1:]
        if empty.any():  # reduceat gives the start element for an empty block
            index = [slice(None)] * q.ndim
            index[axis] = empty
            q[tuple(index)] = 0
    return q


def _lexicographic_less(a, b):
    """True when array ``a`` comes before ``b`` in C order (first differing element)."""
    a, b = a.ravel(), b.ravel()
    differ = np.flatnonzero(a != b)
    return bool(differ.size) and bool(a[differ[0]] < b[differ[0]])


def canonical_transform(values) -> str:
    """The transform that takes ``values`` to its canonical orientation.

    Parameters
    ----------
    values : (M, N, C) or (P, M, N, C) ndarray
        Image values in [0, 1], channels last (stacks: flips and turns of the
        (M, N) plane only).

    Returns
    -------
    str
        A key of :data:`CANONICAL_TRANSFORMS`.

    Notes
    -----
    Each of the eight views gets the key (spatial shape of the view, then the
    integer sums of the values rounded to 65535 levels over a 9 x 9 grid of
    mirror-symmetric blocks, channel by channel, in C order). The view with the
    smallest key wins. Views whose keys tie are compared pixel by pixel (C order,
    first differing value decides); views that are equal pixel for pixel (the
    image has that symmetry) give the same canonical image, and the first of them
    in :data:`CANONICAL_TRANSFORMS` order is named. Every step is exact, so
    ``canonical_transform`` of a moved image names the view that leads to the same
    canonical image.

    Examples
    --------
    >>> a = np.zeros((4, 6, 1)); a[0, 0] = 1.0
    >>> name = canonical_transform(a)
    >>> moved = apply_transform(a, "rot90", axes=(0, 1))
    >>> c1 = apply_transform(a, name, axes=(0, 1))
    >>> c2 = apply_transform(moved, canonical_transform(moved), axes=(0, 1))
    >>> np.array_equal(c1, c2)
    True
    """
    values = np.asarray(values)
    axes = (values.ndim - 3, values.ndim - 2)
    sums = _block_sums(values)
    keys = {}
    for name in CANONICAL_TRANSFORMS:
        view_shape = apply_transform(values[..., :1], name, axes=axes).shape[:-1]
        block_view = apply_transform(sums, name, axes=(0, 1))
        keys[name] = tuple(int(v) for v in view_shape) + tuple(block_view.ravel().tolist())
    smallest = min(keys.values())
    best = None
    for name in CANONICAL_TRANSFORMS:
        if keys[name] != smallest:
            continue
        if best is None or _lexicographic_less(apply_transform(values, name, axes=axes),
                                               apply_transform(values, best, axes=axes)):
            best = name
    return best


def _canonical_box(box, spatial, transform):
    """A box ``(x0, y0, x1, y1)`` of the caller's frame, in the canonical frame."""
    from .priors import box_map

    inside = box_map(tuple(spatial[-2:]), box) == 0
    inside = apply_transform(inside, transform)
    rows = np.flatnonzero(inside.any(axis=1))
    cols = np.flatnonzero(inside.any(axis=0))
    return (int(cols[0]), int(rows[0]), int(cols[-1]) + 1, int(rows[-1]) + 1)


def _normalise_seeds(seeds, spatial_shape):
    if seeds is None:
        return None
    seeds = np.asarray(seeds)
    if seeds.shape != tuple(spatial_shape):
        raise ValueError(f"seeds shape {seeds.shape} does not match the image's spatial shape "
                         f"{tuple(spatial_shape)}")
    values = np.unique(seeds)
    bad = values[~np.isin(values, (0, SEED_FOREGROUND, SEED_BACKGROUND))]
    if bad.size:
        raise ValueError(f"seeds must hold 0 (unknown), 1 (foreground) or 2 (background); got "
                         f"value {bad[0]!r}")
    return seeds


# -- graph assembly ------------------------------------------------------------------

def _assemble(n_regions, merged, rows, cols, weights, evidence, with_terminal):
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


def _two_means(colours, weights):
    """Deterministic weighted 2-means of region colours; returns group 0/1 per region."""
    from .regions import learn_colour_words

    centres = learn_colour_words(colours, weights, 2)
    if centres.shape[0] < 2:
        return np.zeros(colours.shape[0], dtype=np.int64)
    d = ((colours[:, None, :] - centres[None]) ** 2).sum(-1)
    return np.argmin(d, axis=1)


def _frame_shy_colours(regions, n_clusters):
    """No-prior start: the colour clusters that are rarer on the frame than in the image.

    The region colours are grouped in ``n_clusters`` colour words; a cluster whose share
    of the frame pixels is below half its share of the image area is taken as
    foreground. None when no cluster (or every cluster) qualifies.
    """
    from .regions import learn_colour_words

    if n_clusters < 2 or regions.frame.sum() == 0:
        return None
    centres = learn_colour_words(regions.mean, regions.area, n_clusters)
    d = ((regions.mean[:, None, :] - centres[None]) ** 2).sum(-1)
    cluster = np.argmin(d, axis=1)
    k = centres.shape[0]
    area = np.bincount(cluster, weights=regions.area, minlength=k) / regions.area.sum()
    frame = np.bincount(cluster, weights=regions.frame, minlength=k) / regions.frame.sum()
    shy = frame < 0.5 * area
    if not shy.any() or shy.all():
        return None
    return shy[cluster]


def _start_hypotheses(regions, n_clusters, n_starts, *, central=None):
    """No-prior colour-model starts (region foreground flags), distinct, in a fixed order.

    First the frame-shy clusters of ``n_clusters`` colour words (see
    :func:`_frame_shy_colours`; a 2-means split oriented by the border rule when
    none qualifies), then the ``central`` regions (when given), a 2-means split
    oriented by the border rule, and frame-shy clusters of ``n_clusters + 2``,
    ``n_clusters + 4``, ... colour words, until ``n_starts`` distinct starts with
    both sides non-empty are found (or the candidates run out).
    """
    def two_means():
        group = _two_means(regions.mean, regions.area).astype(bool)
        return ~group if _border_rule(group, regions.frame) else group

    first = _frame_shy_colours(regions, n_clusters)
    out = [two_means() if first is None else first]
    candidates = [lambda: central, two_means] + [
        (lambda k=k: _frame_shy_colours(regions, k))
        for k in range(max(n_clusters, 1) + 2, max(n_clusters, 1) + 2 * n_starts + 1, 2)]
    for make in candidates:
        if len(out) >= n_starts:
            break
        group = make()
        if group is None or not group.any() or group.all():
            continue
        if any(np.array_equal(group, seen) for seen in out):
            continue
        out.append(group)
    return out


def _frame_shyness(region_fg, area, frame):
    """How much the foreground avoids the image frame: lower is more object-like.

    The foreground's share of the frame pixels divided by its share of the image
    area (``inf`` for an empty foreground). A split whose foreground fills the
    middle of the picture and keeps off the frame scores near 0; one that covers
    the frame as much as the rest of the image scores 1.

    Parameters
    ----------
    region_fg : (n,) bool ndarray
        Foreground flag of each region.
    area, frame : (n,) float ndarray
        Pixels of each region, and of those on the image frame.

    Returns
    -------
    float

    Examples
    --------
    >>> area, frame = np.array([10.0, 30.0, 60.0]), np.array([0.0, 5.0, 15.0])
    >>> _frame_shyness(np.array([True, True, False]), area, frame)  # (5/20) / (40/100)
    0.625
    """
    region_fg = np.asarray(region_fg, dtype=bool)
    area_share = float(area[region_fg].sum()) / float(area.sum())
    if area_share <= 0.0:
        return np.inf
    total_frame = float(frame.sum())
    frame_share = float(frame[region_fg].sum()) / total_frame if total_frame > 0 else 0.0
    return frame_share / area_share

def _border_rule(region_fg, frame):
    """True when the foreground touches the frame more than the background: flip it."""
    return float(frame[region_fg].sum()) > float(frame[~region_fg].sum())


def _local_best(graph, starts, rng):
    best, best_value = None, -np.inf
    for start in starts:
        sides, _ = descend(graph, start, rng=rng)
        value = cut_value(graph, sides)
        if best is None or value > best_value + 1e-12 * max(1.0, abs(best_value)):
            best, best_value = sides, value
    return best, best_value


def _vertex_start(region_fg, region_vertex, merged, terminal, n_vertices):
    sides = np.full(n_vertices, -1, dtype=np.int8)
    free = merged == 0
    sides[region_vertex[free]] = np.where(region_fg[free], 1, -1)
    if terminal is not None:
        sides[terminal] = 1
    return sides


def _build(image, config, seeds, channel_axis, rng):
    seconds = {}
    t0 = time.perf_counter()
    values, warnings, has_contrast = _prepare(image, channel_axis)
    caller_spatial = values.shape[:-1]
    seeds = _normalise_seeds(seeds, caller_spatial)
    if not has_contrast:
        seconds["prepare"] = time.perf_counter() - t0
        labels = np.zeros(caller_spatial, dtype=np.int64)
        g = graph_from_edges(1, [], [], [])
        warnings.append("image has no contrast: the mask is empty")
        return ImageGraph(labels=labels, graph=g, terminal=None,
                          region_vertex=np.zeros(1, np.int64), merged=np.zeros(1, np.int8),
                          offset=0.0, orientation="no_contrast", threshold=0.0,
                          start=-np.ones(1, np.int8), warnings=warnings, seconds=seconds)
    # Everything below runs in the canonical orientation; the labels go back at the end.
    t1 = time.perf_counter()
    transform = canonical_transform(values)
    plane = (values.ndim - 3, values.ndim - 2)
    if transform != "identity":
        values = np.ascontiguousarray(apply_transform(values, transform, axes=plane))
        if seeds is not None:
            seeds = np.ascontiguousarray(apply_transform(seeds, transform))
        if config.box is not None:
            config = config.replace(box=_canonical_box(config.box, caller_spatial, transform))
    seconds["canonical"] = time.perf_counter() - t1
    feats = _features(values)
    spatial = feats.shape[:-1]
    seconds["prepare"] = time.perf_counter() - t0 - seconds["canonical"]

    t0 = time.perf_counter()
    labels = oversegment(feats, n_superpixels=config.n_superpixels,
                         compactness=config.compactness,
                         pixel_grid_max_pixels=config.pixel_grid_max_pixels,
                         sigma=config.sigma)
    seconds["superpixels"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    regions = describe_regions(labels, feats, n_colour_words=config.n_colour_words)
    adjacency = region_adjacency(labels, feats)
    n = regions.n_regions
    seconds["features"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    pair_w, threshold = edge_weights(config.affinity, regions, adjacency,
                                     quantile=config.threshold_quantile)
    rows, cols = adjacency.rows, adjacency.cols
    pair_w = config.smoothness * pair_w
    if config.n_neighbors > 0:
        kr, kc, kd = knn_edges(regions, config.n_neighbors, exclude=rows * n + cols)
        colour_t = float(np.quantile(
            np.sqrt(((regions.mean[rows] - regions.mean[cols]) ** 2).sum(1)),
            config.threshold_quantile)) if rows.size else 1.0
        scale = float(np.median(adjacency.border)) if rows.size else 1.0
        kw = -config.smoothness * scale * np.clip(1.0 - kd / max(colour_t, 1e-12), 0.0, 1.0)
        rows, cols = np.concatenate([rows, kr]), np.concatenate([cols, kc])
        pair_w = np.concatenate([pair_w, kw])

    pmap, inside = prior_map(spatial, config)
    flat_labels = labels.ravel()
    prior_u = np.zeros(n)
    fg_w = bg_w = None
    if pmap is not None:
        prior_u = config.prior_strength * np.bincount(flat_labels, weights=pmap.ravel(),
                                                      minlength=n)
        pos = (pmap > 0) if inside is None else (pmap > 0) | inside
        fg_w = np.bincount(flat_labels, weights=pos.ravel().astype(float),
                           minlength=n) / regions.area
        bg_w = np.bincount(flat_labels, weights=(pmap < 0).ravel().astype(float),
                           minlength=n) / regions.area
    merged = np.zeros(n, dtype=np.int8)
    if seeds is not None and np.any(seeds):
        merged, seed_warnings = seeded_regions(labels, seeds)
        warnings.extend(seed_warnings)
        if fg_w is None:
            fg_w, bg_w = (merged == 1).astype(float), (merged == -1).astype(float)
        else:
            fg_w = np.where(merged == 1, 1.0, np.where(merged == -1, 0.0, fg_w))
            bg_w = np.where(merged == -1, 1.0, np.where(merged == 1, 0.0, bg_w))
        if not fg_w.any():
            fg_w = 1.0 - bg_w
        if not bg_w.any():
            bg_w = 1.0 - fg_w
    informed = fg_w is not None
    orientation = "terminal" if informed else "border_rule"
    with_terminal = informed or config.colour_model
    hypotheses = []
    if not informed and config.colour_model:
        from .priors import get_prior

        box = get_prior("center").pixel_map(spatial, config)
        central = np.bincount(flat_labels, weights=box.ravel(), minlength=n) > 0.5 * regions.area
        hypotheses = _start_hypotheses(regions, config.start_clusters, config.model_starts,
                                       central=central)
        group = hypotheses[0]
        fg_w, bg_w = group.astype(float), (~group).astype(float)

    counts = word_histograms(labels, regions.words, n, regions.centres.shape[0])
    rounds = config.model_rounds if config.colour_model else 0
    generator = np.random.default_rng(rng)

    def evidence(fg_w, bg_w):
        u = prior_u.copy()
        if config.colour_model:
            u += config.model_strength * colour_evidence(counts, fg_w, bg_w)
        return u

    def run_rounds(fg_w, bg_w):
        region_fg = None if fg_w is None else fg_w > 0.5
        for _ in range(rounds):
            u = evidence(fg_w, bg_w)
            g, terminal, region_vertex, offset = _assemble(n, merged, rows, cols, pair_w, u,
                                                           with_terminal)
            starts = [_vertex_start(u > 0, region_vertex, merged, terminal, g.n_vertices)]
            if region_fg is not None:
                starts.append(_vertex_start(region_fg, region_vertex, merged, terminal,
                                            g.n_vertices))
            sides, _ = _local_best(g, starts, generator)
            ig_tmp = _image_graph(labels, g, terminal, region_vertex, merged, offset,
                                  orientation, threshold, sides, warnings, seconds)
            region_fg = ig_tmp.region_foreground(sides)
            if not informed and _border_rule(region_fg, regions.frame):
                region_fg = ~region_fg
            if region_fg.all() or not region_fg.any():
                break  # one side is empty: a colour model of nothing says nothing
            fg_w, bg_w = region_fg.astype(float), (~region_fg).astype(float)
        return fg_w, bg_w, region_fg

    if len(hypotheses) > 1:
        # several colour-model starts: keep the end point that avoids the frame most
        best = None
        for group in hypotheses:
            outcome = run_rounds(group.astype(float), (~group).astype(float))
            score = _frame_shyness(outcome[2], regions.area, regions.frame)
            if best is None or score < best[0]:  # ties: the earlier start
                best = (score, outcome)
        fg_w, bg_w, region_fg = best[1]
    else:
        fg_w, bg_w, region_fg = run_rounds(fg_w, bg_w)

    u = evidence(fg_w, bg_w) if with_terminal else np.zeros(n)
    g, terminal, region_vertex, offset = _assemble(n, merged, rows, cols, pair_w, u, with_terminal)
    if region_fg is None:
        region_fg = u > 0
    start = _vertex_start(region_fg, region_vertex, merged, terminal, g.n_vertices)
    if transform != "identity":
        labels = np.ascontiguousarray(apply_transform(labels, transform, inverse=True))
    seconds["graph"] = time.perf_counter() - t0
    return _image_graph(labels, g, terminal, region_vertex, merged, offset, orientation,
                        threshold, start, warnings, seconds, transform)


def _image_graph(labels, g, terminal, region_vertex, merged, offset, orientation, threshold,
                 start, warnings, seconds, transform="identity"):
    return ImageGraph(labels=labels, graph=g, terminal=terminal, region_vertex=region_vertex,
                      merged=merged, offset=offset, orientation=orientation,
                      threshold=float(threshold), start=np.asarray(start, dtype=np.int8),
                      warnings=warnings, seconds=seconds, canonical_transform=transform)


def build_image_graph(image, config: SplitConfig | None = None, *, seeds=None,
                      channel_axis: int | None = -1, rng=None) -> ImageGraph:
    """The signed graph :func:`split` solves for ``image`` (same arguments).

    Over-segments the image, measures the regions, weighs neighbour pairs with the
    affinity model, adds prior and colour-model evidence as terminal edges and
    merges hard seeds into the terminal. The colour models are re-estimated over
    ``config.model_rounds`` rounds of fast 1-flip solves, so the graph returned is
    the one of the last round.

    Parameters
    ----------
    image : (M, N[, C]) or (P, M, N[, C]) ndarray
        Gray, RGB or RGBA (alpha ignored); any integer or float dtype.
    config : SplitConfig, optional
    seeds : int ndarray, spatial shape of ``image``, optional
        0 unknown, 1 foreground, 2 background (hard seeds).
    channel_axis : int or None
        Axis of the colour channels; None for gray images and gray 3-D stacks.
    rng : None, int or numpy.random.Generator
        Seed of the search order; by default ``config.seed``.

    Returns
    -------
    ImageGraph

    Examples
    --------
    >>> image = np.zeros((20, 20)); image[5:15, 5:15] = 1.0
    >>> ig = build_image_graph(image, SplitConfig(prior=("border",)))
    >>> ig.n_regions, ig.terminal, ig.orientation
    (400, 400, 'terminal')
    """
    config = SplitConfig() if config is None else config
    if not isinstance(config, SplitConfig):
        raise TypeError(f"config must be a SplitConfig; got {type(config).__name__}")
    return _build(image, config, seeds, channel_axis, config.seed if rng is None else rng)


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
    sides = _vertex_start(region_fg, image_graph.region_vertex, image_graph.merged,
                          image_graph.terminal, image_graph.graph.n_vertices)
    agreement = float(np.mean(region_fg[labels] == mask))
    return sides, agreement


# -- solving ---------------------------------------------------------------------------

def _solve(ig: ImageGraph, config: SplitConfig, generator):
    """Solve the image graph with ``config.method``; returns (method, sides, value, upper_bound).

    A method that declares ``warm_start`` searches from the split of the colour-model
    rounds; one that takes ``max_moves`` gets ``config.max_moves`` (by default 20
    moves per vertex). ``"auto"`` is the portfolio of :mod:`segcut.maxcut.auto`.
    """
    from .maxcut.auto import solve_warm

    result = solve_warm(ig.graph, method=config.method, start=ig.start,
                        max_moves=config.max_moves, time_limit=config.time_limit, rng=generator)
    return result.method, result.sides, result.value, result.upper_bound


def _clean(mask, config):
    from scipy import ndimage as ndi

    out = mask
    if config.min_region_size > 0:
        for target in (True, False):
            comp, count = ndi.label(out == target)
            if count:
                sizes = np.bincount(comp.ravel())
                small = sizes < config.min_region_size
                small[0] = False
                out = np.where(small[comp], not target, out)
    if config.fill_holes:
        out = ndi.binary_fill_holes(out)
    return out


def split(image, config: SplitConfig | None = None, *, seeds=None,
          channel_axis: int | None = -1, rng=None) -> SplitResult:
    """Split an image into foreground and background as a certified max-cut.

    Parameters
    ----------
    image : (M, N[, C]) or (P, M, N[, C]) ndarray
        Gray, RGB or RGBA (alpha ignored); uint8, uint16, other integers or floats
        (floats in [0, 1] are taken as they are, others rescaled to [0, 1]).
    config : SplitConfig, optional
        All options; ``SplitConfig()`` by default.
    seeds : int ndarray, spatial shape of ``image``, optional
        Hard seeds: 0 unknown, 1 foreground, 2 background.
    channel_axis : int or None, default -1
        Axis of the colour channels; None for gray images and gray 3-D stacks.
    rng : None, int or numpy.random.Generator
        Seed for everything random; by default ``config.seed``. The same image,
        config and seed give identical masks.

    Returns
    -------
    SplitResult

    Raises
    ------
    ValueError
        For a malformed image, seeds or a config value.

    Notes
    -----
    With spins ``x_i`` in {-1, +1}, the cut value is
    ``sum_{i<j} w_ij (1 - x_i x_j) / 2``. Neighbour weights come from the affinity
    model (:mod:`segcut.affinity`), terminal weights from priors and colour models
    (:mod:`segcut.priors`). With no prior and no seeds the colour models start
    from the colour clusters that are rarer on the image frame than in the image
    (``config.start_clusters`` clusters of the region colours; a 2-means split when
    none qualifies), and after each round the side with fewer pixels on the frame is
    foreground (orientation ``"border_rule"``).

    Several starts (``config.model_starts``, default 2): the rounds run from each
    of the first distinct starts of the list: frame-shy clusters of
    ``start_clusters`` colour words, the regions inside the central box of the
    center prior (``center_fraction``; a start only, no prior edges), a 2-means
    split, frame-shy clusters of 2, 4, ... more words. The end point whose
    foreground avoids the frame most (its share of the frame pixels over its
    share of the area, :func:`_frame_shyness`; ties go to the earlier start)
    builds the final graph. The rounds end at different fixed points depending on
    the start, and which one a single start reaches flips with small changes (the
    superpixel grid, the search order). Measured on 60 dev photographs with each
    of the eight flips and quarter turns forced as the processing orientation
    (``tests/benchmarks/bench_quality.py --orientations 8``), mean IoU over the
    eight (canonical orientation in brackets): one start 0.522 (0.494); without
    the central start, 4 starts 0.558 (0.531) and 8 starts 0.562 (0.543); with
    it, 2 starts 0.635 (0.636), 5 starts 0.630 (0.625), 8 starts 0.626 (0.613).
    Choosing by the neighbour cut value plus the colour log-likelihood of each
    end point under its own models picked worse end points (0.405 with 3
    starts). With priors or seeds the prior regions start the rounds as before.

    ``method="auto"`` certifies the answer with the SDP relaxation (relative
    accuracy 1e-3) and searches with tabu search from the split of the colour-model
    rounds and from a Goemans-Williamson rounding, with a move budget of 20 moves
    per vertex (deterministic).

    Canonical orientation: superpixels and the search follow the pixel order, so
    the image is processed in an orientation chosen from its content alone: of its
    eight flips and quarter turns (:data:`CANONICAL_TRANSFORMS`; for 3-D stacks
    those of the (M, N) plane) the one with the smallest key (spatial shape, then
    exact sums of the values over a 9 x 9 grid of mirror-symmetric blocks, then
    the values pixel by pixel), see :func:`canonical_transform`. Seeds and the
    ``box`` (given in the caller's frame) are moved along; the border and center
    priors are laid out in the canonical frame. The labels and mask are moved back,
    and the transform is recorded as ``canonical_transform``. Hence for every flip
    or quarter turn ``T``, ``split(T(image)).mask == T(split(image).mask)`` bit for
    bit, with the same value and upper bound (same graph, same vertex order).
    Exception: an image that equals one of its own flips or turns ``S`` (exact
    symmetry) has several equally canonical views; they are the same array, so the
    graph, value and bound are still the same, but the mask may come back as
    ``T(S(split(image).mask))`` rather than ``T(split(image).mask)``, since no
    rule on the content can tell ``image`` from ``S(image)``.

    Examples
    --------
    >>> image = np.zeros((30, 30, 3)); image[8:22, 8:22] = (0.9, 0.2, 0.1)
    >>> r = split(image, SplitConfig(prior=("border",)), rng=1)
    >>> round(r.foreground_fraction, 3), r.orientation
    (0.218, 'terminal')
    """
    config = SplitConfig() if config is None else config
    if not isinstance(config, SplitConfig):
        raise TypeError(f"config must be a SplitConfig; got {type(config).__name__}")
    seed = config.seed if rng is None else rng
    generator = np.random.default_rng(seed)
    ig = _build(image, config, seeds, channel_axis, generator)
    seconds = dict(ig.seconds)
    warnings = list(ig.warnings)
    if ig.orientation == "no_contrast":
        mask = np.zeros(ig.labels.shape, dtype=bool)
        return SplitResult(mask=mask, labels=ig.labels, value=0.0, upper_bound=0.0, gap=0.0,
                           foreground_fraction=0.0, n_superpixels=1, orientation="no_contrast",
                           seconds=seconds, warnings=warnings,
                           cleanup={"value_before": 0.0, "value_after": 0.0, "pixels_changed": 0},
                           method="none", seed=_seed_record(seed), image_graph=ig,
                           canonical_transform=ig.canonical_transform)
    t0 = time.perf_counter()
    method, sides, value_before, bound = _solve(ig, config, generator)
    seconds["solve"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    mask = ig.paint(sides)
    if ig.terminal is None and _border_rule(ig.region_foreground(sides),
                                            _frame_pixels(ig.labels)):
        mask = ~mask  # no terminal: the side touching the frame less is foreground
    cleaned = _clean(mask, config)
    final_sides, _ = mask_to_sides(ig, cleaned)
    final_mask = ig.paint(final_sides)  # already oriented: +1 is the foreground
    value_after = cut_value(ig.graph, final_sides)
    seconds["cleanup"] = time.perf_counter() - t0
    changed = int(np.count_nonzero(final_mask != mask))
    return SplitResult(
        mask=final_mask, labels=ig.labels, value=value_after, upper_bound=bound,
        gap=relative_gap(value_after, bound), foreground_fraction=float(final_mask.mean()),
        n_superpixels=ig.n_regions, orientation=ig.orientation, seconds=seconds,
        warnings=warnings,
        cleanup={"value_before": float(value_before), "value_after": float(value_after),
                 "pixels_changed": changed},
        method=method, seed=_seed_record(seed), image_graph=ig,
        canonical_transform=ig.canonical_transform)


def _frame_pixels(labels):
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


def _seed_record(seed):
    if seed is None or isinstance(seed, (int, np.integer)):
        return None if seed is None else int(seed)
    return None
