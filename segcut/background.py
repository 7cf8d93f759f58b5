"""Flattening an uneven background before the split.

Many microscopy images hold three levels, not two: the objects an analyst counts
(small nuclei), a larger structure around them (the cytoplasm of big cells, an
embryo, the bright patch of uneven illumination) and the empty field. A two-region
split of such an image follows the larger structure. Subtracting a morphological
estimate of the background at a scale larger than the small objects (a *top-hat*:
the image minus its grey-level opening for bright objects, its closing minus the
image for dark ones) leaves the small objects on a flat field.

Whether to flatten is decided per image from the separation ``d'`` of the
two-Gaussian model (:func:`segcut.pixel_models.fit_two_gaussians`, started from an
Otsu threshold of the lightness): an image is flattened when, as given, it is not a
two-cluster image (``d' <`` :data:`~segcut.pixel_models.TWO_CLUSTER_SEPARATION`) and
flattening at two neighbouring scales of the ladder 4, 8, 16, ... pixels (up to a
quarter of the shorter side) both make it one (``d' >=`` that threshold) and raise
``d'`` by at least :data:`SEPARATION_GAIN`. Two scales, not one, so that a spike of
``d'`` at one scale (flattening that keeps only object rims or texture) does not
count; the largest such scale is used, the one that changes the image least. The
decision is measured on an area-averaged copy of about 60 000 pixels (radii divided
by its reduction factor); the flattening itself is done at full size. Measured on the dev
microscopy and photograph sets (DEVELOPERS.md, "Quality decisions"): the rule
flattens the brightfield images whose reference marks the small nuclei inside
large cells and a fluorescence image with strong shading, and none of the 60
photographs.

The square structuring element (half-width ``radius``) keeps the flattening
equivariant under flips and quarter turns, and its running minimum and maximum cost
the same at every radius. The second pass of the opening (closing) sees the first one
continued point-symmetrically past the image edges, so a linear ramp of
illumination is removed right up to the frame.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .pixel_models import TWO_CLUSTER_SEPARATION, fit_two_gaussians
from .prepare import block_average

__all__ = ["SEPARATION_GAIN", "FIRST_RADIUS", "BackgroundDecision", "estimate_background",
           "flatten_lightness", "flatten_background"]

#: Rise of the separation ``d'`` that flattening must bring (at two neighbouring scales).
SEPARATION_GAIN = 4.0
#: First half-width (pixels) of the ladder of flattening scales; each next one doubles.
FIRST_RADIUS = 4


@dataclass(frozen=True)
class BackgroundDecision:
    """What :func:`flatten_background` decided for one image.

    Attributes
    ----------
    radius : int
        Half-width (pixels) of the square the background was estimated with; 0 when
        the image was not flattened.
    objects : str
        ``"bright"`` (objects brighter than their background: the opening is
        subtracted) or ``"dark"``.
    separation : float
        ``d'`` of the image as given (nan when not measured).
    flattened_separation : float
        ``d'`` after flattening at ``radius`` (nan when not flattened).
    rule : str
        ``"gain"`` (flattened by the rule), ``"no_gain"``, ``"two_cluster"`` (already a
        two-cluster image), ``"fixed"`` (the configured radius), ``"off"``
        (``background_radius = 0``) or ``"not_2d"``.
    """

    radius: int
    objects: str
    separation: float
    flattened_separation: float
    rule: str

    @property
    def flattened(self) -> bool:
        return self.radius > 0

    def to_record(self) -> dict:
        """JSON-serialisable form (nan as None)."""
        def number(x):
            return None if not np.isfinite(x) else round(float(x), 6)
        return {"radius": int(self.radius), "objects": self.objects,
                "separation": number(self.separation),
                "flattened_separation": number(self.flattened_separation), "rule": self.rule}


def estimate_background(lightness, radius: int, objects: str = "bright") -> np.ndarray:
    """Grey-level opening (bright objects) or closing (dark) with a square, half-width ``radius``.

    Structures narrower than the square that stand out from their surroundings
    (brighter for ``"bright"``) are removed; what is left is the background they sit on.

    Examples
    --------
    >>> x = np.zeros((9, 12)); x[4, 2] = 5.0; x[:, 5:10] = 2.0  # a spot, a 5-wide band
    >>> b = estimate_background(x, 2)                           # a 5 x 5 square
    >>> float(b[4, 2]), float(b[4, 7])                          # spot gone, band kept
    (0.0, 2.0)
    """
    from scipy import ndimage

    r = int(radius)
    size = (2 * r + 1,) * 2
    x = np.asarray(lightness, dtype=np.float32)
    first, second = ((ndimage.grey_erosion, ndimage.grey_dilation) if objects == "bright"
                     else (ndimage.grey_dilation, ndimage.grey_erosion))
    inner = first(x, size=size, mode="nearest")
    if r == 0:
        return inner
    # the second pass sees the first one continued point-symmetrically past the edges:
    # the first pass has removed the objects, so this continues the background's trend
    # and a ramp of illumination is followed up to the frame (a clamped edge would hold
    # the last r pixels at one level and leave the ramp there)
    padded = np.pad(inner, r, mode="reflect", reflect_type="odd")
    return np.ascontiguousarray(second(padded, size=size, mode="nearest")[r:-r, r:-r])


def flatten_lightness(lightness, radius: int, objects: str = "bright") -> np.ndarray:
    """The lightness minus its background (:func:`estimate_background`) plus that one's median.

    The objects keep their contrast to their immediate surroundings and the
    background becomes one level (its median), so the result stays on the scale of
    the input.

    Examples
    --------
    >>> x = np.tile(np.linspace(10.0, 50.0, 20), (20, 1)); x[9:11, 9:11] += 30.0
    >>> flat = flatten_lightness(x, 3)
    >>> round(float(np.ptp(flat[:4])), 4)                      # the ramp is gone
    0.0
    >>> round(float(flat[9, 9] - flat[0, 9]), 4)               # the spot is kept
    30.0
    """
    x = np.asarray(lightness, dtype=np.float64)
    background = estimate_background(x, radius, objects)
    return x - background + float(np.median(background))


#: The decision is measured on an area-averaged copy of about this many pixels ...
_SAMPLE = 60000
#: ... of which about this many (an even stride) enter each measure of ``d'``.
_FIT_SAMPLE = 15000


def _otsu_threshold(values):
    from skimage.filters import threshold_otsu

    return float(threshold_otsu(values)) if np.ptp(values) > 0 else None


def _separation(sample, lightness):
    """``d'`` of the two-Gaussian fit to ``sample`` (features) with ``lightness`` in channel 0."""
    t = _otsu_threshold(lightness)
    if t is None:
        return 0.0
    mask = lightness > t
    if mask.all() or not mask.any():
        return 0.0
    features = sample.copy()
    features[:, 0] = lightness
    return float(fit_two_gaussians(features, mask).separation)


