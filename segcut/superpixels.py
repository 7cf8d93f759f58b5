"""Over-segmentation: SLIC superpixels, or one vertex per pixel for small images.

Both return a label image of consecutive integers starting at 0, with the spatial
shape of the input: (M, N) for images, (P, M, N) for 3-D stacks.
"""

from __future__ import annotations

import numpy as np

__all__ = ["default_n_superpixels", "oversegment", "pixel_grid_labels"]

_MIN_SUPERPIXELS = 100
_MAX_SUPERPIXELS = 6000


def default_n_superpixels(n_pixels: int) -> int:
    """Number of superpixels chosen from the image size.

    Twice the square root of the pixel count (1024 for 512x512, 447 for 200x250):
    larger images get more superpixels, each of them larger too. At least 100, at
    most 6000, and never more than the number of pixels.

    Examples
    --------
    >>> default_n_superpixels(512 * 512)
    1024
    >>> default_n_superpixels(100 * 100)
    200
    >>> default_n_superpixels(50 * 50)
    100
    """
    n = int(round(2.0 * np.sqrt(n_pixels)))
    return int(min(max(n, _MIN_SUPERPIXELS), _MAX_SUPERPIXELS, max(int(n_pixels), 1)))


def pixel_grid_labels(spatial_shape) -> np.ndarray:
    """Every pixel its own region: labels ``0 .. size - 1`` in C order.

    Examples
    --------
    >>> pixel_grid_labels((2, 3))
    array([[0, 1, 2],
           [3, 4, 5]])
    """
    shape = tuple(int(s) for s in spatial_shape)
    return np.arange(int(np.prod(shape)), dtype=np.int64).reshape(shape)


def oversegment(features, *, n_superpixels: int | None = None, compactness: float = 10.0,
                pixel_grid_max_pixels: int = 4096, sigma: float = 1.0) -> np.ndarray:
    """Split an image into superpixels (SLIC), or into pixels when it is small.

    Parameters
    ----------
    features : (M, N, C) or (P, M, N, C) float ndarray
        The image in CIELAB (C = 3) or as lightness ``100 * gray`` (C = 1),
        channels last.
    n_superpixels : int, optional
        Target number of superpixels; by default :func:`default_n_superpixels`.
    compactness : float
        SLIC compactness in CIELAB units (10-20 are usual values).
    pixel_grid_max_pixels : int
        Images with at most this many pixels are not over-segmented: every pixel
        becomes a region.
    sigma : float
        Width of the Gaussian smoothing SLIC applies first (pixels); it keeps pixel
        noise from shattering the superpixels.

    Returns
    -------
    labels : (M, N) or (P, M, N) int64 ndarray
        Consecutive labels from 0; SLIC regions are connected.

    Notes
    -----
    scikit-image's ``slic`` rescales its input to [0, 1] before clustering; the
    compactness is divided by the same range, so it keeps its meaning in CIELAB
    units (the labels equal those of ``slic`` on the RGB image with
    ``convert2lab=True`` when the RGB values span [0, 1], without a second colour
    conversion).

    References
    ----------
    R. Achanta et al., "SLIC superpixels compared to state-of-the-art superpixel
    methods", IEEE TPAMI 34(11), 2012. doi:10.1109/TPAMI.2012.120

    Examples
    --------
    >>> img = np.zeros((4, 4, 1))
    >>> oversegment(img).shape
    (4, 4)
    >>> lab = np.zeros((100, 100, 3)); lab[:, 50:, 0] = 80.0
    >>> labels = oversegment(lab, n_superpixels=20)
    >>> int(labels.min()), bool(np.all(np.isin(labels[:, :50], labels[:, 50:])))
    (0, False)
    """
    from skimage.segmentation import slic

    features = np.asarray(features, dtype=np.float64)
    spatial = features.shape[:-1]
    n_pixels = int(np.prod(spatial))
    if n_pixels <= pixel_grid_max_pixels:
        return pixel_grid_labels(spatial)
    n = default_n_superpixels(n_pixels) if n_superpixels is None else int(n_superpixels)
    n = min(n, n_pixels)
    value_range = float(features.max() - features.min())
    scale = value_range if value_range > 0 else 1.0
    labels = slic(features, n_segments=n, compactness=float(compactness) / scale,
                  channel_axis=-1, convert2lab=False, start_label=0,
                  enforce_connectivity=True, sigma=float(sigma))
    _, labels = np.unique(labels, return_inverse=True)
    return labels.reshape(spatial).astype(np.int64)
