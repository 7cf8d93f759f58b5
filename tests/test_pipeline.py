"""split(), build_image_graph() and mask_to_sides(): quality on scenes with known truth,
the minimum s-t cut reduction, invariances, determinism and clear errors."""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.sparse import csr_array
from scipy.sparse.csgraph import maximum_flow

from segcut.config import SplitConfig
from segcut.errors import SegcutWarning  # noqa: F401  (warnings are strings in the result)
from segcut.graph import cut_value, graph_from_edges
from segcut.maxcut import solve_maxcut
from segcut.pipeline import build_image_graph, mask_to_sides, split

FAST = SplitConfig(method="local")
# The default settings (search plus SDP certificate).
SCENE_CONFIG = SplitConfig()


def _iou(a, b):
    union = np.count_nonzero(a | b)
    return np.count_nonzero(a & b) / union if union else 1.0


def _scene(kind, seed, size=128):
    """A synthetic scene with its true mask: 1-3 objects, noise, texture or shading."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:size, :size] / size
    truth = np.zeros((size, size), dtype=bool)
    n_objects = 1 + seed % 3
    centres = [(0.3, 0.3), (0.68, 0.65), (0.3, 0.72)][:n_objects]
    for k, (cy, cx) in enumerate(centres):
        if k % 2 == 0:
            truth |= (yy - cy) ** 2 + (xx - cx) ** 2 < 0.16 ** 2  # disk
        else:
            truth |= (np.abs(yy - cy) < 0.14) & (np.abs(xx - cx) < 0.2)  # rectangle
    bg = np.array([0.25, 0.45, 0.3])
    fg = np.array([0.85, 0.55, 0.2])
    image = np.where(truth[..., None], fg, bg)
    if kind == "noise":
        image = image + rng.normal(0, 0.08, image.shape)
    elif kind == "texture":
        stripes = 0.12 * np.sin(2 * np.pi * (xx + yy) * 12)[..., None]
        image = image + np.where(truth[..., None], stripes, -0.5 * stripes)
        image = image + rng.normal(0, 0.03, image.shape)
    elif kind == "shading":
        image = image * (0.7 + 0.5 * xx)[..., None] + rng.normal(0, 0.03, image.shape)
    return np.clip(image, 0, 1), truth


SCENES = [(kind, seed) for kind in ("noise", "texture", "shading") for seed in (0, 1, 2)]


def test_synthetic_scenes_no_prior_mean_iou():
    """Known truth by construction: mean IoU >= 0.95 without any prior; every image
    reports a certified bound and its gap."""
    ious = []
    for kind, seed in SCENES:
        image, truth = _scene(kind, seed, size=192)
        result = split(image, SCENE_CONFIG, rng=seed)  # search plus SDP certificate
        ious.append(_iou(result.mask, truth))
        assert result.orientation == "border_rule"
        assert result.upper_bound is not None and result.gap is not None
        assert result.upper_bound >= result.value - 1e-6 * abs(result.upper_bound)
        assert 0.0 <= result.gap == pytest.approx(
            (result.upper_bound - result.value) / abs(result.upper_bound), abs=1e-12)
    assert np.mean(ious) >= 0.95, ious


def _max_cut_by_min_cut(graph, terminal):
    """Exact max-cut of a graph whose non-terminal edges are all attractive (w <= 0).

    With the terminal t on the foreground (source) side and c_ij = -w_ij >= 0:
    cut(x) = -sum c_ij [i, j apart] + sum_i w_ti [i apart from t]. A terminal edge
    w_ti < 0 costs |w_ti| when i is on the sink side: capacity s -> i. A terminal
    edge w_ti > 0 equals the constant w_ti minus w_ti [i with t]: capacity i -> sink.
    So max cut = sum_{w_ti > 0} w_ti - min s-t cut, and the min cut is the max flow
    (Ford-Fulkerson max-flow min-cut theorem, common knowledge). scipy's
    maximum_flow needs integer capacities, so the weights here are integers.
    """
    i, j, w = graph.edges()
    n = graph.n_vertices
    source, sink = terminal, n  # reuse the terminal as source; add a sink vertex
    rows, cols, caps = [], [], []
    constant = 0
    for a, b, weight in zip(i.tolist(), j.tolist(), w.tolist()):
        if terminal in (a, b):
            v = b if a == terminal else a
            if weight < 0:
                rows.append(source); cols.append(v); caps.append(-weight)
            else:
                rows.append(v); cols.append(sink); caps.append(weight)
                constant += weight
        else:
            assert weight <= 0
            rows += [a, b]; cols += [b, a]; caps += [-weight, -weight]
    cap = csr_array((np.array(caps, dtype=np.int32), (rows, cols)), shape=(n + 1, n + 1))
    cap.sum_duplicates()
    flow = maximum_flow(cap, source, sink)
    return constant - flow.flow_value


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_attractive_graph_with_priors_is_a_min_cut(seed):
    image, _ = _scene("noise", seed, size=96)
    ig = build_image_graph(image, SplitConfig(prior=("border", "center"), n_superpixels=80),
                           rng=seed)
    t = ig.terminal
    i, j, w = ig.graph.edges()
    scale = 20.0 / np.abs(w).max()
    w = np.round(w * scale)
    inner = (i != t) & (j != t)
    w[inner] = -np.abs(w[inner])  # attractive only between regions
    graph = graph_from_edges(ig.graph.n_vertices, i, j, w)
    exact = _max_cut_by_min_cut(graph, t)
    result = solve_maxcut(graph, method="tabu", rng=seed)
    assert result.value == exact


def test_invariant_value_equals_cut_of_projected_mask():
    image, _ = _scene("noise", 1)
    seeds = np.zeros(image.shape[:2], dtype=np.uint8)
    seeds[40:44, 40:44] = 1
    seeds[:3, :] = 2
    cfg = FAST.replace(prior=("border",), min_region_size=200)
    result = split(image, cfg, seeds=seeds)
    sides, agreement = mask_to_sides(result.image_graph, result.mask)
    assert cut_value(result.image_graph.graph, sides) == result.value
    assert agreement > 0.95  # the pixel refinement moves the mask off the superpixels
    assert result.cleanup["value_after"] == result.value
    assert result.mask[40:44, 40:44].all() and not result.mask[:3].any()  # hard seeds hold
    merged = result.image_graph.merged
    assert (merged == 1).any() and (merged == -1).any()
    # every seeded region is merged into the terminal vertex
    assert np.all(result.image_graph.region_vertex[merged != 0] == result.image_graph.terminal)


def test_build_image_graph_is_the_graph_split_solves():
    image, _ = _scene("shading", 2)
    ig = build_image_graph(image, FAST)
    result = split(image, FAST)
    a, b = ig.graph.edges(), result.image_graph.graph.edges()
    assert all(np.array_equal(x, y) for x, y in zip(a, b))


@pytest.mark.parametrize("transform", [np.fliplr, np.flipud, lambda a: np.rot90(a, 1),
                                       lambda a: np.rot90(a, 2), lambda a: np.rot90(a, 3),
                                       lambda a: np.swapaxes(a, 0, 1)])
def test_flips_and_rotations_transform_the_mask(transform):
    # the image is processed in a canonical orientation chosen from its content, so the
    # masks agree bit for bit (numpy's flips and rot90 are the reference transforms;
    # tests/test_equivariance.py covers seeds, the box prior, stacks and ties)
    image, _ = _scene("noise", 0, size=192)
    base = split(image, SCENE_CONFIG.replace(method="local"))
    moved = split(np.ascontiguousarray(transform(image)), SCENE_CONFIG.replace(method="local"))
    assert np.array_equal(moved.mask, transform(base.mask))
    assert moved.value == base.value


def test_dtypes_give_the_same_mask():
    image, _ = _scene("texture", 1)
    u8 = np.round(image * 255).astype(np.uint8)
    masks = [split(x, FAST).mask for x in
             (u8, u8.astype(np.uint16) * 257, u8.astype(np.float64) / 255.0)]
    assert np.array_equal(masks[0], masks[1]) and np.array_equal(masks[0], masks[2])


def test_same_seed_same_bytes():
    image, _ = _scene("noise", 0)
    a = split(image, SplitConfig(prior=("border", "center")), rng=5)
    b = split(image, SplitConfig(prior=("border", "center")), rng=5)
    assert a.mask.tobytes() == b.mask.tobytes() and a.value == b.value
    assert a.upper_bound == b.upper_bound


def test_gray_rgba_and_3d_stack():
    image, truth = _scene("noise", 0)
    gray = image.mean(axis=-1)
    assert _iou(split(gray, FAST, channel_axis=None).mask, truth) > 0.9
    rgba = np.concatenate([image, np.ones(image.shape[:2] + (1,))], axis=-1)
    assert np.array_equal(split(rgba, FAST).mask, split(image, FAST).mask)
    stack = np.stack([gray] * 4)
    result = split(stack, FAST.replace(n_superpixels=200), channel_axis=None)
    assert result.mask.shape == stack.shape
    assert _iou(result.mask, np.stack([truth] * 4)) > 0.85


def test_no_contrast_gives_empty_mask_and_warning():
    result = split(np.full((30, 40, 3), 0.5))
    assert not result.mask.any() and result.orientation == "no_contrast"
    assert any("no contrast" in w for w in result.warnings)


def test_record_is_json():
    image, _ = _scene("noise", 1)
    record = split(image, FAST.replace(prior=("border", "center"))).to_record()
    text = json.dumps(record)
    for key in ("value", "upper_bound", "gap", "foreground_fraction", "n_superpixels",
                "orientation", "seconds", "warnings", "cleanup", "method", "seed"):
        assert key in json.loads(text)


def test_box_prior_keeps_outside_as_background():
    image, truth = _scene("noise", 0)
    result = split(image, FAST.replace(box=(10, 10, 70, 70)))
    assert _iou(result.mask, truth & False | result.mask) == 1.0
    assert not result.mask[:, 90:].any()  # the second object lies outside the box
    assert result.orientation == "terminal"


def test_bad_seeds_shape():
    with pytest.raises(ValueError, match=r"seeds shape \(3, 3\) does not match"):
        split(np.zeros((10, 10)), seeds=np.zeros((3, 3)))


def test_bad_seed_values():
    with pytest.raises(ValueError, match="seeds must hold 0"):
        split(np.eye(10), seeds=np.full((10, 10), 7))


def test_too_many_channels():
    with pytest.raises(ValueError, match="pass channel_axis=None"):
        split(np.zeros((5, 30, 30)), channel_axis=0)


def test_one_dimensional_image():
    with pytest.raises(ValueError, match="must be 2-D"):
        split(np.zeros(10))


def test_all_nan_image():
    with pytest.raises(ValueError, match="no finite values"):
        split(np.full((10, 10), np.nan))


def test_config_type_checked():
    with pytest.raises(TypeError, match="config must be a SplitConfig"):
        split(np.eye(5), {"prior": "border"})


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_seed_merging_keeps_every_cut_value_up_to_the_offset(seed):
    """Brute-force reference: merging seeded regions into the terminal (background
    seeds with flipped spin) changes every split's value by the same constant."""
    from segcut.image_graph import ImageGraph, assemble_graph as _assemble

    rng = np.random.default_rng(seed)
    n = 7
    rows, cols = np.triu_indices(n, 1)
    keep = rng.random(rows.size) < 0.6
    rows, cols = rows[keep], cols[keep]
    weights = rng.normal(size=rows.size)
    evidence = rng.normal(size=n) * 3
    merged = rng.choice(np.array([-1, 0, 0, 1], dtype=np.int8), size=n)
    graph, terminal, region_vertex, offset = _assemble(n, merged, rows, cols, weights,
                                                       evidence, True)
    ig = ImageGraph(labels=np.arange(n)[None], graph=graph, terminal=terminal,
                    region_vertex=region_vertex, merged=merged, offset=offset,
                    orientation="terminal", threshold=0.0, start=np.ones(graph.n_vertices))
    for _ in range(10):
        sides = rng.choice(np.array([-1, 1], dtype=np.int8), size=graph.n_vertices)
        fg = ig.region_foreground(sides)  # seeds respected by construction
        assert np.all(fg[merged == 1]) and not np.any(fg[merged == -1])
        unmerged = np.sum(weights * (fg[rows] != fg[cols])) + np.sum(-evidence * ~fg)
        assert np.isclose(cut_value(graph, sides) + offset, unmerged)


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000),
       prior=st.sampled_from([(), ("border",), ("center",), ("border", "center")]),
       fill=st.booleans(), min_size=st.sampled_from([0, 30]),
       method=st.sampled_from(["auto", "local"]), refine=st.booleans())
