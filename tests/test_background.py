"""Flattening an uneven background (segcut.background) and its use by split."""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from segcut import SplitConfig, split
from segcut.background import (FIRST_RADIUS, SEPARATION_GAIN, estimate_background,
                               flatten_background, flatten_lightness)
from segcut.pixel_models import TWO_CLUSTER_SEPARATION


def iou(a, b):
    union = np.count_nonzero(a | b)
    return np.count_nonzero(a & b) / union if union else 1.0


def disks(shape, centres, radius):
    yy, xx = np.mgrid[:shape[0], :shape[1]]
    out = np.zeros(shape, dtype=bool)
    for cy, cx in centres:
        out |= (yy - cy) ** 2 + (xx - cx) ** 2 <= radius ** 2
    return out


def shaded_spots(seed=1, n=192, step=24, radius=3):
    """Bright spots on an illumination ramp that spans more than their contrast."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:n, :n]
    centres = [(y, x) for y in range(step // 2, n, step) for x in range(step // 2, n, step)]
    truth = disks((n, n), centres, radius)
    image = 0.7 * (xx + yy) / (2 * n) + 0.25 * truth + rng.normal(0, 0.02, (n, n))
    return image, truth


def nuclei_in_cells(seed=1, n=192):
    """Brightfield-like: dark small nuclei inside larger gray cells of several levels."""
    rng = np.random.default_rng(seed)
    image = np.full((n, n), 0.92)
    nuclei = np.zeros((n, n), dtype=bool)
    centres = [(40, 40), (40, 130), (120, 60), (140, 150), (100, 100), (170, 30)]
    for centre, level in zip(centres, [0.85, 0.72, 0.8, 0.66, 0.76, 0.88]):
        image[disks((n, n), [centre], 26)] = level
        nucleus = disks((n, n), [centre], 5)
        image[nucleus] = 0.35
        nuclei |= nucleus
    return image + rng.normal(0, 0.03, (n, n)), nuclei


# -- the morphology, against scikit-image -------------------------------------------

@pytest.mark.parametrize("objects", ["bright", "dark"])
@pytest.mark.parametrize("radius", [1, 3, 6])
def test_background_equals_scikit_image_opening_and_closing(objects, radius):
    # reference: scikit-image's grey-level opening / closing with the same square;
    # the two differ only in how they pad the edges, so the interior is compared
    from skimage.morphology import closing, opening

    x = np.random.default_rng(radius).normal(size=(40, 50))
    square = np.ones((2 * radius + 1,) * 2, dtype=bool)
    expected = (opening if objects == "bright" else closing)(x, square)
    got = estimate_background(x, radius, objects)
    inner = (slice(2 * radius, -2 * radius),) * 2
    np.testing.assert_allclose(got[inner], expected[inner], rtol=1e-6, atol=1e-6)


def test_opening_removes_what_is_narrower_than_the_square_and_keeps_the_rest():
    # common knowledge: an opening removes bright structures that the structuring
    # element does not fit in, and leaves a constant or a wide plateau unchanged
    x = np.full((30, 30), 5.0)
    x[10:13, 10:13] = 9.0      # 3 px wide: removed by a 5 x 5 square
    x[:, 20:] = 7.0             # 10 px wide plateau: kept
    b = estimate_background(x, 2, "bright")
    assert b[11, 11] == 5.0 and np.all(b[:, 20:] == 7.0)
    d = estimate_background(-x, 2, "dark")   # the closing does the same for dark ones
    np.testing.assert_array_equal(d, -b)


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2 ** 32 - 1), st.sampled_from(["bright", "dark"]),
       st.sampled_from(["flipud", "fliplr", "transpose", "rot90"]))
def test_flattening_commutes_with_flips_and_quarter_turns(seed, objects, move):
    x = np.random.default_rng(seed).normal(size=(23, 31))
    f = {"flipud": np.flipud, "fliplr": np.fliplr, "transpose": np.transpose,
         "rot90": np.rot90}[move]
    np.testing.assert_allclose(flatten_lightness(f(x), 3, objects),
                               f(flatten_lightness(x, 3, objects)), atol=1e-5)


# -- the rule -------------------------------------------------------------------------

def test_rule_flattens_shading_and_split_then_finds_the_spots():
    image, truth = shaded_spots()
    flat = split(image, rng=0)
    assert flat.background["rule"] == "gain" and flat.background["objects"] == "bright"
    assert flat.background["radius"] >= 8 and flat.background["radius"] % FIRST_RADIUS == 0
    assert (flat.background["flattened_separation"]
            >= flat.background["separation"] + SEPARATION_GAIN)
    assert flat.hypothesis == "lightness_threshold"
    assert flat.choice_rule == "flattened_background"
    plain = split(image, SplitConfig(background_radius=0), rng=0)
    assert plain.background["rule"] == "off"
    assert iou(flat.mask, truth) >= 0.95
    assert iou(plain.mask, truth) < 0.5   # the ramp wins without flattening


def test_rule_finds_dark_nuclei_inside_larger_cells():
    image, nuclei = nuclei_in_cells()
    r = split(image, rng=0)
    assert r.background["rule"] == "gain" and r.background["objects"] == "dark"
    assert iou(r.mask, nuclei) >= 0.9
    plain = split(image, SplitConfig(background_radius=0), rng=0)
    assert iou(plain.mask, nuclei) < 0.2   # the cells, not the nuclei


def test_two_cluster_image_is_left_alone():
    rng = np.random.default_rng(3)
    truth = disks((96, 96), [(30, 30), (60, 70)], 8)
    image = 0.1 + 0.6 * truth + rng.normal(0, 0.02, truth.shape)
    features = 100.0 * image[..., None]
    out, decision = flatten_background(features)
    assert decision.rule == "two_cluster" and not decision.flattened
    assert decision.separation >= TWO_CLUSTER_SEPARATION
    assert out is features
    assert iou(split(image, rng=0).mask, truth) >= 0.95


def test_no_gain_on_plain_noise():
    features = np.random.default_rng(0).normal(50, 5, (128, 128, 1))
    out, decision = flatten_background(features)
    assert decision.rule == "no_gain" and out is features


def test_fixed_and_off_radius():
    image, _ = shaded_spots()
    features = 100.0 * image[..., None]
    out, decision = flatten_background(features, radius=10)
    assert decision.rule == "fixed" and decision.radius == 10
    np.testing.assert_allclose(out[..., 0], flatten_lightness(features[..., 0], 10, "bright"))
    out, decision = flatten_background(features, radius=0)
    assert decision.rule == "off" and out is features


def test_volume_is_not_flattened():
    out, decision = flatten_background(np.zeros((4, 8, 8, 1)))
    assert decision.rule == "not_2d"


def test_config_checks_the_radius():
    with pytest.raises(ValueError, match="background_radius"):
        SplitConfig(background_radius=-1)
    with pytest.raises(ValueError, match="background_radius"):
        SplitConfig(background_radius=2.5)


def test_record_names_the_decision():
    image, _ = shaded_spots()
    record = split(image, rng=0).to_record()["background"]
    assert set(record) == {"radius", "objects", "separation", "flattened_separation", "rule"}


def test_large_path_flattens_at_the_same_full_size_radius():
    image, truth = shaded_spots(n=384, step=48, radius=6)
    full = split(image, rng=0)
    large = split(image, SplitConfig(max_graph_pixels=40000), rng=0)
    assert large.graphs[0]["reduction_factor"] == 2
    assert large.background["rule"] == "gain"
    assert large.background["radius"] == full.background["radius"]
    assert iou(full.mask, truth) >= 0.95 and iou(large.mask, truth) >= 0.95


@pytest.mark.parametrize("objects", ["bright", "dark"])
def test_a_linear_ramp_is_its_own_background_up_to_the_frame(objects):
    # common knowledge: an opening (closing) keeps a linear function unchanged; the
    # point-symmetric continuation keeps that true in the last rows and columns too
    yy, xx = np.mgrid[:40, :50]
    ramp = 0.3 * yy - 0.7 * xx
    np.testing.assert_allclose(estimate_background(ramp, 6, objects), ramp, atol=1e-4)
