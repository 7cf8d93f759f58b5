"""The two-Gaussian pixel model of the refinement (segcut.pixel_models).

References: textbook facts about two Gaussian classes with one shared variance
(common knowledge): with equal weights the Bayes decision boundary is the midpoint
of the two means, and the class separation is |m1 - m2| / sigma; scikit-image's
Otsu threshold (Otsu 1979), which for two equal, well-separated Gaussian classes
also lands near the midpoint.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from skimage.filters import threshold_otsu

from checks import spots_with_halo
from segcut import split
from segcut.pixel_models import TWO_CLUSTER_SEPARATION, fit_two_gaussians


def _two_level(shape=(120, 120), low=20.0, high=60.0, sigma=4.0, seed=0):
    """A bright disc on a dark field with Gaussian noise (half the pixels each side)."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:shape[0], :shape[1]]
    radius = np.sqrt(shape[0] * shape[1] / (2 * np.pi))
    truth = (yy - shape[0] / 2) ** 2 + (xx - shape[1] / 2) ** 2 <= radius ** 2
    return np.where(truth, high, low) + rng.normal(0.0, sigma, shape), truth


def test_decision_boundary_is_the_midpoint_and_separation_the_textbook_one():
    image, truth = _two_level()
    # a start with superpixel-like errors: the disc shrunk by 3 pixels plus a block of
    # the dark field lumped with it; the fit must move to the two levels
    start = np.roll(truth, 3, axis=0) & np.roll(truth, -3, axis=0)
    start[:16, :16] = True
    fit = fit_two_gaussians(image[..., None], start)
    ratio = fit.log_likelihood_ratio(image[..., None])
    # equal weights and one shared variance: llr = 0 at the midpoint of the means
    # (common knowledge); the half-and-half scene has weights near 1/2
    assert fit.weights[0] == pytest.approx(truth.mean(), abs=0.02)
    # with one shared variance the ratio is linear in the value: the zero between the
    # two pixels that bracket it is exact
    values, llr = image.ravel(), ratio.ravel()
    order = np.argsort(values)
    i = int(np.searchsorted(llr[order], 0.0))
    (v0, v1), (l0, l1) = values[order][i - 1:i + 1], llr[order][i - 1:i + 1]
    boundary = v0 - l0 * (v1 - v0) / (l1 - l0)
    assert boundary == pytest.approx(40.0, abs=0.5)
    # d' = |60 - 20| / 4 = 10 (common knowledge), up to the variance floor (1.0)
    assert fit.separation == pytest.approx(40.0 / np.sqrt(16.0 + 1.0), rel=0.05)
    # and the classes agree with Otsu's threshold (Otsu 1979) on all but a few pixels
    otsu = image > threshold_otsu(image)
    assert np.mean((ratio > 0) != otsu) < 0.002


def test_two_cluster_scene_reaches_the_threshold_and_uniform_noise_does_not():
    image, truth = _two_level()
    assert fit_two_gaussians(image[..., None], truth).separation \
        >= TWO_CLUSTER_SEPARATION
    rng = np.random.default_rng(1)
    flat = rng.uniform(0.0, 100.0, (120, 120, 3))
    half = np.zeros((120, 120), bool)
    half[:, :60] = True
    assert fit_two_gaussians(flat, half).separation < TWO_CLUSTER_SEPARATION


@settings(max_examples=10, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_swapping_the_start_sides_negates_the_ratio(seed):
    rng = np.random.default_rng(seed)
    features = rng.normal(0.0, 5.0, (24, 24, 2))
    features[6:18, 6:18] += 30.0
    start = rng.random((24, 24)) < 0.5
    start[6:18, 6:18] |= rng.random((12, 12)) < 0.6
    one = fit_two_gaussians(features, start)
    other = fit_two_gaussians(features, ~start)
    np.testing.assert_allclose(one.log_likelihood_ratio(features),
                               -other.log_likelihood_ratio(features), atol=1e-8)
    assert one.separation == pytest.approx(other.separation, rel=1e-9)


def test_halo_lumped_by_superpixels_is_removed_on_a_two_cluster_image():
    """Bright small spots with a dim halo on a dark field: the mask keeps the spots only."""
    image, truth = spots_with_halo(192, 14, 4, 8, seed=3)
    result = split(image)
    refine = [g for g in result.graphs if g["name"] == "refine"][0]
    assert refine["pixel_model"] == "colour_words+two_gaussians"
    assert refine["separation"] >= TWO_CLUSTER_SEPARATION
    iou = np.count_nonzero(result.mask & truth) / np.count_nonzero(result.mask | truth)
    assert iou >= 0.85
