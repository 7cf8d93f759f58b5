"""Priors, seeds and colour-model evidence."""

from __future__ import annotations

import numpy as np
import pytest

from segcut.config import SplitConfig
from segcut.priors import (
    available_priors,
    box_map,
    colour_evidence,
    get_prior,
    prior_map,
    register_prior,
    seeded_regions,
)


def test_border_and_center_maps():
    cfg = SplitConfig(border_width=0.1, center_fraction=0.5)
    border = get_prior("border").pixel_map((40, 60), cfg)
    assert np.all(border[:4] == -1) and np.all(border[:, -4:] == -1)
    assert np.all(border[4:-4, 4:-4] == 0)
    center = get_prior("center").pixel_map((40, 60), cfg)
    assert center.sum() == 20 * 30 and center[20, 30] == 1


def test_combined_map_and_box():
    cfg = SplitConfig(prior=("border", "center"), box=(10, 5, 30, 25))
    total, inside = prior_map((40, 50), cfg)
    assert total.min() == -1 and total.max() == 1
    assert inside.sum() == 20 * 20
    assert prior_map((40, 50), SplitConfig()) == (None, None)


def test_box_outside_image():
    with pytest.raises(ValueError, match="does not overlap the image"):
        box_map((10, 10), (20, 20, 30, 30))


def test_stack_prior_applies_to_every_slice():
    cfg = SplitConfig(center_fraction=0.5)
    m = get_prior("center").pixel_map((3, 8, 8), cfg)
    assert all(np.array_equal(m[0], m[k]) for k in range(3))


def test_seeded_regions_conflict_warns():
    labels = np.array([[0, 0, 1, 1]])
    seeds = np.array([[1, 2, 2, 0]])
    merged, warnings = seeded_regions(labels, seeds)
    assert merged.tolist() == [1, -1]
    assert "both foreground and background" in warnings[0]


def test_colour_evidence_is_the_log_likelihood_ratio():
    # naive-Bayes log-likelihood ratio with add-one smoothing (textbook formula)
    counts = np.array([[3.0, 1.0, 0.0], [0.0, 2.0, 2.0]])
    fg = np.array([1.0, 0.0])
    bg = np.array([0.0, 1.0])
    p_fg = (counts[0] + 1) / (counts[0] + 1).sum()
    p_bg = (counts[1] + 1) / (counts[1] + 1).sum()
    expected = counts @ np.log(p_fg / p_bg)
    assert np.allclose(colour_evidence(counts, fg, bg), expected)


def test_registry():
    assert {"border", "center"} <= set(available_priors())
    with pytest.raises(ValueError, match="unknown prior 'left'"):
        get_prior("left")
    register_prior("test_everything_fg", lambda shape, cfg: np.ones(shape), replace_existing=True)
    assert get_prior("test_everything_fg").pixel_map((2, 2), SplitConfig()).sum() == 4


def test_conflicting_seeds_in_one_region_are_reported_with_the_pixels_overruled():
    # counted by hand: region 0 holds 3 foreground and 1 background seed pixels, region 1
    # 1 foreground and 2 background; region 2 is unseeded
    from segcut.priors import seeded_regions

    labels = np.array([[0, 0, 0, 0, 1, 1, 1, 2]])
    seeds = np.array([[1, 1, 1, 2, 1, 2, 2, 0]])
    kinds, warnings = seeded_regions(labels, seeds)
    assert kinds.tolist() == [1, -1, 0]
    assert len(warnings) == 1
    assert "2 superpixel(s) hold both" in warnings[0] and "overruling 2 seed pixel(s)" in warnings[0]


@pytest.mark.parametrize("max_graph_pixels", [None, 4000])
def test_a_prior_that_is_not_symmetric_lands_where_its_author_put_it(max_graph_pixels):
    """A prior saying "left third background, right third foreground" on a noise image:
    whatever the processing orientation the image gets (canonical transform), the
    mask follows the prior in the caller's frame, in every flip and turn of the image;
    also on the large-image path (a reduced copy, forced by a small max_graph_pixels)."""
    from segcut import SplitConfig, split
    from segcut import priors as priors_module

    def left_right(shape, config):
        out = np.zeros(shape)
        cols = shape[-1]
        out[..., : cols // 3] = -1.0
        out[..., cols - cols // 3:] = 1.0
        return out

    rng = np.random.default_rng(5)
    noise = rng.random((60, 72))
    transforms = set()
    extra = {} if max_graph_pixels is None else {"max_graph_pixels": max_graph_pixels}
    priors_module.register_prior("left_right", left_right)
    try:
        for image in (noise, noise[:, ::-1], noise[::-1], noise.T, np.rot90(noise)):
            result = split(np.ascontiguousarray(image),
                           SplitConfig(prior=("left_right",), prior_strength=4.0, **extra), rng=0)
            if max_graph_pixels is not None:
                assert "reduction_factor" in result.graphs[0]
            transforms.add(result.canonical_transform)
            cols = image.shape[1]
            assert result.mask[:, : cols // 3].mean() < 0.1, result.canonical_transform
            assert result.mask[:, cols - cols // 3:].mean() > 0.9, result.canonical_transform
    finally:
        priors_module._PRIORS.pop("left_right", None)
    assert len(transforms) > 1  # the check ran through orientations other than identity


def test_prior_model_strength_weighs_the_colour_models_only_when_a_prior_orients_the_graph():
    """``prior_model_strength`` scales the colour-model edges of a graph with a prior; a
    split with no prior does not use it (same mask, value and bound)."""
    from segcut import SplitConfig, split

    rng = np.random.default_rng(7)
    image = rng.random((64, 64, 3)) * 0.3
    image[16:48, 20:52] += 0.5
    plain = [split(image, SplitConfig(prior_model_strength=s), rng=0) for s in (0.1, 2.0)]
    assert np.array_equal(plain[0].mask, plain[1].mask)
    assert plain[0].value == plain[1].value and plain[0].upper_bound == plain[1].upper_bound
    with_prior = [split(image, SplitConfig(prior=("border",), prior_model_strength=s), rng=0)
                  for s in (0.1, 2.0)]
    assert with_prior[0].upper_bound != pytest.approx(with_prior[1].upper_bound, rel=1e-3)
    with pytest.raises(ValueError, match="prior_model_strength"):
        SplitConfig(prior_model_strength=-1.0)