def test_reported_value_is_the_cut_of_the_returned_mask(seed, prior, fill, min_size, method,
                                                       refine):
    """For any image and options: value == cut of the mask's projection, bound >= value;
    without the pixel refinement the mask follows the superpixels exactly."""
    rng = np.random.default_rng(seed)
    blocks = rng.random((5, 6, 3))
    image = np.kron(blocks, np.ones((12, 12, 1))) + rng.normal(0, 0.05, (60, 72, 3))
    cfg = SplitConfig(prior=prior, fill_holes=fill, min_region_size=min_size, method=method,
                      refine=refine)
    result = split(np.clip(image, 0, 1), cfg, rng=seed)
    sides, agreement = mask_to_sides(result.image_graph, result.mask)
    if not refine and not fill and not min_size:
        assert agreement == 1.0
    assert cut_value(result.image_graph.graph, sides) == result.value
    assert result.mask.dtype == bool and result.mask.shape == (60, 72)
    if result.upper_bound is not None:
        assert result.upper_bound >= result.value - 1e-9 * max(1.0, abs(result.upper_bound))


def test_progress_names_each_stage_once_in_order_and_changes_nothing():
    """``progress`` hears every stage as it starts, in the documented order, and the result
    is bit for bit the one without it."""
    from segcut.pipeline import STAGES

    image = np.zeros((48, 48, 3))
    image[12:36, 10:30] = (0.9, 0.3, 0.2)
    heard = []
    with_progress = split(image, rng=3, progress=heard.append)
    assert heard == list(STAGES)
    assert STAGES == ("prepare", "superpixels", "appearance", "solve", "refine", "confidence")
    plain = split(image, rng=3)
    assert np.array_equal(with_progress.mask, plain.mask)
    assert with_progress.value == plain.value
    assert np.array_equal(with_progress.confidence, plain.confidence)
    heard.clear()
    split(image, SplitConfig(confidence=False), rng=3, progress=heard.append)
    assert heard == list(STAGES[:-1])  # no confidence measured, none announced
    heard.clear()
    split(np.full((20, 20), 0.4), progress=heard.append)  # no contrast: nothing past prepare
    assert heard == ["prepare"]


def test_solver_gap_is_the_gap_of_the_solvers_own_split():
    """``solver_gap`` is the certified gap of the split the solver returned (before the
    pixel refinement), ``gap`` that of the final mask; both certified by one bound.
    Reference: the same image split without refinement or clean-up, whose final mask
    is the solver's split, on the same graph with the same seed."""
    rng = np.random.default_rng(11)
    image = rng.random((80, 80)) * 0.3
    image[20:60, 24:64] += 0.5
    result = split(image, rng=0)
    unrefined = split(image, SplitConfig(refine=False, min_region_size=0, fill_holes=False), rng=0)
    assert result.upper_bound == pytest.approx(unrefined.upper_bound)
    assert result.to_record()["solver_gap"] == pytest.approx(unrefined.gap)
    assert unrefined.solver_gap == pytest.approx(unrefined.gap)
