"""The large-image path: the graph on a reduced copy, the boundary at full resolution.

:func:`segcut.split` takes this path for a 2-D image with more pixels than
``config.max_graph_pixels``. Full-resolution float copies of a large image cost
gigabytes (a 36 Mpixel RGB image is 0.86 GB per float64 copy), and SLIC on all of it
dominates the time, so here:

1. the robust range of the values (:func:`segcut.prepare.prepare_image`'s
   percentiles) comes from histograms of row chunks (integer images) and the
   canonical orientation (:func:`segcut.orientation.canonical_transform`) from
   block sums of row chunks: the same range and the same transform as the
   full-resolution path, without a full float copy;
2. the image, in its canonical orientation, is area-averaged by the smallest
   integer factor ``f`` that brings it to at most ``max_graph_pixels`` pixels
   (the last rows and columns repeated up to a multiple of ``f``); seeds (a reduced
   pixel is a seed when its block holds seeds of one side only) and the box
   (rounded outwards) go along;
3. the superpixel graph of the reduced copy is built and solved as in the
   full-resolution path, and its mask is brought back to full resolution;
4. the pixel refinement (:func:`segcut.refine.refine_with_llr`) runs at full
   resolution in tiles of :data:`TILE` x :data:`TILE` pixels, only on tiles near the
   boundary or holding pixels whose colour word contradicts their side (judged on
   the reduced copy); on a two-cluster image the two-Gaussian pixel model
   (:mod:`segcut.pixel_models`) joins the colour words as in the full-resolution
   path, fitted on a grid of full-resolution pixels (an area average carries a
   fraction of a pixel's noise, so a model of the reduced copy would over-weight
   it); when the reduced copy's background was flattened (:mod:`segcut.background`),
   every tile pixel gets the lightness change of its block; each tile's features are
   computed for the tile and a margin, and each tile's graph is solved with every
   pixel outside the tile fixed (tiles in row order, each seeing the sides its
   predecessors chose).

The full-resolution ``labels`` come back as int32 and ``confidence`` as float32 (on
the full-resolution path they stay int64 / float64): at 100 Mpixel that is 0.4 GB
each instead of 0.8 GB.

Everything after step 1 happens in the canonical orientation, so results stay
exactly equivariant under flips and quarter turns. A float image with non-finite
values gets them replaced by the channel mean in one copy (as on the
full-resolution path, with the same warning). 3-D stacks and images without
contrast take the full-resolution path.

The record's ``graphs`` has the superpixel graph of the reduced copy and one entry
``"refine"`` for all tiles: ``n_vertices``, ``value`` and ``upper_bound`` are sums over
the tiles' graphs and ``tiles`` their number. Each tile's value is certified by
its own bound, so the sums certify the tiles one by one given the tiles before
them; they are not the value and bound of one graph of the whole band.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np
from scipy import ndimage as ndi

from .maxcut import relative_gap
from .orientation import _canonical_box, _lexicographic_less, \
    _symmetric_edges, _KEY_BLOCKS, _KEY_LEVELS, apply_transform, pick_canonical
from .background import flatten_background
from .prepare import NORMALISE_PERCENTILES, _channels_last, _fill_non_finite, block_average, \
    image_features
from .priors import SEED_BACKGROUND, SEED_FOREGROUND
from .pixel_models import fit_two_gaussians
from .refine import DISAGREEMENT, refine_with_llr
from .regions import assign_colour_words

__all__ = ["uses_large_path", "split_large", "reduction_factor", "TILE"]

#: Side (pixels) of the refinement tiles.
TILE = 512
#: Rows per chunk when streaming over the full-resolution image.
_CHUNK_PIXELS = 1 << 20
#: About this many full-resolution pixels (an even grid) fit the tiles' two-Gaussian model.
_FIT_SAMPLE = 60000


def uses_large_path(image, config, channel_axis) -> bool:
    """True when :func:`segcut.split` takes the large-image path for ``image``.

    Examples
    --------
    >>> from segcut import SplitConfig
    >>> uses_large_path(np.zeros((300, 300)), SplitConfig(max_graph_pixels=20000), None)
    True
    >>> uses_large_path(np.zeros((100, 100)), SplitConfig(max_graph_pixels=20000), None)
    False
    """
    limit = config.max_graph_pixels
    if limit is None:
        return False
    arr = _channels_last(image, channel_axis)
    if arr.ndim != 3 or arr.shape[0] * arr.shape[1] <= limit:
        return False
    return True


def reduction_factor(shape, max_pixels: int) -> int:
    """The smallest integer factor bringing ``shape`` (M, N) to at most ``max_pixels``.

    Examples
    --------
    >>> reduction_factor((6000, 6000), 3_000_000)
    4
    >>> reduction_factor((300, 300), 20000)
    3
    """
    rows, cols = shape
    f = max(1, int(math.floor(math.sqrt(rows * cols / max_pixels))))
    while math.ceil(rows / f) * math.ceil(cols / f) > max_pixels:
        f += 1
    return f


# -- streaming over the full-resolution values ---------------------------------------

def _values(arr):
    """Channels-last view without alpha; gray and other channel counts keep one channel."""
    channels = arr.shape[-1]
    if channels in (2, 4):
        arr = arr[..., :channels - 1]
    if arr.shape[-1] != 3:
        arr = arr[..., :1]
    return arr


def _chunk_rows(arr):
    return max(1, _CHUNK_PIXELS // max(int(np.prod(arr.shape[1:])), 1))


def _row_chunks(arr):
    step = _chunk_rows(arr)
    for r0 in range(0, arr.shape[0], step):
        yield r0, arr[r0:r0 + step]


def _lerp(a, b, t):
    """Linear interpolation as numpy's percentile does it (exact at both ends)."""
    diff = b - a
    return b - diff * (1.0 - t) if t >= 0.5 else a + diff * t


