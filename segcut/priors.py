"""Priors, seeds and colour models: everything that becomes an edge to the terminal.

The graph of an image has one extra *terminal* vertex ``t``; after solving, the
side of ``t`` is the foreground. Evidence that region ``i`` is foreground,
``u_i`` (positive for foreground, negative for background), enters as the edge
``(t, i)`` with weight ``-u_i``: a positive edge pays when ``i`` lands opposite
``t``, so regions with ``u_i < 0`` are paid to be background and regions with
``u_i > 0`` are charged for it.

Pixel priors are maps over the image with values in [-1, 1] (+1 foreground,
-1 background, 0 no opinion); a region's evidence is the sum over its pixels
times ``prior_strength``. Named priors are registered like affinity models, with
the entry-point group ``segcut.priors``. Hard seeds are handled by the pipeline
(merged into the terminal), see :func:`seeded_regions`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from ._plugins import check_new_name, first_doc_line, load_plugins
from .orientation import apply_transform

__all__ = [
    "ENTRY_POINT_GROUP",
    "SEED_UNKNOWN",
    "SEED_FOREGROUND",
    "SEED_BACKGROUND",
    "PriorModel",
    "available_priors",
    "get_prior",
    "register_prior",
    "prior_map",
    "box_map",
    "seeded_regions",
    "colour_evidence",
]

ENTRY_POINT_GROUP = "segcut.priors"

#: Values of a seed (marker) array: unknown, foreground, background.
SEED_UNKNOWN, SEED_FOREGROUND, SEED_BACKGROUND = 0, 1, 2


@dataclass(frozen=True)
class PriorModel:
    """A named pixel prior.

    Attributes
    ----------
    name : str
    pixel_map : callable
        ``pixel_map(spatial_shape, config) -> float ndarray`` of that shape, values
        in [-1, 1]: +1 foreground, -1 background, 0 no opinion.
    description : str
    """

    name: str
    pixel_map: Callable
    description: str = ""


_PRIORS: dict[str, PriorModel] = {}
_LOADED = False


def register_prior(name: str, pixel_map: Callable, *, description: str = "",
                   replace_existing: bool = False) -> PriorModel:
    """Register a pixel prior under ``name`` (see :class:`PriorModel`)."""
    check_new_name(_PRIORS, name, "prior", replace_existing=replace_existing)
    description = description or first_doc_line(pixel_map)
    model = PriorModel(name=name, pixel_map=pixel_map, description=description)
    _PRIORS[name] = model
    return model


def available_priors() -> dict[str, PriorModel]:
    """All registered priors by name, plugins included.

    Examples
    --------
    >>> {"border", "center"} <= set(available_priors())
    True
    """
    global _LOADED
    if not _LOADED:
        _LOADED = True
        load_plugins(ENTRY_POINT_GROUP, _PRIORS, PriorModel, register_prior)
    return dict(sorted(_PRIORS.items()))


def get_prior(name: str) -> PriorModel:
    """The prior called ``name``; ValueError listing the known ones otherwise."""
    priors = available_priors()
    if name not in priors:
        raise ValueError(f"unknown prior {name!r}; choose one of {', '.join(priors)}")
    return priors[name]


def _border_map(spatial_shape, config):
    """The frame of the image is background (a band of ``border_width`` of the shorter side)."""
    rows, cols = spatial_shape[-2], spatial_shape[-1]
    width = max(1, int(round(config.border_width * min(rows, cols))))
    out = np.zeros(spatial_shape, dtype=np.float64)
    out[..., :width, :] = -1.0
    out[..., rows - width:, :] = -1.0
    out[..., :, :width] = -1.0
    out[..., :, cols - width:] = -1.0
    return out


def _center_map(spatial_shape, config):
    """A central box (``center_fraction`` of each side) is foreground."""
    rows, cols = spatial_shape[-2], spatial_shape[-1]
    out = np.zeros(spatial_shape, dtype=np.float64)
    h = max(1, int(round(config.center_fraction * rows)))
    w = max(1, int(round(config.center_fraction * cols)))
    r0, c0 = (rows - h) // 2, (cols - w) // 2
    out[..., r0:r0 + h, c0:c0 + w] = 1.0
    return out


register_prior("border", _border_map)
register_prior("center", _center_map)


def box_map(spatial_shape, box) -> np.ndarray:
    """Outside the box ``(x0, y0, x1, y1)`` is background (-1); inside, no opinion (0).

    ``x`` counts columns, ``y`` rows; ``x1, y1`` are exclusive and clipped to the image.

    Examples
    --------
    >>> box_map((3, 4), (1, 1, 3, 2))
    array([[-1., -1., -1., -1.],
           [-1.,  0.,  0., -1.],
           [-1., -1., -1., -1.]])
    """
    rows, cols = spatial_shape[-2], spatial_shape[-1]
    x0, y0, x1, y1 = box
    x0, x1 = max(0, x0), min(cols, x1)
    y0, y1 = max(0, y0), min(rows, y1)
    if x0 >= x1 or y0 >= y1:
        raise ValueError(f"box {tuple(box)!r} does not overlap the image of {cols} x {rows} pixels")
    out = -np.ones(spatial_shape, dtype=np.float64)
    out[..., y0:y1, x0:x1] = 0.0
    return out


def prior_map(spatial_shape, config, transform: str = "identity") \
        -> tuple[np.ndarray | None, np.ndarray | None]:
    """Combined pixel prior of ``config.prior`` and ``config.box``.

    Parameters
    ----------
    spatial_shape : tuple of int
        Spatial shape of the image being split (in its processing orientation).
    config : SplitConfig
        ``config.box`` is in that same orientation.
    transform : str
        The canonical transform that took the caller's image to ``spatial_shape``
        (:mod:`segcut.orientation`): each named prior is laid out over the caller's
        image, as its author sees it, and moved by the transform, so a prior that is
        not symmetric under flips and turns lands where it was meant.

    Returns
    -------
    evidence : float ndarray or None
        Sum of the named prior maps and the box map, clipped to [-1, 1]; None when
        there is no prior.
    inside_box : bool ndarray or None
        The box interior (used as the first foreground sample of the colour
        models), None without a box.
    """
    caller_shape = apply_transform(np.empty(tuple(spatial_shape), dtype=np.int8), transform,
                                   inverse=True).shape
    maps = [np.ascontiguousarray(apply_transform(
        np.asarray(get_prior(name).pixel_map(tuple(caller_shape), config), dtype=np.float64),
        transform)) for name in config.prior]
    inside = None
    if config.box is not None:
        bm = box_map(spatial_shape, config.box)
        maps.append(bm)
        inside = bm == 0
    if not maps:
        return None, None
    total = np.clip(np.sum(maps, axis=0), -1.0, 1.0)
    return total, inside


def seeded_regions(labels, seeds) -> tuple[np.ndarray, list[str]]:
    """Which regions hold hard seeds: +1 foreground, -1 background, 0 none.

    A region holding both kinds takes the kind with more pixels (foreground on a
    tie) and a warning says how many regions and seed pixels that overruled.

    Parameters
    ----------
    labels : int ndarray
        Region labels from 0.
    seeds : int ndarray, same shape
        0 unknown, 1 foreground, 2 background.

    Examples
    --------
    >>> seeded_regions(np.array([[0, 0, 1, 2]]), np.array([[1, 0, 0, 2]]))
    (array([ 1,  0, -1], dtype=int8), [])
    """
    labels = np.asarray(labels, dtype=np.int64)
    seeds = np.asarray(seeds)
    n = int(labels.max()) + 1
    fg = np.bincount(labels.ravel(), weights=(seeds == SEED_FOREGROUND).ravel(), minlength=n)
    bg = np.bincount(labels.ravel(), weights=(seeds == SEED_BACKGROUND).ravel(), minlength=n)
    out = np.zeros(n, dtype=np.int8)
    out[fg >= bg] = 1
    out[bg > fg] = -1
    out[(fg == 0) & (bg == 0)] = 0
    warnings = []
    both = (fg > 0) & (bg > 0)
    if both.any():
        overruled = int(np.minimum(fg, bg)[both].sum())
        warnings.append(
            f"{int(both.sum())} superpixel(s) hold both foreground and background seeds; each "
            f"took the kind with more seed pixels, overruling {overruled} seed pixel(s) "
            "(keep the two kinds of seeds further apart, or use more superpixels)")
    return out, warnings


def colour_evidence(word_counts, fg_weight, bg_weight, *, smoothing: float = 1.0) -> np.ndarray:
    """Per-region log-likelihood ratio of two colour-word models, summed over pixels.

    The foreground model is the word histogram of the pixels weighted by
    ``fg_weight`` (per region), the background model likewise; each gets
    ``smoothing`` pseudo-counts per word. Region ``i`` with word counts ``c_ik``
    gets ``u_i = sum_k c_ik log(p_fg(k) / p_bg(k))``.

    Parameters
    ----------
    word_counts : (n, K) float ndarray
        Pixel counts of each colour word per region.
    fg_weight, bg_weight : (n,) float ndarray
        How much of each region counts as a foreground / background sample (0..1).

    Returns
    -------
    (n,) float64 ndarray

    Examples
    --------
    >>> counts = np.array([[4.0, 0.0], [0.0, 4.0]])
    >>> np.round(colour_evidence(counts, np.array([1.0, 0.0]), np.array([0.0, 1.0])), 3)
    array([ 6.438, -6.438])
    """
    counts = np.asarray(word_counts, dtype=np.float64)
    fg = fg_weight @ counts + smoothing
    bg = bg_weight @ counts + smoothing
    llr = np.log(fg / fg.sum()) - np.log(bg / bg.sum())
    return counts @ llr
