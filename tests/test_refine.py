"""Pixel refinement, intensity normalisation, start hypotheses and the box rule.

References: scikit-image's Otsu threshold (Otsu 1979) where the right answer is a
threshold; networkx's minimum cut on the refinement graph (max-flow min-cut
theorem, common knowledge); brute force on tiny graphs.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import ndimage as ndi
from skimage.filters import threshold_otsu

from segcut import SplitConfig, split
from segcut.appearance import CHOICE_RULES, HYPOTHESES
from segcut.graph import cut_value
from segcut.prepare import prepare_image
from segcut.refine import refine_boundary
from segcut.scoring import compare_masks


def _iou(a, b):
    return compare_masks(a, b)["iou"]


def _blobs(shape=(160, 160), n=14, radius=5, seed=0, bright=True, noise=0.04):
    """Many small discs, several touching the frame, on a flat field."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:shape[0], :shape[1]]
    truth = np.zeros(shape, dtype=bool)
    centres = list(rng.integers(0, shape[0], (n - 3, 2))) + [(0, 40), (shape[0] - 1, 90),
                                                              (70, 0)]
    for r, c in centres:
        truth |= (yy - r) ** 2 + (xx - c) ** 2 <= radius ** 2
    image = np.where(truth, 0.8, 0.2) if bright else np.where(truth, 0.25, 0.85)
    return np.clip(image + rng.normal(0, noise, shape), 0, 1), truth


def test_noise_free_two_level_image_is_split_exactly_as_otsu():
    """A two-level image: the right answer is a threshold (scikit-image's Otsu, 1979)."""
    image, truth = _blobs(noise=0.0)
    expected = image > threshold_otsu(image)
    result = split(image, rng=0)
    assert np.array_equal(result.mask, expected)
    assert np.array_equal(result.mask, truth)


@pytest.mark.parametrize("bright", [True, False])
def test_many_small_objects_touching_the_frame(bright):
    """Bright nuclei on a dark field and dark nuclei on a bright field: the objects are the
    foreground, both ways, with boundaries finer than a superpixel."""
    image, truth = _blobs(bright=bright, seed=3)
    result = split(image, rng=0)
    assert _iou(result.mask, truth) >= 0.9
    assert result.hypothesis in HYPOTHESES and result.choice_rule in CHOICE_RULES
    coarse = split(image, SplitConfig(refine=False), rng=0)
    assert _iou(result.mask, truth) >= _iou(coarse.mask, truth)


def test_one_object_in_the_middle():
    rng = np.random.default_rng(1)
    image = np.full((120, 150, 3), (0.3, 0.5, 0.3)) + rng.normal(0, 0.03, (120, 150, 3))
    truth = np.zeros((120, 150), dtype=bool)
    truth[35:90, 45:110] = True
    image[truth] = (0.8, 0.3, 0.2)
    result = split(np.clip(image, 0, 1), rng=0)
    assert _iou(result.mask, truth) >= 0.97


def test_record_names_every_graph_solved():
    image, _ = _blobs(seed=5)
    record = split(image, rng=0).to_record()
    names = [g["name"] for g in record["graphs"]]
    assert names == ["superpixels", "refine"]
    for g in record["graphs"]:
        assert g["upper_bound"] >= g["value"] - 1e-9 * abs(g["value"])
        assert g["n_vertices"] > 0
    assert record["graphs"][0]["value"] == record["value"]
    assert 0.0 <= record["refine_changed_fraction"] <= 1.0


def test_refinement_recovers_a_boundary_finer_than_the_superpixels():
    """A noisy rectangle whose coarse mask is too small: the certified pixel cut finds it
    (the 'flow' method itself is checked against networkx in test_maxcut_flow.py)."""
    rng = np.random.default_rng(4)
    truth = np.zeros((14, 14), bool)
    truth[4:10, 3:11] = True
    image = truth + rng.normal(0, 0.2, truth.shape)
    coarse = np.zeros((14, 14), bool)
    coarse[5:9, 5:9] = True
    words = (image > 0.5).astype(np.int64)
    result = refine_boundary(100 * image[..., None], coarse, words, 2, band=3)
    assert result.upper_bound - result.value <= 1e-6 * abs(result.value)
    assert _iou(result.mask, truth) >= 0.9 > _iou(coarse, truth)
    assert result.changed == int(np.count_nonzero(result.mask != coarse))