def _robust_range(arr):
    """(lo, hi, has_contrast) of :func:`segcut.prepare.prepare_image`, chunk by chunk.

    Integer images of at most 16 bits: exact order statistics from histograms; float
    images: exact order statistics by radix selection (:func:`_float_order_statistics`);
    other integers: a float64 copy, as in the full-resolution path.
    """
    small_int = arr.dtype.kind in "bu" or (arr.dtype.kind == "i" and arr.dtype.itemsize <= 2)
    if arr.dtype.kind == "f" and arr.dtype.itemsize <= 8:
        return _float_range(arr)
    if not small_int:
        x = arr.astype(np.float64)
        has_contrast = bool(np.ptp(x.reshape(-1, x.shape[-1]), axis=0).max() > 0)
        lo, hi = np.percentile(x, NORMALISE_PERCENTILES)
        if not hi > lo:
            lo, hi = float(x.min()), float(x.max())
        return float(lo), float(hi), has_contrast
    offset = int(np.iinfo(arr.dtype).min) if arr.dtype.kind == "i" else 0
    size = (1 << (8 * arr.dtype.itemsize)) if arr.dtype.kind != "b" else 2
    counts = np.zeros((arr.shape[-1], size), dtype=np.int64)
    for _, chunk in _row_chunks(arr):
        for c in range(arr.shape[-1]):
            index = chunk[..., c].ravel().astype(np.int64) - offset
            counts[c] += np.bincount(index, minlength=size)
    present = counts > 0
    lows = [int(np.argmax(p)) for p in present]
    highs = [size - 1 - int(np.argmax(p[::-1])) for p in present]
    has_contrast = any(h > lo_ for lo_, h in zip(lows, highs))
    total = counts.sum(axis=0)
    cumulative = np.cumsum(total)
    n = int(cumulative[-1])

    def order_statistic(k):
        return float(np.searchsorted(cumulative, k, side="right") + offset)

    bounds = []
    for p in NORMALISE_PERCENTILES:
        position = p / 100.0 * (n - 1)
        below = int(math.floor(position))
        above = min(below + 1, n - 1)
        bounds.append(_lerp(order_statistic(below), order_statistic(above), position - below))
    lo, hi = bounds
    if not hi > lo:
        lo, hi = float(min(lows) + offset), float(max(highs) + offset)
    return lo, hi, has_contrast