def _objects_side(lightness, threshold):
    """"bright" when the bright side of the threshold touches the frame no more than the dark."""
    if threshold is None:
        return "bright"
    frame = np.concatenate([lightness[0], lightness[-1], lightness[1:-1, 0], lightness[1:-1, -1]])
    bright_on_frame = np.count_nonzero(frame > threshold)
    return "bright" if bright_on_frame <= frame.size - bright_on_frame else "dark"


def _with_lightness(features, lightness):
    out = np.array(features, dtype=np.float64, copy=True)
    out[..., 0] = lightness
    return out


def flatten_background(features, radius: int | None = None):
    """Flatten an uneven background when it hides the objects (module docstring).

    Parameters
    ----------
    features : (rows, cols, C) float ndarray
        Pixel features; channel 0 is the lightness (CIELAB L, or 100 x gray).
    radius : int or None
        None: decide by the rule (module docstring); 0: never flatten; a positive
        integer: flatten at this half-width.

    Returns
    -------
    features : ndarray
        The input itself when not flattened, else a copy whose lightness is
        flattened (:func:`flatten_lightness`).
    decision : BackgroundDecision

    Examples
    --------
    Small bright spots on a strong ramp of illumination:

    >>> rng = np.random.default_rng(0)
    >>> x = np.tile(np.linspace(0.0, 60.0, 96), (96, 1)) + rng.normal(0, 1, (96, 96))
    >>> x[8::16, 8::16] += 40.0; x[9::16, 8::16] += 40.0
    >>> x[8::16, 9::16] += 40.0; x[9::16, 9::16] += 40.0
    >>> flat, decision = flatten_background(x[..., None])
    >>> decision.rule, decision.objects, decision.radius > 0
    ('gain', 'bright', True)
    """
    features = np.asarray(features, dtype=np.float64)
    nan = float("nan")
    if features.ndim != 3:
        return features, BackgroundDecision(0, "bright", nan, nan, "not_2d")
    if radius == 0:
        return features, BackgroundDecision(0, "bright", nan, nan, "off")
    lightness = features[..., 0]
    # the decision is measured on an area-averaged copy of about _SAMPLE pixels
    # (radii divided by its reduction factor); the flattening itself is at full size
    factor = max(1, int(np.ceil(np.sqrt(lightness.size / _SAMPLE))))
    small = block_average(features, factor) if factor > 1 else features
    small_lightness = small[..., 0]
    # d' from an even stride of about _FIT_SAMPLE of its pixels
    stride = max(1, -(-small_lightness.size // _FIT_SAMPLE))
    sample = small.reshape(-1, small.shape[-1])[::stride]
    objects = _objects_side(small_lightness, _otsu_threshold(sample[:, 0]))
    separation = _separation(sample, sample[:, 0])

    def flattened_separation(r):
        r_small = max(1, int(round(r / factor)))
        background = estimate_background(small_lightness, r_small, objects).ravel()[::stride]
        return _separation(sample, sample[:, 0] - background + float(np.median(background)))

    if radius is None:
        if separation >= TWO_CLUSTER_SEPARATION:
            return features, BackgroundDecision(0, objects, separation, nan, "two_cluster")
        chosen = None
        previous = -np.inf
        needed = max(separation + SEPARATION_GAIN, TWO_CLUSTER_SEPARATION)
        r = FIRST_RADIUS
        while r <= min(lightness.shape) // 4:
            d = flattened_separation(r)
            if min(d, previous) >= needed:
                chosen = (r, d)
            previous = d
            r *= 2
        if chosen is None:
            return features, BackgroundDecision(0, objects, separation, nan, "no_gain")
        radius, flat_separation, rule = chosen[0], chosen[1], "gain"
    else:
        radius, flat_separation, rule = int(radius), flattened_separation(int(radius)), "fixed"
    out = _with_lightness(features, flatten_lightness(lightness, radius, objects))
    return out, BackgroundDecision(radius, objects, separation, flat_separation, rule)
