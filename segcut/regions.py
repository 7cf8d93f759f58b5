"""Region features and region adjacency, vectorised over pixels.

Region statistics are computed with ``np.bincount`` over whole label images (no
per-pixel Python loops), in 2-D and 3-D alike. The pixel loops numpy cannot
express cheaply are small numba kernels: the pairs of touching regions (one pass
over the neighbour pixel pairs with a hash table) and the nearest colour word of
every pixel.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

__all__ = [
    "RegionAdjacency",
    "RegionFeatures",
    "region_adjacency",
    "describe_regions",
    "learn_colour_words",
    "assign_colour_words",
    "word_histograms",
]


@dataclass(frozen=True, eq=False)
class RegionAdjacency:
    """Neighbouring region pairs, each once (``rows < cols``), with border statistics.

    Attributes
    ----------
    rows, cols : (m,) int64 ndarray
        The two regions of each neighbour pair, ``rows < cols``, sorted.
    border : (m,) float64 ndarray
        Shared border length: the number of neighbouring pixel pairs (4-connected in
        2-D, 6-connected in 3-D) with one pixel in each region.
    contrast : (m,) float64 ndarray
        Mean Euclidean feature difference across those pixel pairs (boundary contrast).
    """

    rows: np.ndarray
    cols: np.ndarray
    border: np.ndarray
    contrast: np.ndarray

    @property
    def n_pairs(self) -> int:
        return int(self.rows.shape[0])


@dataclass(frozen=True, eq=False)
class RegionFeatures:
    """Per-region statistics of a label image.

    Attributes
    ----------
    area : (n,) float64 ndarray
        Pixels per region.
    mean : (n, C) float64 ndarray
        Mean feature (CIELAB colour) per region.
    std : (n,) float64 ndarray
        Standard deviation of the first channel (lightness) inside each region: a
        simple texture/intensity statistic.
    histogram : (n, K) float64 ndarray
        Share of each region's pixels in each of the K colour words (rows sum to 1).
    frame : (n,) float64 ndarray
        Pixels of each region on the outer frame of the image.
    words : (M, N[, P]) int64 ndarray
        Colour word of every pixel.
    centres : (K, C) float64 ndarray
        The colour words.
    """

    area: np.ndarray
    mean: np.ndarray
    std: np.ndarray
    histogram: np.ndarray
    frame: np.ndarray
    words: np.ndarray
    centres: np.ndarray

    @property
    def n_regions(self) -> int:
        return int(self.area.shape[0])


@njit(cache=True)
def _slot(table_keys, table_slots, key, n_used):
    """Open-addressing lookup of ``key``; inserts it with slot ``n_used`` when absent.
    Returns ``(slot, n_used)``."""
    mask = table_keys.shape[0] - 1
    h = (key * 0x9E3779B97F4A7C15) & mask
    while True:
        if table_keys[h] == key:
            return table_slots[h], n_used
        if table_keys[h] < 0:
            table_keys[h] = key
            table_slots[h] = n_used
            return n_used, n_used + 1
        h = (h + 1) & mask


@njit(cache=True)
def _adjacent_pairs(labels, features, use_features, n, table_size):
    """Pairs of different labels along each axis (axes in order, pixels in C order):
    their keys ``min * n + max`` in order of first sight, pixel-pair counts and
    summed feature distances (added in the order the pairs are met)."""
    depth, height, width = labels.shape
    table_keys = np.full(table_size, -1, dtype=np.int64)
    table_slots = np.empty(table_size, dtype=np.int64)
    keys = np.empty(table_size // 2, dtype=np.int64)
    counts = np.zeros(table_size // 2, dtype=np.int64)
    sums = np.zeros(table_size // 2, dtype=np.float64)
    used = 0
    for axis in range(3):
        dz, dy, dx = (1, 0, 0) if axis == 0 else ((0, 1, 0) if axis == 1 else (0, 0, 1))
        for z in range(depth - dz):
            for y in range(height - dy):
                for x in range(width - dx):
                    a = labels[z, y, x]
                    b = labels[z + dz, y + dy, x + dx]
                    if a == b:
                        continue
                    key = min(a, b) * n + max(a, b)
                    slot, used = _slot(table_keys, table_slots, key, used)
                    keys[slot] = key
                    counts[slot] += 1
                    if use_features:
                        d = 0.0
                        for c in range(features.shape[3]):
                            t = features[z, y, x, c] - features[z + dz, y + dy, x + dx, c]
                            d += t * t
                        sums[slot] += np.sqrt(d)
    return keys[:used], counts[:used], sums[:used]


def region_adjacency(labels, features=None) -> RegionAdjacency:
    """Neighbour pairs of a label image with shared border length and boundary contrast.

    Parameters
    ----------
    labels : (M, N) or (P, M, N) int ndarray
        Consecutive labels from 0.
    features : (..., C) float ndarray, optional
        Pixel features for the boundary contrast (zeros when omitted).

    Returns
    -------
    RegionAdjacency

    Examples
    --------
    >>> labels = np.array([[0, 0, 1], [2, 2, 1]])
    >>> adj = region_adjacency(labels)
    >>> adj.rows, adj.cols, adj.border
    (array([0, 0, 1]), array([1, 2, 2]), array([1., 2., 1.]))
    """
    labels = np.asarray(labels, dtype=np.int64)
    n = int(labels.max()) + 1 if labels.size else 0
    volume = labels.reshape((1,) * (3 - labels.ndim) + labels.shape)
    if features is None:
        feats = np.zeros(volume.shape + (1,))
    else:
        feats = np.asarray(features, dtype=np.float64).reshape(volume.shape + (-1,))
    differing = sum(int(np.count_nonzero(_slice_axis(volume, axis, 0)
                                         != _slice_axis(volume, axis, 1))) for axis in range(3))
    table_size = 1 << max(2, (2 * differing + 1).bit_length())
    keys, counts, sums = _adjacent_pairs(np.ascontiguousarray(volume), np.ascontiguousarray(feats),
                                         features is not None, max(n, 1), table_size)
    order = np.argsort(keys, kind="stable")
    keys, counts, sums = keys[order], counts[order], sums[order]
    contrast = sums / counts if features is not None else np.zeros(keys.size)
    return RegionAdjacency(rows=keys // max(n, 1), cols=keys % max(n, 1),
                           border=counts.astype(np.float64), contrast=contrast.astype(np.float64))


@njit(cache=True)
def _lloyd(colours, weights, centres, n_iter):
    """Weighted Lloyd iterations from ``centres``: nearest centre (the first among
    equal squared distances), weighted means (sums in the order of the colours; a
    centre left without colours stays), stop when the centres move less than
    numpy's ``allclose`` tolerance (rtol 1e-5, atol 1e-8)."""
    n, n_channels = colours.shape
    k = centres.shape[0]
    nearest = np.empty(n, dtype=np.int64)
    planes = np.ascontiguousarray(colours.T)
    for _ in range(n_iter):
        nearest[:] = 0
        _nearest_centre(planes, centres, nearest)
        total = np.zeros(k)
        new = np.zeros((k, n_channels))
        for i in range(n):
            total[nearest[i]] += weights[i]
            for c in range(n_channels):
                new[nearest[i], c] += weights[i] * colours[i, c]
        close = True
        for j in range(k):
            for c in range(n_channels):
                new[j, c] = new[j, c] / total[j] if total[j] > 0 else centres[j, c]
                close &= abs(new[j, c] - centres[j, c]) <= 1e-8 + 1e-5 * abs(centres[j, c])
        centres = new
        if close:
            break
    return centres


