"""Pixel-level boundary refinement: a second max-cut on the pixels near the boundary.

Superpixels are coarser than some objects (small nuclei, thin parts), so the
superpixel split is refined on a pixel graph built only where it can be wrong:

- the *band*: pixels within ``band`` pixels of the boundary of the superpixel
  mask, plus pixels whose own colour word says the opposite of their side
  (log-likelihood ratio beyond :data:`DISAGREEMENT`) and their neighbours;
- its vertices: the band's pixels and a terminal vertex (the foreground side);
- neighbour edges (4-connected in 2-D, 6-connected in 3-D): attractive,
  ``-smoothness * exp(-|f_p - f_q|^2 / (2 s^2))`` with ``f`` the CIELAB (or gray)
  features and ``s^2`` the mean squared difference over the band's neighbour pairs;
  an edge to a pixel outside the band, whose side is fixed, becomes an edge to the
  terminal;
- appearance edges to the terminal: ``-strength * llr(p)``, the log-likelihood
  ratio of the pixel's colour word under foreground and background word
  histograms learned from the superpixel mask, pixel by pixel.

Every edge away from the terminal is attractive, so the max-cut is a minimum s-t
cut: the registered max-cut method ``"flow"`` solves it exactly and certifies it.
Pixels outside a box and seeded pixels never enter the band. The graph has one
vertex per band pixel: no dense matrix, memory linear in the band.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage as ndi

from .graph import graph_from_edges
from .maxcut import solve_maxcut

__all__ = ["RefineResult", "refine_boundary", "refine_with_llr", "pixel_log_likelihood", "DISAGREEMENT"]

#: |log-likelihood ratio| above which a pixel whose side it contradicts joins the band.
DISAGREEMENT = float(np.log(8.0))


@dataclass(frozen=True, eq=False)
class RefineResult:
    """The outcome of :func:`refine_boundary`.

    Attributes
    ----------
    mask : bool ndarray
        The refined mask.
    n_vertices : int
        Vertices of the pixel graph (band pixels and the terminal).
    value, upper_bound : float
        Cut value of the refined split on the pixel graph and its certified bound.
    changed : int
        Pixels whose side changed.
    """

    mask: np.ndarray
    n_vertices: int
    value: float
    upper_bound: float | None
    changed: int


def pixel_log_likelihood(words, mask, n_words, *, smoothing=1.0):
    """Log-likelihood ratio (foreground over background) of every pixel's colour word.

    The two models are the word histograms of the pixels inside and outside
    ``mask``, each with ``smoothing`` pseudo-counts per word.

    Examples
    --------
    >>> words = np.array([[0, 0, 1, 1]])
    >>> np.round(pixel_log_likelihood(words, words == 1, 2), 3)
    array([[-1.099, -1.099,  1.099,  1.099]])
    """
    words = np.asarray(words)
    fg = np.bincount(words[mask], minlength=n_words) + smoothing
    bg = np.bincount(words[~mask], minlength=n_words) + smoothing
    llr = np.log(fg / fg.sum()) - np.log(bg / bg.sum())
    return llr[words]


def _neighbour_pairs(shape, touching=None):
    """Flat index pairs of 4- (2-D) or 6-connected (3-D, in-plane and across slices) pixels.

    Axis by axis, each in C order. With ``touching`` (a bool array of ``shape``),
    only the pairs with at least one pixel in it.
    """
    shape = tuple(int(s) for s in shape)
    firsts, seconds = [], []
    for axis in range(len(shape)):
        lo = [slice(None)] * len(shape)
        hi = [slice(None)] * len(shape)
        lo[axis], hi[axis] = slice(0, -1), slice(1, None)
        if touching is None:
            where = np.nonzero(np.ones([s - (a == axis) for a, s in enumerate(shape)], bool))
        else:
            where = np.nonzero(touching[tuple(lo)] | touching[tuple(hi)])
        first = np.ravel_multi_index(where, shape) if where[0].size else np.zeros(0, np.int64)
        stride = int(np.prod(shape[axis + 1:]))
        firsts.append(first.astype(np.int64))
        seconds.append(first.astype(np.int64) + stride)
    return np.concatenate(firsts), np.concatenate(seconds)


def _band(mask, llr, width, free):
    boundary = np.zeros(mask.shape, dtype=bool)
    for axis in range(mask.ndim):
        lo = [slice(None)] * mask.ndim
        hi = [slice(None)] * mask.ndim
        lo[axis], hi[axis] = slice(0, -1), slice(1, None)
        differs = mask[tuple(lo)] != mask[tuple(hi)]
        boundary[tuple(lo)] |= differs
        boundary[tuple(hi)] |= differs
    near = ndi.binary_dilation(boundary, iterations=max(int(width), 0)) if width > 0 else boundary
    contradicts = np.where(mask, llr < -DISAGREEMENT, llr > DISAGREEMENT)
    near |= ndi.binary_dilation(contradicts)
    return near & free


def refine_boundary(features, mask, words, n_words, *, band=3, smoothness=8.0,
                    strength=1.0, free=None) -> RefineResult:
    """Refine ``mask`` at pixel level near its boundary (see the module notes).

    Parameters
    ----------
    features : (..., C) float ndarray
        Pixel features (CIELAB or 100 x gray), spatial shape of ``mask``.
    mask : bool ndarray
        The superpixel mask.
    words : int ndarray, shape of ``mask``
        Colour word of every pixel.
    n_words : int
    band : int
        Half-width (pixels) of the band around the boundary.
    smoothness : float
        Weight of a neighbour edge between equal features.
    strength : float
        Multiplier of the appearance edges.
    free : bool ndarray, optional
        Pixels that may change (False: kept as they are; outside a box, seeds).

    Returns
    -------
    RefineResult

    Examples
    --------
    A square whose superpixel mask is one pixel too small on every side:

    >>> image = np.zeros((12, 12)); image[3:9, 3:9] = 1.0
    >>> coarse = np.zeros((12, 12), bool); coarse[4:8, 4:8] = True
    >>> words = image.astype(np.int64)
    >>> r = refine_boundary(100 * image[..., None], coarse, words, 2, band=2)
    >>> bool((r.mask == (image > 0)).all()), r.changed
    (True, 20)
    """
    mask = np.asarray(mask, dtype=bool)
    llr = pixel_log_likelihood(words, mask, n_words)
    return refine_with_llr(features, mask, llr, band=band, smoothness=smoothness,
                           strength=strength, free=free)


def refine_with_llr(features, mask, llr, *, band=3, smoothness=8.0, strength=1.0,
                    free=None) -> RefineResult:
    """:func:`refine_boundary` with the pixels' log-likelihood ratios given.

    The large-image path (:mod:`segcut.large`) learns the colour-word models once,
    on the reduced copy, and refines tile by tile with them; pixels with
    ``free`` False (for a tile: those outside it) keep their side and enter the
    graph only through their edges to the terminal.

    Examples
    --------
    >>> image = np.zeros((12, 12)); image[3:9, 3:9] = 1.0
    >>> coarse = np.zeros((12, 12), bool); coarse[4:8, 4:8] = True
    >>> llr = np.where(image > 0, 1.0, -1.0)
    >>> r = refine_with_llr(100 * image[..., None], coarse, llr, band=2)
    >>> bool((r.mask == (image > 0)).all())
    True
    """
    mask = np.asarray(mask, dtype=bool)
    free = np.ones(mask.shape, dtype=bool) if free is None else np.asarray(free, dtype=bool)
    in_band = _band(mask, llr, band, free)
    k = int(np.count_nonzero(in_band))
    if k == 0:
        return RefineResult(mask=mask.copy(), n_vertices=0, value=0.0, upper_bound=0.0, changed=0)
    vertex = np.full(mask.size, -1, dtype=np.int64)
    flat_band = in_band.ravel()
    vertex[flat_band] = np.arange(k)
    p, q = _neighbour_pairs(mask.shape, in_band)
    feats = features.reshape(mask.size, -1)
    d2 = ((feats[p] - feats[q]) ** 2).sum(axis=1)
    scale = float(np.mean(d2)) if d2.size else 1.0
    w = -smoothness * np.exp(-d2 / (2.0 * max(scale, 1e-12)))
    flat_mask = mask.ravel()
    both = flat_band[p] & flat_band[q]
    # a neighbour outside the band has a fixed side: its edge goes to the terminal,
    # with weight w when it is foreground (cut when the pixel is background) and -w
    # (plus a constant) when it is background
    one = ~both
    inner_pixel = np.where(flat_band[p[one]], p[one], q[one])
    outer_pixel = np.where(flat_band[p[one]], q[one], p[one])
    to_terminal = np.where(flat_mask[outer_pixel], w[one], -w[one])
    unary = np.bincount(vertex[inner_pixel], weights=to_terminal, minlength=k).astype(np.float64)
    unary -= strength * llr.ravel()[flat_band]
    rows = np.concatenate([vertex[p[both]], np.full(k, k)])
    cols = np.concatenate([vertex[q[both]], np.arange(k)])
    graph = graph_from_edges(k + 1, rows, cols, np.concatenate([w[both], unary]))
    result = solve_maxcut(graph, method="flow", terminal=k)
    foreground = result.sides[:k] == result.sides[k]
    out = flat_mask.copy()
    out[flat_band] = foreground
    out = out.reshape(mask.shape)
    return RefineResult(mask=out, n_vertices=k + 1, value=float(result.value),
                        upper_bound=result.upper_bound,
                        changed=int(np.count_nonzero(out != mask)))