def _percentile_ranks(n):
    """For each of :data:`NORMALISE_PERCENTILES`: (rank below, rank above, weight), as
    numpy's linear percentile places it among ``n`` sorted values."""
    out = []
    for p in NORMALISE_PERCENTILES:
        position = p / 100.0 * (n - 1)
        below = int(math.floor(position))
        out.append((below, min(below + 1, n - 1), position - below))
    return out


def _float_range(arr):
    """:func:`_robust_range` of a float image without a full-size copy."""
    lows = np.full(arr.shape[-1], np.inf)
    highs = np.full(arr.shape[-1], -np.inf)
    for _, chunk in _row_chunks(arr):
        flat = chunk.reshape(-1, arr.shape[-1])
        lows = np.minimum(lows, flat.min(axis=0))
        highs = np.maximum(highs, flat.max(axis=0))
    has_contrast = bool((highs - lows).max() > 0)
    ranks = _percentile_ranks(arr.size)
    wanted = sorted({r for below, above, _ in ranks for r in (below, above)})
    found = dict(zip(wanted, _float_order_statistics(arr, wanted)))
    lo, hi = (_lerp(found[below], found[above], t) for below, above, t in ranks)
    if not hi > lo:
        lo, hi = float(lows.min()), float(highs.max())
    return float(lo), float(hi), has_contrast


def _float_order_statistics(arr, ranks):
    """Exact order statistics (0-based ``ranks`` among all values) of a float array,
    streamed over row chunks: radix selection on order-preserving integer keys, 16 bits
    a pass (two passes for float32, four for float64; float16 is read as float32).

    Examples
    --------
    >>> x = np.array([[[3.5], [-1.0]], [[0.25], [-7.0]]], np.float32)
    >>> _float_order_statistics(x, [0, 2, 3])
    [-7.0, 0.25, 3.5]
    """
    wide = arr.dtype.itemsize == 8
    unsigned = np.uint64 if wide else np.uint32
    bits = 64 if wide else 32
    sign = unsigned(1 << (bits - 1))

    def keys(chunk):
        values = np.ascontiguousarray(chunk, dtype=np.float64 if wide else np.float32)
        u = values.view(unsigned).ravel()
        return np.where(u & sign, ~u, u | sign)

    prefixes, remaining = [0] * len(ranks), list(ranks)
    for shift in range(bits - 16, -1, -16):
        counts = np.zeros((len(ranks), 1 << 16), dtype=np.int64)
        for _, chunk in _row_chunks(arr):
            k = keys(chunk)
            high = k >> unsigned(shift + 16) if shift + 16 < bits else None
            for j in range(len(ranks)):
                picked = k if high is None else k[high == unsigned(prefixes[j])]
                digits = ((picked >> unsigned(shift)) & unsigned(0xFFFF)).astype(np.int64)
                counts[j] += np.bincount(digits, minlength=1 << 16)
        for j in range(len(ranks)):
            cumulative = np.cumsum(counts[j])
            digit = int(np.searchsorted(cumulative, remaining[j], side="right"))
            remaining[j] -= int(cumulative[digit - 1]) if digit else 0
            prefixes[j] = (prefixes[j] << 16) | digit
    out = []
    for key in prefixes:
        u = unsigned(key)
        u = u & ~sign if u & sign else ~u
        out.append(float(np.array([u], dtype=unsigned).view(np.float64 if wide
                                                            else np.float32)[0]))
    return out


def _normalised(block, lo, hi):
    """Values of ``block`` mapped as :func:`segcut.prepare._normalise` maps them."""
    x = block.astype(np.float64)
    if not hi > lo:
        return np.zeros_like(x)
    return np.clip((x - lo) / (hi - lo), 0.0, 1.0)