def learn_colour_words(colours, weights, n_words: int, *, n_iter: int = 15) -> np.ndarray:
    """Weighted k-means centres ("colour words") of a set of colours.

    Deterministic and independent of the order of the colours: the start takes
    weighted quantiles along the main axis of the colours, then Lloyd iterations.

    Parameters
    ----------
    colours : (n, C) float ndarray
        For example the mean colours of the regions.
    weights : (n,) float ndarray
        For example the region areas.
    n_words : int
        Number of centres K (fewer when there are fewer distinct colours).

    Returns
    -------
    (K, C) float64 ndarray

    Examples
    --------
    >>> c = np.array([[0.0], [0.1], [10.0], [10.2]])
    >>> np.round(learn_colour_words(c, np.ones(4), 2), 2)
    array([[ 0.05],
           [10.1 ]])
    """
    colours = np.asarray(colours, dtype=np.float64)
    weights = np.asarray(weights, dtype=np.float64)
    k = int(min(n_words, len(np.unique(colours, axis=0))))
    k = max(k, 1)
    mean = np.average(colours, axis=0, weights=weights)
    centred = colours - mean
    cov = (centred * weights[:, None]).T @ centred
    _, vecs = np.linalg.eigh(cov)
    axis = vecs[:, -1]
    axis = axis * (1.0 if axis[np.argmax(np.abs(axis))] >= 0 else -1.0)  # fixed sign
    proj = centred @ axis
    order = np.lexsort(tuple(colours.T[::-1]) + (proj,))
    cum = np.cumsum(weights[order])
    cum /= cum[-1]
    targets = (np.arange(k) + 0.5) / k
    centres = colours[order[np.searchsorted(cum, targets).clip(0, len(order) - 1)]].copy()
    centres = _lloyd(colours, weights, np.ascontiguousarray(centres), int(n_iter))
    order = np.lexsort(tuple(centres.T[::-1]))
    return centres[order]


@njit(cache=True)
def _nearest_in_block(planes, centres, j, start, stop, best, out):
    """Compare centre ``j`` with the pixels ``start .. stop - 1`` (one branch-free loop)."""
    n_channels = planes.shape[0]
    p0 = planes[0]
    c0 = centres[j, 0]
    if n_channels == 3:
        p1, p2 = planes[1], planes[2]
        c1, c2 = centres[j, 1], centres[j, 2]
        q0, q1, q2, o = p0[start:stop], p1[start:stop], p2[start:stop], out[start:stop]
        for i in range(stop - start):
            t0 = q0[i] - c0
            t1 = q1[i] - c1
            t2 = q2[i] - c2
            d = t0 * t0 + t1 * t1 + t2 * t2
            b = best[i]
            closer = d < b
            best[i] = min(d, b)
            o[i] = j if closer else o[i]
        return
    q0, o = p0[start:stop], out[start:stop]
    for i in range(stop - start):
        t = q0[i] - c0
        d = t * t
        for ch in range(1, n_channels):
            t = planes[ch, start + i] - centres[j, ch]
            d += t * t
        b = best[i]
        closer = d < b
        best[i] = min(d, b)
        o[i] = j if closer else o[i]


