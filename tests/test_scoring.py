"""Agreement measures, bootstrap intervals, rankings and the cut score of masks.

References beside each check: hand arithmetic written in the test, scipy and
scikit-image implementations of the same quantity, and textbook identities.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.spatial.distance import cdist, dice, directed_hausdorff, jaccard

from segcut.scoring import (
    METRICS,
    bootstrap_ci,
    compare_masks,
    mask_boundary,
    paired_difference,
    summarize_comparison,
)


def _bars(top: int, bottom: int, shape=(10, 10)) -> np.ndarray:
    """Rows top..bottom (inclusive) across the full width."""
    m = np.zeros(shape, dtype=bool)
    m[top:bottom + 1] = True
    return m


def _random_blobs(seed: int, shape=(24, 30)) -> np.ndarray:
    """A mask of a few random rectangles and one disc."""
    rng = np.random.default_rng(seed)
    m = np.zeros(shape, dtype=bool)
    for _ in range(3):
        r0, c0 = rng.integers(0, shape[0] - 4), rng.integers(0, shape[1] - 4)
        m[r0:r0 + rng.integers(2, 10), c0:c0 + rng.integers(2, 12)] = True
    rr, cc = np.ogrid[:shape[0], :shape[1]]
    cy, cx, rad = rng.integers(4, shape[0] - 4), rng.integers(4, shape[1] - 4), rng.integers(2, 6)
    m |= (rr - cy) ** 2 + (cc - cx) ** 2 <= rad**2
    return m


masks_2d = arrays(np.bool_, st.tuples(st.integers(1, 9), st.integers(1, 9)))


# --- hand-worked cases ---------------------------------------------------------------

def test_shifted_square_overlap_by_hand():
    # ref: 4x4 square (16 px); pred: the same square shifted right by one column.
    ref = np.zeros((6, 6), dtype=bool)
    ref[1:5, 1:5] = True
    pred = np.zeros((6, 6), dtype=bool)
    pred[1:5, 2:6] = True
    m = compare_masks(pred, ref)
    # TP = 4 rows x 3 columns = 12, FP = 4 (column 5), FN = 4 (column 1)
    assert (m["true_positive"], m["false_positive"], m["false_negative"]) == (12, 4, 4)
    assert m["iou"] == pytest.approx(12 / 20)  # 12 / (12 + 4 + 4)
    assert m["dice"] == pytest.approx(24 / 32)  # 2*12 / (2*12 + 4 + 4)
    assert m["precision"] == pytest.approx(12 / 16)
    assert m["recall"] == pytest.approx(12 / 16)
    # every boundary pixel of one square is at most 1 px from the other's boundary
    assert m["hausdorff"] == 1.0
    assert m["boundary_f"] == 1.0


def test_bars_shifted_by_three_rows_by_hand():
    # Full-width bars in a 10x10 image; the frame is not a boundary, so a bar's
    # boundary is its top and bottom row (10 px each).
    ref = _bars(2, 5)   # boundary rows 2 and 5
    pred = _bars(5, 8)  # boundary rows 5 and 8
    m = compare_masks(pred, ref, tolerance=2.0)
    # overlap: row 5 only = 10 px; union: rows 2..8 = 70 px
    assert m["iou"] == pytest.approx(10 / 70)
    assert m["dice"] == pytest.approx(20 / 80)
    # pred row 5 -> ref row 5: 0; pred row 8 -> ref row 5: 3 (and symmetric for ref)
    assert m["hausdorff"] == 3.0
    assert m["assd"] == pytest.approx((10 * 0 + 10 * 3 + 10 * 3 + 10 * 0) / 40)
    # within 2 px: half of each boundary (the shared row 5)
    assert m["boundary_precision"] == 0.5
    assert m["boundary_recall"] == 0.5
    assert m["boundary_f"] == 0.5
    # with a 3 px tolerance every boundary pixel is matched
    assert compare_masks(pred, ref, tolerance=3.0)["boundary_f"] == 1.0


def test_bars_shifted_by_one_row_tolerance_is_inclusive_by_hand():
    ref = _bars(2, 5)
    pred = _bars(3, 6)  # every boundary pixel exactly 1 px from the other boundary
    assert compare_masks(pred, ref, tolerance=1.0)["boundary_f"] == 1.0
    assert compare_masks(pred, ref, tolerance=0.5)["boundary_f"] == 0.0
    m = compare_masks(pred, ref, tolerance=0.0)
    assert (m["hausdorff"], m["assd"]) == (1.0, 1.0)


def test_nested_squares_precision_recall_by_hand():
    # pred: 2x2 square inside ref's 4x4 square: all of pred is right, a quarter of ref found.
    ref = np.zeros((6, 6), dtype=bool)
    ref[1:5, 1:5] = True
    pred = np.zeros((6, 6), dtype=bool)
    pred[2:4, 2:4] = True
    m = compare_masks(pred, ref)
    assert m["precision"] == 1.0       # 4 / 4
    assert m["recall"] == 4 / 16       # 4 / 16
    assert m["iou"] == 4 / 16          # 4 / (4 + 0 + 12)
    assert m["dice"] == pytest.approx(8 / 20)  # 2*4 / (2*4 + 0 + 12)
    # inner 2x2 block is all boundary; each of its pixels is 1 px from ref's ring,
    # ref's corner pixels are sqrt(2) from the nearest inner pixel
    assert m["hausdorff"] == pytest.approx(math.sqrt(2))


# --- empty-set conventions ------------------------------------------------------------

def test_both_empty_is_perfect_agreement():
    z = np.zeros((5, 5), dtype=np.uint8)
    m = compare_masks(z, z)
    assert all(m[k] == 1.0 for k in ("iou", "dice", "precision", "recall", "boundary_f"))
    assert (m["hausdorff"], m["assd"], m["distances_finite"]) == (0.0, 0.0, True)
    assert m["pred_empty"] and m["ref_empty"]


def test_empty_prediction_scores_zero_and_infinite_distance():
    ref = _bars(2, 5)
    m = compare_masks(np.zeros_like(ref), ref)
    assert all(m[k] == 0.0 for k in ("iou", "dice", "precision", "recall", "boundary_f"))
    assert math.isinf(m["hausdorff"]) and math.isinf(m["assd"])
    assert m["distances_finite"] is False
    assert m["pred_empty"] and not m["ref_empty"]


def test_full_against_empty_is_not_distance_zero():
    # Neither mask has a boundary (the frame is not one), yet they disagree everywhere.
    full = np.ones((4, 4), dtype=bool)
    m = compare_masks(full, ~full)
    assert m["iou"] == 0.0 and math.isinf(m["hausdorff"]) and not m["distances_finite"]
    assert compare_masks(full, full)["hausdorff"] == 0.0


def test_non_binary_values_count_as_foreground():
    ref = np.array([[0, 255], [255, 0]], dtype=np.uint8)
    pred = np.array([[0.0, 0.3], [7.0, 0.0]])
    assert compare_masks(pred, ref)["iou"] == 1.0


# --- bad calls ------------------------------------------------------------------------

def test_shape_mismatch_names_both_shapes():
    with pytest.raises(ValueError, match=r"pred shape \(3, 4\) does not match ref shape \(4, 3\)"):
        compare_masks(np.zeros((3, 4)), np.zeros((4, 3)))


def test_negative_tolerance_refused():
    with pytest.raises(ValueError, match="tolerance must be a finite number"):
        compare_masks(np.zeros((3, 3)), np.zeros((3, 3)), tolerance=-1)


def test_nan_mask_refused():
    with pytest.raises(ValueError, match="pred contains NaN"):
        compare_masks(np.full((2, 2), np.nan), np.zeros((2, 2)))


# --- reference implementations ----------------------------------------------------------

@pytest.mark.parametrize("seed", range(6))
def test_against_scipy_and_skimage(seed):
    from skimage.metrics import hausdorff_distance
    from skimage.segmentation import find_boundaries

    pred = _random_blobs(2 * seed)
    ref = _random_blobs(2 * seed + 1)
    m = compare_masks(pred, ref, tolerance=2.0)
    # pixel overlap: scipy's Jaccard and Dice dissimilarities are 1 - IoU and 1 - Dice
    assert m["iou"] == pytest.approx(1.0 - jaccard(pred.ravel(), ref.ravel()), abs=1e-12)
    assert m["dice"] == pytest.approx(1.0 - dice(pred.ravel(), ref.ravel()), abs=1e-12)
    # boundaries: scikit-image's inner boundary with 4-connectivity
    bp = find_boundaries(pred, mode="inner", connectivity=1)
    br = find_boundaries(ref, mode="inner", connectivity=1)
    np.testing.assert_array_equal(mask_boundary(pred), bp)
    # Hausdorff: scipy's directed Hausdorff both ways, and scikit-image's symmetric one
    a, b = np.argwhere(bp), np.argwhere(br)
    expected = max(directed_hausdorff(a, b)[0], directed_hausdorff(b, a)[0])
    assert m["hausdorff"] == pytest.approx(expected, abs=1e-12)
    assert m["hausdorff"] == pytest.approx(hausdorff_distance(bp, br), abs=1e-12)
    # ASSD and boundary matching: brute-force pairwise distances (scipy cdist)
    d = cdist(a, b)
    to_ref, to_pred = d.min(axis=1), d.min(axis=0)
    assert m["assd"] == pytest.approx((to_ref.sum() + to_pred.sum()) / (len(a) + len(b)), abs=1e-12)
    assert m["boundary_precision"] == pytest.approx(np.mean(to_ref <= 2.0), abs=1e-12)
    assert m["boundary_recall"] == pytest.approx(np.mean(to_pred <= 2.0), abs=1e-12)


def test_three_dimensional_masks_against_skimage():
    from skimage.metrics import hausdorff_distance
    from skimage.segmentation import find_boundaries

    rng = np.random.default_rng(3)
    pred = rng.random((6, 7, 8)) > 0.6
    ref = rng.random((6, 7, 8)) > 0.6
    m = compare_masks(pred, ref)
    bp = find_boundaries(pred, mode="inner", connectivity=1)
    br = find_boundaries(ref, mode="inner", connectivity=1)
    assert m["hausdorff"] == pytest.approx(hausdorff_distance(bp, br), abs=1e-12)


# --- invariances (hypothesis) ------------------------------------------------------------

@settings(max_examples=60, deadline=None)
@given(mask=masks_2d)
def test_mask_against_itself_is_perfect(mask):
    m = compare_masks(mask, mask)
    for key in ("iou", "dice", "precision", "recall", "boundary_f"):
        assert m[key] == 1.0
    assert m["hausdorff"] == 0.0 and m["assd"] == 0.0


@settings(max_examples=60, deadline=None)
@given(data=st.data())
def test_swapping_prediction_and_reference_swaps_precision_and_recall(data):
    shape = data.draw(st.tuples(st.integers(1, 8), st.integers(1, 8)))
    pred = data.draw(arrays(np.bool_, shape))
    ref = data.draw(arrays(np.bool_, shape))
    tol = data.draw(st.sampled_from([0.0, 1.0, 2.0]))
    m, s = compare_masks(pred, ref, tolerance=tol), compare_masks(ref, pred, tolerance=tol)
    assert (m["precision"], m["recall"]) == (s["recall"], s["precision"])
    assert (m["boundary_precision"], m["boundary_recall"]) == (s["boundary_recall"], s["boundary_precision"])
    for key in ("iou", "dice", "boundary_f", "hausdorff", "assd"):
        assert m[key] == pytest.approx(s[key])


@settings(max_examples=80, deadline=None)
@given(data=st.data())
def test_dice_is_twice_jaccard_over_one_plus_jaccard(data):
    # common knowledge: D = 2J / (1 + J)
    shape = data.draw(st.tuples(st.integers(1, 8), st.integers(1, 8)))
    pred = data.draw(arrays(np.bool_, shape))
    ref = data.draw(arrays(np.bool_, shape))
    m = compare_masks(pred, ref)
    assert m["dice"] == pytest.approx(2 * m["iou"] / (1 + m["iou"]), abs=1e-12)
    assert 0.0 <= m["iou"] <= m["dice"] <= 1.0
    assert set(METRICS) <= set(m)


# --- bootstrap and paired comparison -------------------------------------------------------

def test_bootstrap_is_deterministic_and_close_to_scipy():
    from scipy.stats import bootstrap

    values = np.random.default_rng(11).beta(5, 2, size=40)
    ours = bootstrap_ci(values, n_resamples=4000, rng=0)
    assert ours == bootstrap_ci(values, n_resamples=4000, rng=0)
    ref = bootstrap((values,), np.mean, n_resamples=4000, method="percentile",
                    confidence_level=0.95, rng=np.random.default_rng(1)).confidence_interval
    # two independent Monte Carlo estimates of the same percentile interval
    width = ref.high - ref.low
    assert ours[0] == pytest.approx(ref.low, abs=0.05 * width)
    assert ours[1] == pytest.approx(ref.high, abs=0.05 * width)
    assert ours[0] < values.mean() < ours[1]


def test_bootstrap_degenerate_cases():
    assert bootstrap_ci([0.4]) == (0.4, 0.4)
    assert bootstrap_ci([0.3, 0.3, 0.3]) == (0.3, 0.3)
    low, high = bootstrap_ci([])
    assert math.isnan(low) and math.isnan(high)


def test_bootstrap_refuses_infinite_values():
    with pytest.raises(ValueError, match="values must be finite"):
        bootstrap_ci([1.0, math.inf])


def test_paired_difference_matches_scipy_wilcoxon():
    from scipy.stats import wilcoxon

    rng = np.random.default_rng(5)
    a = rng.random(25)
    b = a - 0.05 + 0.1 * rng.random(25)
    r = paired_difference(a, b, names=("x", "y"), metric="iou")
    ref = wilcoxon(a - b)
    assert r.p_value == pytest.approx(ref.pvalue) and r.wilcoxon_statistic == ref.statistic
    assert r.mean_difference == pytest.approx(np.mean(a - b))
    assert r.ci_low <= r.mean_difference <= r.ci_high
    assert (r.first, r.second, r.n_images) == ("x", "y", 25)


def test_paired_difference_identical_sets():
    r = paired_difference([0.5, 0.7, 0.9], [0.5, 0.7, 0.9])
    assert (r.mean_difference, r.ci_low, r.ci_high, r.p_value) == (0.0, 0.0, 0.0, 1.0)


def test_paired_difference_drops_infinite_pairs():
    r = paired_difference([1.0, math.inf, 3.0], [0.0, 2.0, 1.0])
    assert r.n_images == 2 and r.mean_difference == 1.5


# --- summaries and rankings ------------------------------------------------------------

def _per_image(preds: dict, refs: dict) -> dict:
    return {k: compare_masks(preds[k], refs[k]) for k in preds}


def test_summary_ranks_by_mean_and_compares_the_best_two():
    refs = {f"im{k}": _random_blobs(100 + k) for k in range(8)}
    near = {k: np.roll(v, 1, axis=1) for k, v in refs.items()}
    far = {k: np.roll(v, 4, axis=0) for k, v in refs.items()}
    results = {"far": _per_image(far, refs), "exact": _per_image(refs, refs),
               "near": _per_image(near, refs)}
    s = summarize_comparison(results)
    assert [x.name for x in s.sets] == ["exact", "near", "far"]
    assert [x.rank for x in s.sets] == [1, 2, 3]
    iou_near = [results["near"][k]["iou"] for k in sorted(refs)]
    assert s.sets[1].metrics["iou"].mean == pytest.approx(np.mean(iou_near))
    assert s.paired.first == "exact" and s.paired.second == "near"
    assert s.paired.mean_difference == pytest.approx(1.0 - np.mean(iou_near))
    assert s.paired.ci_low > 0
    # lower is better for distances
    by_h = summarize_comparison(results, rank_by="hausdorff")
    assert [x.name for x in by_h.sets][0] == "exact"
    assert by_h.sets[0].metrics["hausdorff"].mean == 0.0


def test_summary_is_reproducible_and_sets_do_not_disturb_each_other():
    refs = {f"im{k}": _random_blobs(200 + k) for k in range(6)}
    a = _per_image({k: np.roll(v, 1, axis=0) for k, v in refs.items()}, refs)
    b = _per_image({k: np.roll(v, 2, axis=1) for k, v in refs.items()}, refs)
    one = summarize_comparison({"a": a})
    two = summarize_comparison({"a": a, "b": b})
    again = summarize_comparison({"a": a, "b": b})
    assert one.sets[0].metrics == next(x for x in two.sets if x.name == "a").metrics
    assert two.to_dict() == again.to_dict()


def test_summary_counts_infinite_distances_apart():
    ref = _bars(2, 5)
    results = {"p": {"x": compare_masks(ref, ref), "y": compare_masks(np.zeros_like(ref), ref)}}
    h = summarize_comparison(results).sets[0].metrics["hausdorff"]
    assert (h.mean, h.n, h.n_infinite) == (0.0, 1, 1)
    iou = summarize_comparison(results).sets[0].metrics["iou"]
    assert (iou.mean, iou.n) == (0.5, 2)


def test_summary_ranks_sets_with_infinite_distances_last():
    ref = _bars(2, 5)
    far = _bars(5, 8)  # finite but large distances
    results = {
        "finite": {"x": compare_masks(far, ref), "y": compare_masks(far, ref)},
        # one perfect image and one empty prediction: finite mean 0, but one inf
        "some inf": {"x": compare_masks(ref, ref), "y": compare_masks(np.zeros_like(ref), ref)},
    }
    s = summarize_comparison(results, rank_by="hausdorff")
    assert [x.name for x in s.sets] == ["finite", "some inf"]
    assert s.paired.n_images == 1  # the pair with an infinite value is left out


def test_summary_refuses_unknown_measure():
    with pytest.raises(ValueError, match="unknown measure"):
        summarize_comparison({"a": {}}, metrics=("iou", "accuracy"))


# --- the cut score of masks on an image's graph -----------------------------------------

def _scene(seed: int = 0, shape=(40, 48)) -> np.ndarray:
    """A noisy colour image: a reddish disc on a blue-green ground."""
    rng = np.random.default_rng(seed)
    rr, cc = np.ogrid[:shape[0], :shape[1]]
    disc = (rr - shape[0] / 2) ** 2 + (cc - shape[1] / 2.2) ** 2 <= (shape[0] / 3.2) ** 2
    img = np.where(disc[..., None], [0.8, 0.3, 0.2], [0.2, 0.5, 0.6])
    return np.clip(img + rng.normal(0, 0.06, img.shape), 0, 1)


_SUPERPIXELS = dict(n_superpixels=80, pixel_grid_max_pixels=0)


@pytest.mark.parametrize("settings_", [
    dict(prior=("border",)),
    dict(prior=()),                      # no prior: colour models from a 2-means start
    dict(prior=(), colour_model=False),  # no terminal at all
])
def test_score_of_split_mask_equals_its_value(settings_):
    from segcut.config import SplitConfig
    from segcut.pipeline import mask_to_sides, split
    from segcut.scoring import score

    cfg = SplitConfig(**_SUPERPIXELS, **settings_)
    image = _scene(1)
    result = split(image, cfg, rng=7)
    r = score(image, [result.mask], config=cfg, rng=7)
    assert r.masks[0].value == result.value  # exactly: same graph, exact projection
    # the pixel refinement moves the mask off the superpixels: the same share either way
    assert r.masks[0].agreement == mask_to_sides(result.image_graph, result.mask)[1]
    assert r.upper_bound is not None and r.masks[0].value <= r.upper_bound + 1e-9
    assert r.seed == 7


def test_score_with_hard_seeds_matches_split():
    from segcut.config import SplitConfig
    from segcut.pipeline import split
    from segcut.scoring import score

    image = _scene(2)
    seeds = np.zeros(image.shape[:2], dtype=np.uint8)
    seeds[20, 22] = 1  # foreground inside the disc
    seeds[0, :] = 2    # background along the top
    cfg = SplitConfig(**_SUPERPIXELS)
    result = split(image, cfg, seeds=seeds, rng=3)
    r = score(image, {"split": result.mask, "nothing": np.zeros(image.shape[:2])},
              config=cfg, seeds=seeds, rng=3)
    assert r.masks[0].value == result.value
    # the empty mask cannot keep the foreground seed: its projection disagrees there
    assert r.masks[1].agreement < 1.0


def test_cut_value_of_projection_against_networkx():
    # Pixel-grid graph (every pixel a vertex): the projection is the mask itself, and
    # the cut value must equal networkx's cut_size with the terminal on the
    # foreground side.
    import networkx as nx

    from segcut.config import SplitConfig
    from segcut.scoring import score

    image = _scene(3, shape=(12, 14))
    cfg = SplitConfig(prior=("border",), pixel_grid_max_pixels=4096)
    masks = {"disc": image[..., 0] > 0.5, "stripe": np.arange(14)[None, :].repeat(12, 0) < 5}
    r = score(image, masks, config=cfg, rng=0)
    ig = r.image_graph
    assert ig.terminal is not None and ig.n_regions == 12 * 14
    i, j, w = ig.graph.edges()
    g = nx.Graph()
    g.add_nodes_from(range(ig.graph.n_vertices))
    g.add_weighted_edges_from(zip(i.tolist(), j.tolist(), w.tolist()))
    for m in r.masks:
        mask = masks[m.name]
        fg = set(ig.region_vertex[np.unique(ig.labels[mask])].tolist()) | {ig.terminal}
        assert m.value == pytest.approx(nx.cut_size(g, fg, weight="weight"), rel=1e-12)
        assert m.agreement == 1.0
    assert r.ranking[0].value >= r.ranking[1].value


def test_mask_finer_than_superpixels_shows_low_agreement():
    from segcut.config import SplitConfig
    from segcut.scoring import score

    image = _scene(4)
    checker = (np.indices(image.shape[:2]).sum(axis=0) % 2).astype(bool)
    r = score(image, [checker], config=SplitConfig(**_SUPERPIXELS), rng=0)
    # each superpixel holds about half of each colour: about half the pixels disagree
    assert 0.4 < r.masks[0].agreement < 0.6


def test_without_terminal_a_mask_and_its_complement_score_the_same():
    # cut(x) = cut(-x): the value of a split does not depend on which side is called foreground
    from segcut.config import SplitConfig
    from segcut.scoring import score

    image = _scene(5)
    mask = image[..., 0] > 0.5
    r = score(image, {"m": mask, "not m": ~mask},
              config=SplitConfig(**_SUPERPIXELS, colour_model=False), rng=0)
    assert r.image_graph.terminal is None
    assert r.masks[0].value == pytest.approx(r.masks[1].value, rel=1e-12)


def test_score_refuses_mismatched_masks():
    from segcut.scoring import score

    image = _scene(6)
    with pytest.raises(ValueError, match=r"mask 'b' shape \(3, 3\) differs from mask 'a' shape"):
        score(image, {"a": np.zeros(image.shape[:2]), "b": np.zeros((3, 3))})


def test_score_refuses_wrong_size():
    from segcut.scoring import score

    image = _scene(6)
    with pytest.raises(ValueError, match=r"mask shape \(3, 3\) does not match the image's spatial shape \(40, 48\)"):
        score(image, [np.zeros((3, 3))])


def test_score_refuses_no_masks():
    from segcut.scoring import score

    with pytest.raises(ValueError, match="no masks to score"):
        score(_scene(6), [])