def _block_sums(arr, lo, hi):
    """:func:`segcut.orientation._block_sums` of the normalised values, chunk by chunk."""
    rows, cols, channels = arr.shape
    row_edges = _symmetric_edges(rows, _KEY_BLOCKS)
    col_edges = _symmetric_edges(cols, _KEY_BLOCKS)
    col_starts = np.minimum(col_edges[:-1], cols - 1)
    empty_cols = col_edges[:-1] == col_edges[1:]
    sums = np.zeros((_KEY_BLOCKS, _KEY_BLOCKS, channels), dtype=np.int64)
    for r0, chunk in _row_chunks(arr):
        q = (_normalised(chunk, lo, hi) * float(_KEY_LEVELS) + 0.5).astype(np.int64)
        per_col = np.add.reduceat(q, col_starts, axis=1)
        per_col[:, empty_cols] = 0
        block = np.searchsorted(row_edges, np.arange(r0, r0 + chunk.shape[0]), side="right") - 1
        for b in np.unique(block):
            sums[b] += per_col[block == b].sum(axis=0)
    return sums


def _views_less(arr, name, best, lo, hi):
    """:func:`segcut.orientation._lexicographic_less` of two views, chunk by chunk."""
    a = apply_transform(arr, name, axes=(0, 1))
    b = apply_transform(arr, best, axes=(0, 1))
    step = _chunk_rows(a)
    for r0 in range(0, a.shape[0], step):
        x, y = _normalised(a[r0:r0 + step], lo, hi), _normalised(b[r0:r0 + step], lo, hi)
        if not np.array_equal(x, y):
            return _lexicographic_less(x, y)
    return False


def _canonical_transform(arr, lo, hi):
    """:func:`segcut.orientation.canonical_transform` of the normalised values, streamed."""
    return pick_canonical(arr[..., :1], _block_sums(arr, lo, hi), (0, 1),
                          lambda a, b: _views_less(arr, a, b, lo, hi))


# -- the reduced copy -------------------------------------------------------------------

def _padded(block, rows, cols):
    """``block`` with its last row and column repeated up to ``rows`` x ``cols``."""
    pad = [(0, rows - block.shape[0]), (0, cols - block.shape[1])]
    pad += [(0, 0)] * (block.ndim - 2)
    return np.pad(block, pad, mode="edge") if any(p[1] for p in pad) else block


