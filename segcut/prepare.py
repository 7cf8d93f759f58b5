"""Image preparation: checks, robust intensity normalisation and pixel features."""

from __future__ import annotations

import numpy as np

__all__ = ["prepare_image", "image_features", "block_average"]


#: Percentiles of each channel mapped to 0 and 1 by :func:`prepare_image`.
NORMALISE_PERCENTILES = (0.5, 99.5)


def prepare_image(image, channel_axis):
    """Image -> (values in [0, 1], warnings, has_contrast).

    The values are mapped to [0, 1] by their robust range: the values at the
    percentiles :data:`NORMALISE_PERCENTILES` go to 0 and 1 and values beyond them
    are clipped (the full range is used when those two percentiles are equal; a
    colour image gets one range for its three channels, see :func:`_normalise`). So
    the storage of a scene does not matter: 8-bit, narrow-range 16-bit (a 12-bit
    camera) and float copies give (nearly) the same values. Non-finite values are
    replaced by the channel mean with a warning. A gray image has one channel,
    a colour image three (alpha is dropped).

    Only operations that do not depend on the pixel order (percentiles and sums of
    sorted values, per-pixel arithmetic), so a flipped or rotated image gives the
    correspondingly moved values, bit for bit.

    Examples
    --------
    >>> narrow = np.array([[572, 600], [1400, 1452]], dtype=np.uint16)
    >>> values, warnings, has_contrast = prepare_image(narrow, None)
    >>> values[..., 0].round(3), has_contrast
    (array([[0.   , 0.031],
           [0.942, 1.   ]]), True)
    """
    arr = _channels_last(image, channel_axis)
    warnings = []
    channels = arr.shape[-1]
    if channels in (2, 4):  # drop alpha
        arr = arr[..., :channels - 1]
    x = arr.astype(np.float64)
    if np.issubdtype(arr.dtype, np.floating):
        x = _fill_non_finite(x, warnings)
    has_contrast = bool(np.ptp(x.reshape(-1, x.shape[-1]), axis=0).max() > 0)
    if x.shape[-1] != 3:
        x = x[..., :1]
    return _normalise(x), warnings, has_contrast


def _channels_last(image, channel_axis):
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
    return arr


def _fill_non_finite(x, warnings):
    finite = np.isfinite(x)
    if not finite.any():
        raise ValueError("image has no finite values (all NaN or infinite)")
    if finite.all():
        return x
    n_bad = int(np.count_nonzero(~finite))
    x = x.copy()
    for c in range(x.shape[-1]):
        channel, ok = x[..., c], finite[..., c]
        # summed in sorted order: the same fill for any order of the pixels
        total = float(np.sum(np.sort(channel[ok]), dtype=np.float64))
        fill = total / max(int(np.count_nonzero(ok)), 1)
        channel[~ok] = fill
    warnings.append(f"{n_bad} non-finite value(s) replaced by the channel mean")
    return x


def _normalise(x):
    """Map the robust range (:data:`NORMALISE_PERCENTILES`) of the values to [0, 1].

    A colour image gets one range for its three channels, so hues are kept (a
    range per channel shifted the colours of photographs and cost 0.01 IoU on the
    dev photographs).
    """
    lo, hi = np.percentile(x, NORMALISE_PERCENTILES)
    if not hi > lo:
        lo, hi = float(x.min()), float(x.max())
    if not hi > lo:
        return np.zeros_like(x)
    return np.clip((x - lo) / (hi - lo), 0.0, 1.0)


def image_features(x):
    """Values in [0, 1] -> features: CIELAB for colour, 100 * gray otherwise."""
    if x.shape[-1] == 3:
        from skimage.color import rgb2lab

        feats = rgb2lab(np.clip(x, 0.0, 1.0), channel_axis=-1)
    else:
        feats = 100.0 * x
    return np.ascontiguousarray(feats, dtype=np.float64)


def block_average(source, f):
    """``source`` (M, N[, C]) averaged over f x f blocks (last row and column repeated up
    to a multiple of f), in row chunks: booleans by majority (ties: True), integers
    rounded back to their dtype, floats as float64 means.

    Examples
    --------
    >>> block_average(np.arange(16.0).reshape(4, 4), 2)
    array([[ 2.5,  4.5],
           [10.5, 12.5]])
    >>> block_average(np.eye(3, dtype=bool), 2)     # the last row and column repeated
    array([[ True, False],
           [False,  True]])
    """
    rows, cols = source.shape[:2]
    m, n = -(-rows // f), -(-cols // f)
    out = np.empty((m, n) + source.shape[2:], dtype=source.dtype)
    step = max(1, (1 << 22) // max(cols * f, 1))
    for i0 in range(0, m, step):
        i1 = min(m, i0 + step)
        block = source[i0 * f:i1 * f].astype(np.float64)
        pad = [(0, (i1 - i0) * f - block.shape[0]), (0, n * f - cols)]
        block = np.pad(block, pad + [(0, 0)] * (block.ndim - 2), mode="edge")
        total = np.zeros((i1 - i0, n) + block.shape[2:])
        for i in range(f):  # f**2 strided sums: faster than a mean over reshaped blocks
            for j in range(f):
                total += block[i::f, j::f]
        mean = total / (f * f)
        if source.dtype == np.bool_:
            out[i0:i1] = mean >= 0.5
        elif np.issubdtype(source.dtype, np.integer):
            out[i0:i1] = np.rint(mean)
        else:
            out[i0:i1] = mean
    return out
