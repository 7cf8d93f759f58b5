"""Over-segmentation: SLIC superpixels, or one vertex per pixel for small images.

Both return a label image of consecutive integers starting at 0, with the spatial
shape of the input: (M, N) for images, (P, M, N) for 3-D stacks.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from ._superpixel_kernels import connect_labels, correlate_symmetric, slic_iterate

__all__ = ["default_n_superpixels", "gaussian_smooth", "oversegment", "pixel_grid_labels",
           "slic_labels"]

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
    The clustering is SLIC as scikit-image's ``slic`` runs it (the same grid of
    starting centres, search windows, ten sweeps and connectivity rule; the
    labels are equal, which the tests check), by the numba kernels of
    :mod:`segcut._superpixel_kernels`. The input is rescaled to [0, 1] before
    clustering; the compactness is divided by the same range, so it keeps its
    meaning in CIELAB units (the labels equal those of ``slic`` on the RGB image
    with ``convert2lab=True`` when the RGB values span [0, 1], without a second
    colour conversion).

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
    features = np.asarray(features, dtype=np.float64)
    spatial = features.shape[:-1]
    n_pixels = int(np.prod(spatial))
    if n_pixels <= pixel_grid_max_pixels:
        return pixel_grid_labels(spatial)
    n = default_n_superpixels(n_pixels) if n_superpixels is None else int(n_superpixels)
    n = min(n, n_pixels)
    image = _scaled_for_slic(features, float(compactness), float(sigma))
    labels = slic_labels(image, n)
    return labels.reshape(spatial)


def _scaled_for_slic(features, compactness, sigma):
    """Features in [0, 1] (one range for all channels), smoothed, divided by the compactness.

    The compactness keeps its meaning in feature units: dividing the rescaled
    features by ``compactness / range`` equals dividing the features by it.
    """
    low, high = float(features.min()), float(features.max())
    scale = high - low if high > low else 1.0
    image = (features - low) / scale
    if sigma > 1e-15:
        image = gaussian_smooth(image, sigma)
    return np.ascontiguousarray(image * (1.0 / (compactness / scale)))


def gaussian_smooth(image, sigma: float) -> np.ndarray:
    """Gaussian smoothing of every spatial axis (not the last, channel axis).

    The kernel is cut at 4 sigma and the edges are mirrored; the values equal
    those of ``scipy.ndimage.gaussian_filter(image, [sigma, ..., sigma, 0],
    mode="reflect")`` (the same weights, added in the same order).

    Examples
    --------
    >>> image = np.zeros((1, 5, 1)); image[0, 2, 0] = 1.0
    >>> np.round(gaussian_smooth(image, 1.0)[0, :, 0], 3)
    array([0.058, 0.242, 0.399, 0.242, 0.058])
    """
    image = np.asarray(image, dtype=np.float64)
    radius = int(4.0 * float(sigma) + 0.5)
    offsets = np.arange(-radius, radius + 1)
    weights = np.exp(-0.5 / (sigma * sigma) * offsets ** 2)
    weights = np.ascontiguousarray((weights / weights.sum())[::-1])
    for axis in range(image.ndim - 1):
        shape = image.shape
        after = int(np.prod(shape[axis + 1:]))
        if after < 8:  # short strides: scipy's line buffers are faster (measured)
            image = ndi.correlate1d(image, weights, axis=axis, mode="reflect")
            continue
        lines = np.ascontiguousarray(image).reshape(int(np.prod(shape[:axis])), -1)
        out = np.empty_like(lines)
        correlate_symmetric(lines, after, weights, out)
        image = out.reshape(shape)
    return image


def slic_labels(image, n_segments: int, *, n_iterations: int = 10,
                min_size_factor: float = 0.5, max_size_factor: float = 3.0) -> np.ndarray:
    """SLIC clustering of a prepared image, then one connected piece per label.

    Parameters
    ----------
    image : (M, N, C) or (P, M, N, C) float ndarray
        Colour channels already divided by the compactness (the spatial term is
        the squared distance over the squared grid step).
    n_segments : int
        Approximate number of superpixels: the centres start on a regular grid
        (:func:`skimage.util.regular_grid`) with colour 0.
    n_iterations : int
        Assignment and update sweeps.
    min_size_factor, max_size_factor : float
        Pieces smaller than ``min_size_factor`` times the mean superpixel size
        join a neighbour; the search of a piece stops at ``max_size_factor``
        times that size.

    Returns
    -------
    labels : (M, N) or (P, M, N) int64 ndarray
        Consecutive labels from 0.

    Examples
    --------
    >>> image = np.zeros((40, 40, 1)); image[:, 20:] = 5.0
    >>> labels = slic_labels(image, 4)
    >>> int(labels.max()) + 1, bool(np.all(labels[:, :20, None] != labels[:, None, 20:]))
    (4, True)
    """
    from skimage.util import regular_grid

    image = np.asarray(image, dtype=np.float64)
    spatial = image.shape[:-1]
    volume = np.ascontiguousarray(image if image.ndim == 4 else image[None])
    shape = volume.shape[:3]
    grid = regular_grid(shape, int(n_segments))
    positions = np.stack([g[grid].ravel() for g in np.mgrid[:shape[0], :shape[1], :shape[2]]],
                         axis=1)
    step = max(float(s.step) if s.step is not None else 1.0 for s in grid)
    n_centres = positions.shape[0]
    steps = np.array([s.step if s.step is not None else 1 for s in regular_grid(shape, n_centres)],
                     dtype=np.float64)
    centres = np.zeros((n_centres, 3 + volume.shape[3]), dtype=np.float64)
    centres[:, :3] = positions
    planes = np.ascontiguousarray(np.moveaxis(volume, -1, 0).reshape(volume.shape[3], -1))
    labels = np.full(planes.shape[1], -1, dtype=np.int64)
    slic_iterate(planes, np.array(shape, dtype=np.int64), centres, steps, 1.0 / (step * step),
                 int(n_iterations), labels)
    labels = labels.reshape(shape)
    size = float(np.prod(shape)) / n_centres
    labels = connect_labels(labels, int(min_size_factor * size), int(max_size_factor * size))
    present = np.bincount(labels.ravel()) > 0
    new_label = np.cumsum(present) - 1
    return new_label[labels].reshape(spatial)