def _reduce(view, f, lo, hi):
    """Area average of the normalised canonical view over f x f blocks (float64)."""
    rows, cols, channels = view.shape
    m, n = math.ceil(rows / f), math.ceil(cols / f)
    out = np.empty((m, n, channels))
    step = max(1, _chunk_rows(view) // f)
    for i0 in range(0, m, step):
        i1 = min(m, i0 + step)
        out[i0:i1] = block_average(_normalised(view[i0 * f:i1 * f], lo, hi), f)
    return out


def _reduce_seeds(seeds, f):
    """Reduced seeds: a block's seed when all its seeds are of one side."""
    rows, cols = seeds.shape
    m, n = math.ceil(rows / f), math.ceil(cols / f)
    fg = _padded(np.asarray(seeds) == SEED_FOREGROUND, m * f, n * f)
    bg = _padded(np.asarray(seeds) == SEED_BACKGROUND, m * f, n * f)
    fg = fg.reshape(m, f, n, f).any(axis=(1, 3))
    bg = bg.reshape(m, f, n, f).any(axis=(1, 3))
    out = np.zeros((m, n), dtype=np.int64)
    out[fg & ~bg] = SEED_FOREGROUND
    out[bg & ~fg] = SEED_BACKGROUND
    return out


def _reduce_box(box, f):
    x0, y0, x1, y1 = box
    return (x0 // f, y0 // f, -(-x1 // f), -(-y1 // f))


def _expand(small, f, shape, transform=None):
    """Each pixel of ``small`` repeated to f x f (cropped to ``shape``), then moved.

    ``transform``: the inverse of that canonical transform is applied, so a map of
    the reduced canonical frame comes back in the caller's frame in one allocation.
    """
    rows, cols = shape
    ri, ci = np.arange(rows) // f, np.arange(cols) // f
    if transform is None or transform == "identity":
        return small[np.ix_(ri, ci)]
    probe = apply_transform(np.arange(6).reshape(2, 3), transform, inverse=True)
    first = int(probe[0, 0])
    rows_reversed, cols_reversed = first // 3 == 1, first % 3 == 2
    if probe.shape == (2, 3):
        return small[np.ix_(ri[::-1] if rows_reversed else ri, ci[::-1] if cols_reversed else ci)]
    return small.T[np.ix_(ci[::-1] if cols_reversed else ci, ri[::-1] if rows_reversed else ri)]


# -- the split ------------------------------------------------------------------------

def split_large(image, config, *, seeds=None, channel_axis=-1, generator=None, seed=None):
    """:func:`segcut.split` by the large-image path (see the module notes).

    Returns None when the image has no contrast (the full-resolution path then
    gives its empty mask). ``generator`` drives every random choice, ``seed`` is
    recorded.

    Examples
    --------
    >>> from segcut import SplitConfig
    >>> image = np.zeros((120, 120)); image[30:90, 40:100] = 1.0
    >>> r = split_large(image, SplitConfig(max_graph_pixels=4000), channel_axis=None,
    ...                 generator=np.random.default_rng(0))
    >>> bool(r.mask[60, 70]), bool(r.mask[5, 5]), [g["name"] for g in r.graphs]
    (True, False, ['superpixels', 'refine'])
    """
    from .pipeline import _normalise_seeds

    generator = np.random.default_rng(generator)
    seconds = {}
    t0 = time.perf_counter()
    arr = _values(_channels_last(image, channel_axis))
    fill_warnings = []
    if np.issubdtype(arr.dtype, np.floating) and not np.isfinite(arr).all():
        # one copy of the image with its non-finite values replaced, as the
        # full-resolution path does (never a float64 copy of a float32 image)
        arr = _fill_non_finite(arr, fill_warnings)
    spatial = arr.shape[:2]
    seeds = _normalise_seeds(seeds, spatial)
    lo, hi, has_contrast = _robust_range(arr)
    if not has_contrast:
        return None
    seconds["prepare"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    transform = _canonical_transform(arr, lo, hi)
    seconds["canonical"] = time.perf_counter() - t0
    view = apply_transform(arr, transform, axes=(0, 1))
    if config.box is not None:
        config = config.replace(box=_canonical_box(config.box, spatial, transform))
    seeds = None if seeds is None else apply_transform(seeds, transform)
    reduced = _ReducedSplit.solve(view, config, seeds, lo, hi, generator, seconds, transform)
    t0 = time.perf_counter()
    mask, refine_record, changed = _refine_tiles(view, reduced, config, seeds, lo, hi)
    mask = np.ascontiguousarray(apply_transform(mask, transform, inverse=True))
    seconds["refine"] = time.perf_counter() - t0
    result = _finish(mask, reduced, config, transform, seed, seconds, refine_record, changed)
    return replace(result, warnings=fill_warnings + list(result.warnings)) if fill_warnings \
        else result


class _ReducedSplit:
    """The superpixel split of the reduced canonical copy."""

    def __init__(self, ig, regions, sides, mask, factor, shape, method, value, bound,
                 fit_llr=None):
        self.ig, self.regions, self.sides, self.mask = ig, regions, sides, mask
        self.factor, self.shape, self.method = factor, shape, method
        self.value_before, self.bound = value, bound
        # log-odds of the two-Gaussian pixel model (segcut.pixel_models) fitted on the
        # reduced copy, on the reduced copy (float32), only when it is two-cluster there:
        # they help pick the tiles to refine, at the reduced copy's own resolution
        self.fit_llr = fit_llr
        # the same model fitted on a sample of full-resolution pixels, for the tiles: an
        # area average has a smaller variance than single pixels, so the reduced copy's
        # model would give full-resolution noise far too much weight
        self.tile_fit = None
        # what flattening the background (segcut.background) added to the reduced copy's
        # lightness (float32), added to every tile pixel in its block; None when not flattened
        self.lightness_offset = None
        self.background_record = None

    @property
    def two_cluster(self):
        return self.tile_fit is not None and self.tile_fit.two_cluster

    @classmethod
    def solve(cls, view, config, seeds, lo, hi, generator, seconds, transform="identity"):
        from .appearance import border_rule
        from .image_graph import frame_pixels
        from .pipeline import _Prepared, _graph_stages, _solve

        t0 = time.perf_counter()
        shape = view.shape[:2]
        f = reduction_factor(shape, config.max_graph_pixels)
        values = _reduce(view, f, lo, hi)
        small_config = config if config.box is None else config.replace(
            box=_reduce_box(config.box, f))
        small_seeds = None if seeds is None else _reduce_seeds(seeds, f)
        features = image_features(values)
        radius = config.background_radius
        if radius:  # a fixed radius is in full-size pixels
            radius = max(1, int(round(radius / f)))
        flat_features, background = flatten_background(features, radius)
        prepared = _Prepared(values, flat_features, small_seeds, small_config,
                             "identity", values.shape[:2], [], prior_transform=transform,
                             background=background)
        seconds["reduce"] = time.perf_counter() - t0
        ig, regions = _graph_stages(prepared, seconds, generator)
        t0 = time.perf_counter()
        method, sides, value, bound = _solve(ig, config, generator)
        seconds["solve"] = time.perf_counter() - t0
        mask = ig.paint(sides)
        if ig.terminal is None and border_rule(ig.region_foreground(sides),
                                               frame_pixels(ig.labels)):
            mask = ~mask
        fit = fit_llr = None
        if config.refine and mask.any() and not mask.all():
            fit = fit_two_gaussians(prepared.features, mask)
            if fit.two_cluster:
                fit_llr = fit.log_likelihood_ratio(prepared.features).astype(np.float32)
        out = cls(ig, regions, sides, mask, f, shape, method, value, bound, fit_llr)
        record = background.to_record()
        if background.flattened:
            out.lightness_offset = (flat_features[..., 0] - features[..., 0]).astype(np.float32)
            record["radius"] = int(background.radius * f)  # in full-size pixels
        out.background_record = record
        if fit is not None:
            out.tile_fit = out.full_resolution_fit(view, lo, hi)
        return out

    def full_resolution_features(self, block, rows, cols, lo, hi):
        """Pixel features of ``block``, the full-resolution pixels at ``rows`` x ``cols``
        (index arrays), flattened like the reduced copy when its background was."""
        features = image_features(_normalised(block, lo, hi))
        if self.lightness_offset is not None:
            features[..., 0] += self.lightness_offset[np.ix_(rows // self.factor,
                                                             cols // self.factor)]
        return features

    def full_resolution_fit(self, view, lo, hi):
        """The two-Gaussian model fitted on an even grid of about _FIT_SAMPLE full-resolution
        pixels, started from the reduced mask (None when the grid sees one side only)."""
        rows, cols = self.shape
        step = max(1, int(np.ceil(np.sqrt(rows * cols / _FIT_SAMPLE))))
        ri, ci = np.arange(0, rows, step), np.arange(0, cols, step)
        features = self.full_resolution_features(np.asarray(view[::step, ::step]), ri, ci,
                                                 lo, hi)
        mask = self.mask[np.ix_(ri // self.factor, ci // self.factor)]
        if not mask.any() or mask.all():
            return None
        return fit_two_gaussians(features, mask)

    def word_llr(self):
        """Log-likelihood ratio of each colour word, from the reduced mask (pixel counts)."""
        words, n_words = self.regions.words, int(self.regions.centres.shape[0])
        area = float(self.factor) ** 2
        fg = np.bincount(words[self.mask], minlength=n_words) * area + 1.0
        bg = np.bincount(words[~self.mask], minlength=n_words) * area + 1.0
        return np.log(fg / fg.sum()) - np.log(bg / bg.sum())

    def band(self, config):
        if config.refine_band is not None:
            return int(config.refine_band)
        side = math.sqrt(self.shape[0] * self.shape[1] / max(self.ig.n_regions, 1))
        return max(2, int(round(0.5 * side)))

    def tiles_to_refine(self, band, llr):
        """Flags (tile rows, tile columns): tiles near the boundary or a contradiction."""
        f, mask = self.factor, self.mask
        boundary = np.zeros(mask.shape, dtype=bool)
        for axis in (0, 1):
            differs = np.diff(mask, axis=axis) != 0
            lo = [slice(None)] * 2
            hi = [slice(None)] * 2
            lo[axis], hi[axis] = slice(0, -1), slice(1, None)
            boundary[tuple(lo)] |= differs
            boundary[tuple(hi)] |= differs
        near = ndi.binary_dilation(boundary, iterations=band // f + 2)
        pixel_llr = llr[self.regions.words]
        if self.fit_llr is not None:
            pixel_llr = pixel_llr + self.fit_llr
        near |= ndi.binary_dilation(np.where(mask, pixel_llr < -DISAGREEMENT,
                                             pixel_llr > DISAGREEMENT), iterations=2)
        rows, cols = self.shape
        flags = np.zeros((math.ceil(rows / TILE), math.ceil(cols / TILE)), dtype=bool)
        for i in range(flags.shape[0]):
            for j in range(flags.shape[1]):
                flags[i, j] = near[i * TILE // f:-(-(i + 1) * TILE // f),
                                   j * TILE // f:-(-(j + 1) * TILE // f)].any()
        return flags


def _forced(seeds, box, r0, r1, c0, c1):
    """Per pixel of a window: 0 free, +1 foreground seed, -1 background (seed or outside box)."""
    out = np.zeros((r1 - r0, c1 - c0), dtype=np.int8)
    if seeds is not None:
        window = seeds[r0:r1, c0:c1]
        out[window == SEED_FOREGROUND] = 1
        out[window == SEED_BACKGROUND] = -1
    if box is not None:
        x0, y0, x1, y1 = box
        rows = np.arange(r0, r1)[:, None]
        cols = np.arange(c0, c1)[None, :]
        outside = (rows < y0) | (rows >= y1) | (cols < x0) | (cols >= x1)
        out[outside & (out == 0)] = -1
    return out


def _refine_tiles(view, reduced, config, seeds, lo, hi):
    """Full-resolution mask (canonical frame), refined tile by tile near the boundary."""
    rows, cols = reduced.shape
    mask = _expand(reduced.mask, reduced.factor, (rows, cols))
    if seeds is not None or config.box is not None:
        for r0 in range(0, rows, TILE):
            forced = _forced(seeds, config.box, r0, min(rows, r0 + TILE), 0, cols)
            mask[r0:r0 + TILE] = np.where(forced == 0, mask[r0:r0 + TILE], forced > 0)
    record = {"name": "refine", "n_vertices": 0, "value": 0.0, "upper_bound": 0.0, "tiles": 0}
    changed = 0
    if not config.refine or not mask.any() or mask.all():
        return mask, None, changed
    band = reduced.band(config)
    llr_table = reduced.word_llr()
    centres = reduced.regions.centres
    margin = band + 2
    flags = reduced.tiles_to_refine(band, llr_table)
    for i, j in zip(*np.nonzero(flags)):
        r0, c0 = i * TILE, j * TILE
        r1, c1 = min(rows, r0 + TILE), min(cols, c0 + TILE)
        w0, w1 = max(0, r0 - margin), min(rows, r1 + margin)
        v0, v1 = max(0, c0 - margin), min(cols, c1 + margin)
        features = reduced.full_resolution_features(view[w0:w1, v0:v1], np.arange(w0, w1),
                                                    np.arange(v0, v1), lo, hi)
        llr = llr_table[assign_colour_words(features, centres)]
        if reduced.two_cluster:
            llr = llr + reduced.tile_fit.log_likelihood_ratio(features)
        free = np.zeros((w1 - w0, v1 - v0), dtype=bool)
        core = (slice(r0 - w0, r1 - w0), slice(c0 - v0, c1 - v0))
        free[core] = _forced(seeds, config.box, r0, r1, c0, c1) == 0
        before = mask[w0:w1, v0:v1]
        result = refine_with_llr(features, before, llr, band=band,
                                 smoothness=config.refine_smoothness,
                                 strength=config.model_strength, free=free)
        if result.n_vertices == 0:
            continue
        changed += int(np.count_nonzero(result.mask[core] != before[core]))
        mask[r0:r1, c0:c1] = result.mask[core]
        record["n_vertices"] += int(result.n_vertices)
        record["value"] += float(result.value)
        record["upper_bound"] += float(result.upper_bound)
        record["tiles"] += 1
    if record["tiles"] == 0:
        return mask, None, changed
    record["gap"] = relative_gap(record["value"], record["upper_bound"])
    record.update(reduced.tile_fit.refine_entry() if reduced.tile_fit is not None
                  else {"pixel_model": "colour_words", "separation": None})
    return mask, record, changed


def _region_sides(ig, labels, mask):
    """:func:`segcut.image_graph.mask_to_sides` (sides only), summed chunk by chunk."""
    from .image_graph import vertex_start

    n = ig.n_regions
    fg = np.zeros(n)
    area = np.zeros(n)
    step = _chunk_rows(labels)
    for r0 in range(0, labels.shape[0], step):
        chunk = labels[r0:r0 + step].ravel()
        fg += np.bincount(chunk, weights=mask[r0:r0 + step].ravel(), minlength=n)
        area += np.bincount(chunk, minlength=n)
    region_fg = 2.0 * fg > area
    region_fg = np.where(ig.merged == 1, True, np.where(ig.merged == -1, False, region_fg))
    return vertex_start(region_fg, ig.region_vertex, ig.merged, ig.terminal, ig.graph.n_vertices)


def _finish(refined, reduced, config, transform, seed, seconds, refine_record, changed):
    """Clean-up, value on the reduced graph, confidence and the result."""
    from .confidence import split_confidence
    from .graph import cut_value
    from .pipeline import SplitResult, _clean, _seed_record

    t0 = time.perf_counter()
    ig, f, shape = reduced.ig, reduced.factor, reduced.shape
    final = _clean(refined, config)
    # full-resolution maps in compact types: superpixel labels fit int32 (a graph of at
    # most max_graph_pixels regions), confidences are shares in [0, 1] (float32)
    labels = _expand(ig.labels.astype(np.int32), f, shape, transform)
    value = cut_value(ig.graph, _region_sides(ig, labels, final))
    seconds["cleanup"] = time.perf_counter() - t0
    confidence = None
    if config.confidence:
        t0 = time.perf_counter()
        small = split_confidence(ig, reduced.sides, margin=config.confidence_margin)
        confidence = _expand(small.astype(np.float32), f, shape, transform)
        seconds["confidence"] = time.perf_counter() - t0
    bound = reduced.bound
    graphs = [{"name": "superpixels", "n_vertices": int(ig.graph.n_vertices),
               "value": float(value), "upper_bound": bound, "gap": relative_gap(value, bound),
               "reduction_factor": int(f)}]
    if refine_record is not None:
        graphs.append(refine_record)
    warnings = list(ig.warnings)
    full_ig = replace(ig, labels=labels, canonical_transform=transform, pixel_context=None,
                      warnings=warnings, seconds=seconds, background=reduced.background_record)
    return SplitResult(
        mask=final, labels=labels, value=value, upper_bound=bound,
        gap=relative_gap(value, bound), foreground_fraction=float(final.mean()),
        n_superpixels=ig.n_regions, orientation=ig.orientation, seconds=seconds,
        warnings=warnings,
        cleanup={"value_before": float(reduced.value_before), "value_after": float(value),
                 "pixels_changed": int(np.count_nonzero(final != refined))},
        method=reduced.method, seed=_seed_record(seed), image_graph=full_ig,
        canonical_transform=transform, hypothesis=ig.hypothesis, choice_rule=ig.choice_rule,
        hypothesis_disagreement=ig.hypothesis_disagreement,
        refine_changed_fraction=changed / max(final.size, 1), graphs=graphs,
        background=reduced.background_record,
        confidence=confidence, uncertain_level=config.uncertain_level)