@njit(cache=True)
def _nearest_centre(planes, centres, out):
    """Index of the nearest centre (the first among equal distances) of every pixel.

    ``planes`` holds the channels as rows (C, n); ``out`` must start at 0. Pixels
    are taken in blocks that stay in cache, each compared with one centre at a time.
    """
    n = planes.shape[1]
    block = 2048
    best = np.empty(block, dtype=np.float64)
    for start in range(0, n, block):
        stop = min(start + block, n)
        best[:] = np.inf
        for j in range(centres.shape[0]):
            _nearest_in_block(planes, centres, j, start, stop, best, out)


def assign_colour_words(features, centres) -> np.ndarray:
    """Index of the nearest colour word for every pixel (spatial shape of ``features``).

    Examples
    --------
    >>> assign_colour_words(np.array([[[0.0], [9.0]]]), np.array([[1.0], [8.0]]))
    array([[0, 1]])
    """
    features = np.asarray(features, dtype=np.float64)
    planes = np.ascontiguousarray(features.reshape(-1, features.shape[-1]).T)
    out = np.zeros(planes.shape[1], dtype=np.int64)
    _nearest_centre(planes, np.ascontiguousarray(centres, dtype=np.float64), out)
    return out.reshape(features.shape[:-1])


def word_histograms(labels, words, n_regions: int, n_words: int) -> np.ndarray:
    """Pixel counts of each colour word in each region, shape (n_regions, n_words).

    Examples
    --------
    >>> word_histograms(np.array([[0, 0, 1]]), np.array([[1, 1, 0]]), 2, 2)
    array([[0., 2.],
           [1., 0.]])
    """
    key = np.asarray(labels, dtype=np.int64).ravel() * n_words + np.asarray(words).ravel()
    counts = np.bincount(key, minlength=n_regions * n_words).astype(np.float64)
    return counts.reshape(n_regions, n_words)


def describe_regions(labels, features, *, n_colour_words: int = 24) -> RegionFeatures:
    """Area, mean colour, lightness spread, colour-word histogram and frame contact per region.

    Parameters
    ----------
    labels : (M, N) or (P, M, N) int ndarray
        Consecutive labels from 0.
    features : (..., C) float ndarray
        Pixel features (CIELAB), spatial shape equal to ``labels``.
    n_colour_words : int
        Colour words learned (by :func:`learn_colour_words`) from the region means.

    Returns
    -------
    RegionFeatures

    Examples
    --------
    >>> labels = np.array([[0, 0, 1, 1]])
    >>> feats = np.array([[[10.0], [20.0], [50.0], [50.0]]])
    >>> r = describe_regions(labels, feats, n_colour_words=2)
    >>> r.area, r.mean.ravel(), r.std
    (array([2., 2.]), array([15., 50.]), array([5., 0.]))
    """
    labels = np.asarray(labels, dtype=np.int64)
    features = np.asarray(features, dtype=np.float64)
    flat = labels.ravel()
    n = int(flat.max()) + 1 if flat.size else 0
    pixels = features.reshape(-1, features.shape[-1])
    area = np.bincount(flat, minlength=n).astype(np.float64)
    safe = np.maximum(area, 1.0)
    mean = np.stack([np.bincount(flat, weights=pixels[:, c], minlength=n) / safe
                     for c in range(pixels.shape[1])], axis=1)
    light_sq = np.bincount(flat, weights=pixels[:, 0] ** 2, minlength=n) / safe
    std = np.sqrt(np.maximum(light_sq - mean[:, 0] ** 2, 0.0))
    centres = learn_colour_words(mean, area, n_colour_words)
    words = assign_colour_words(features, centres)
    hist = word_histograms(labels, words, n, centres.shape[0]) / safe[:, None]
    frame_mask = np.zeros(labels.shape, dtype=bool)
    for axis in range(labels.ndim):
        if labels.ndim == 3 and axis == 0:
            continue  # in a stack the frame is the side walls, not the first/last slice
        index = [slice(None)] * labels.ndim
        index[axis] = 0
        frame_mask[tuple(index)] = True
        index[axis] = -1
        frame_mask[tuple(index)] = True
    frame = np.bincount(flat, weights=frame_mask.ravel().astype(np.float64), minlength=n)
    return RegionFeatures(area=area, mean=mean, std=std, histogram=hist, frame=frame,
                          words=words, centres=centres)


def _slice_axis(array, axis, start):
    index = [slice(None)] * array.ndim
    index[axis] = slice(start, array.shape[axis] - 1 + start)
    return array[tuple(index)]