def test_refinement_keeps_fixed_pixels():
    image, truth = _blobs(seed=6)
    words = (image > 0.5).astype(np.int64)
    coarse = ndi.binary_erosion(truth, iterations=2)
    free = np.ones(truth.shape, bool)
    free[:, :80] = False
    result = refine_boundary(100 * image[..., None], coarse, words, 2, band=3, free=free)
    assert np.array_equal(result.mask[:, :80], coarse[:, :80])
    assert _iou(result.mask[:, 80:], truth[:, 80:]) > _iou(coarse[:, 80:], truth[:, 80:])


def test_the_same_scene_stored_three_ways_gives_the_same_mask():
    """8-bit, narrow-range 16-bit (a 12-bit camera using 572-1452) and float copies."""
    image, truth = _blobs(seed=7, noise=0.05)
    as_float = image
    as_uint8 = np.round(image * 255).astype(np.uint8)
    as_uint16 = np.round(572 + image * (1452 - 572)).astype(np.uint16)
    masks = [split(x, rng=0).mask for x in (as_float, as_uint8, as_uint16)]
    for mask in masks[1:]:
        assert _iou(mask, masks[0]) >= 0.99
    assert _iou(masks[0], truth) >= 0.9


@settings(max_examples=10, deadline=None)
@given(scale=st.floats(0.01, 1000.0), offset=st.floats(-500.0, 500.0))
def test_storage_range_does_not_change_the_values(scale, offset):
    """An affine change of the stored range leaves the normalised values (nearly) alone."""
    image, _ = _blobs(shape=(40, 40), n=4, seed=8)
    base, _, _ = prepare_image(image, None)
    moved, _, _ = prepare_image(image * scale + offset, None)
    assert np.allclose(base, moved, atol=1e-6)


@settings(max_examples=6, deadline=None)
@given(seed=st.integers(0, 1000))
def test_channel_axis_does_not_change_the_mask(seed):
    rng = np.random.default_rng(seed)
    image = np.clip(np.kron(rng.random((4, 4, 3)), np.ones((12, 12, 1))), 0, 1)
    last = split(image, rng=0).mask
    first = split(np.moveaxis(image, -1, 0), channel_axis=0, rng=0).mask
    assert np.array_equal(first, last)


@settings(max_examples=8, deadline=None)
@given(x0=st.integers(0, 40), y0=st.integers(0, 40), w=st.integers(8, 60),
       h=st.integers(8, 60), seed=st.integers(0, 100))
def test_a_box_never_puts_foreground_outside_it(x0, y0, w, h, seed):
    rng = np.random.default_rng(seed)
    image = np.clip(np.kron(rng.random((6, 6, 3)), np.ones((12, 12, 1))), 0, 1)
    box = (x0, y0, min(x0 + w, 72), min(y0 + h, 72))
    mask = split(image, SplitConfig(box=box), rng=0).mask
    outside = np.ones(mask.shape, bool)
    outside[box[1]:box[3], box[0]:box[2]] = False
    assert not mask[outside].any()


def test_box_outside_is_background_and_object_is_found():
    rng = np.random.default_rng(2)
    image = np.full((100, 120, 3), 0.5) + rng.normal(0, 0.03, (100, 120, 3))
    truth = np.zeros((100, 120), bool)
    truth[30:70, 40:90] = True
    image[truth] = (0.9, 0.2, 0.2)
    image[5:20, 5:20] = (0.9, 0.2, 0.2)  # same colour outside the box: background
    result = split(np.clip(image, 0, 1), SplitConfig(box=(38, 28, 92, 72)), rng=0)
    assert _iou(result.mask, truth) >= 0.95
    assert not result.mask[5:20, 5:20].any()
    assert cut_value(result.image_graph.graph, result.image_graph.start) <= result.upper_bound


def test_every_recorded_hypothesis_is_documented():
    image, _ = _blobs(seed=9)
    for config in (SplitConfig(), SplitConfig(colour_model=False), SplitConfig(prior=("border",))):
        assert split(image, config, rng=0).hypothesis in HYPOTHESES
    assert split(np.zeros((20, 20)), rng=0).hypothesis in HYPOTHESES
