"""Over-segmentation: label conventions, connectivity, edges respected, 3-D stacks."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage as ndi
from skimage.color import rgb2lab

from segcut.superpixels import default_n_superpixels, oversegment, pixel_grid_labels


def _consecutive(labels):
    return np.array_equal(np.unique(labels), np.arange(labels.max() + 1))


def test_default_count_follows_image_size():
    assert default_n_superpixels(512 * 512) == 1024
    assert default_n_superpixels(10) == 10
    assert default_n_superpixels(100 * 100) == 200
    assert default_n_superpixels(10**9) == 6000
    assert default_n_superpixels(250 * 200) == 447


def test_small_images_use_the_pixel_grid():
    labels = oversegment(rgb2lab(np.random.default_rng(0).random((20, 30, 3))))
    assert np.array_equal(labels, pixel_grid_labels((20, 30)))


def test_slic_labels_are_consecutive_and_connected():
    rng = np.random.default_rng(1)
    image = np.clip(rng.normal(0.5, 0.1, (120, 140, 3)), 0, 1)
    labels = oversegment(rgb2lab(image), n_superpixels=60)
    assert labels.min() == 0 and _consecutive(labels)
    # each SLIC region is one 4-connected piece (skimage enforce_connectivity, documented)
    for region in range(labels.max() + 1):
        _, count = ndi.label(labels == region)
        assert count == 1


def test_superpixels_do_not_cross_a_sharp_edge():
    # common knowledge for SLIC: clusters in CIELAB + xy follow strong colour edges
    image = np.zeros((100, 100, 3))
    image[:, 47:] = (1.0, 0.2, 0.1)
    labels = oversegment(rgb2lab(image), n_superpixels=50, sigma=0.0)
    left = set(np.unique(labels[:, :47]).tolist())
    right = set(np.unique(labels[:, 47:]).tolist())
    assert left.isdisjoint(right)


def test_gray_and_3d_stack():
    rng = np.random.default_rng(2)
    stack = np.zeros((6, 40, 40, 1))
    stack[:, 10:30, 10:30] = 0.8
    stack += rng.normal(0, 0.02, stack.shape)
    labels = oversegment(100.0 * stack, n_superpixels=40, pixel_grid_max_pixels=100)
    assert labels.shape == (6, 40, 40) and _consecutive(labels)
    assert 10 <= labels.max() + 1 <= 200


@pytest.mark.parametrize("shape, n_segments, sigma", [
    ((60, 70, 3), 30, 1.0), ((33, 91, 3), 25, 0.0), ((60, 70, 1), 30, 1.0),
    ((60, 70, 2), 20, 0.0), ((6, 40, 50, 1), 40, 1.0), ((7, 30, 30, 3), 20, 0.0)])
def test_slic_equals_scikit_image(shape, n_segments, sigma):
    # reference: scikit-image's slic (Achanta et al. 2012) on the same features,
    # compactness scaled by the value range as oversegment documents
    from skimage.segmentation import slic

    rng = np.random.default_rng(sum(shape))
    features = rng.random(shape) * 50.0
    features[..., :10, :] += 40.0
    span = float(features.max() - features.min())
    expected = slic(features, n_segments=n_segments, compactness=10.0 / span, sigma=sigma,
                    channel_axis=-1, convert2lab=False, start_label=0,
                    enforce_connectivity=True)
    _, expected = np.unique(expected, return_inverse=True)
    labels = oversegment(features, n_superpixels=n_segments, sigma=sigma,
                         pixel_grid_max_pixels=0)
    assert np.array_equal(labels, expected.reshape(shape[:-1]))


def test_slic_equals_scikit_image_on_a_photograph():
    # reference: scikit-image's slic on scikit-image's sample photograph in CIELAB
    from skimage import data
    from skimage.segmentation import slic

    lab = rgb2lab(data.astronaut()[::2, ::2])
    span = float(lab.max() - lab.min())
    expected = slic(lab, n_segments=400, compactness=10.0 / span, sigma=1.0, channel_axis=-1,
                    convert2lab=False, start_label=0, enforce_connectivity=True)
    _, expected = np.unique(expected, return_inverse=True)
    labels = oversegment(lab, n_superpixels=400)
    assert np.array_equal(labels, expected.reshape(labels.shape))


@pytest.mark.parametrize("shape", [(60, 70, 3), (7, 5, 1), (3, 20, 30, 2), (2, 9, 1)])
@pytest.mark.parametrize("sigma", [0.1, 1.0, 2.3])
def test_gaussian_smoothing_equals_scipy(shape, sigma):
    # reference: scipy.ndimage.gaussian_filter, mirror edges, channels not smoothed
    from segcut.superpixels import gaussian_smooth

    image = np.random.default_rng(len(shape)).normal(50.0, 30.0, shape)
    expected = ndi.gaussian_filter(image, [sigma] * (len(shape) - 1) + [0.0], mode="reflect")
    assert np.array_equal(gaussian_smooth(image, sigma), expected)
