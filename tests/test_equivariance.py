"""Flips and quarter turns: split(T(image)) == T(split(image)) bit for bit.

The eight flips and quarter turns of the square (its symmetry group has eight
elements: common knowledge) are written here with numpy's own ``flip``, ``rot90``
and ``.T`` (the outside reference for what each transform does), not with segcut's
``apply_transform``.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from checks import NUMPY_TRANSFORMS, SHARED_DATA
from segcut.config import SplitConfig
from segcut.graph import cut_value
from segcut.pipeline import (
    CANONICAL_TRANSFORMS,
    apply_transform,
    build_image_graph,
    canonical_transform,
    mask_to_sides,
    split,
)
from segcut.scoring import score

DEV_IMAGES = SHARED_DATA / "horses-dev"


FAST = SplitConfig(method="local")


def _stack_transform(name):
    """The in-plane transform of a (P, M, N) stack: each plane moved alike."""
    return lambda a: np.stack([NUMPY_TRANSFORMS[name](plane) for plane in a])


def _moved_box(box, shape, transform):
    """A box (x0, y0, x1, y1) moved with the image: the bounding box of its moved mask."""
    inside = np.zeros(shape, dtype=bool)
    x0, y0, x1, y1 = box
    inside[y0:y1, x0:x1] = True
    rows, cols = np.nonzero(transform(inside))
    return (int(cols.min()), int(rows.min()), int(cols.max()) + 1, int(rows.max()) + 1)


def _scene(seed, shape=(72, 88)):
    """Two objects under noise and shading; not square, so turns change the shape."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:shape[0], :shape[1]] / max(shape)
    truth = ((yy - 0.3) ** 2 + (xx - 0.35) ** 2 < 0.15 ** 2)
    truth |= (np.abs(yy - 0.55) < 0.1) & (np.abs(xx - 0.72) < 0.14)
    image = np.where(truth[..., None], [0.8, 0.5, 0.25], [0.3, 0.45, 0.35])
    image = image * (0.8 + 0.3 * xx)[..., None] + rng.normal(0, 0.07, image.shape)
    return np.clip(image, 0, 1)


def _assert_same_split(moved, base, transform):
    assert np.array_equal(moved.mask, transform(base.mask))
    assert np.array_equal(moved.labels, transform(base.labels))
    assert moved.value == pytest.approx(base.value, rel=1e-9)
    if base.upper_bound is None:
        assert moved.upper_bound is None
    else:
        assert moved.upper_bound == pytest.approx(base.upper_bound, rel=1e-9)
    assert moved.orientation == base.orientation
    assert moved.n_superpixels == base.n_superpixels


def test_transform_names_match_numpy():
    a = np.arange(12).reshape(3, 4)
    views = []
    for name, reference in NUMPY_TRANSFORMS.items():
        view = apply_transform(a, name)
        assert np.array_equal(view, reference(a)), name
        assert np.array_equal(apply_transform(view, name, inverse=True), a), name
        views.append(view.tobytes() + bytes(view.shape))
    assert len(set(views)) == 8 == len(CANONICAL_TRANSFORMS)  # all eight differ


@pytest.mark.parametrize("shape", [(64, 48, 3), (13, 3, 1), (3, 20, 2), (4, 9, 11, 1)])
def test_block_sums_are_exact_and_move_with_the_image(shape):
    """The content signature equals plain integer sums over the symmetric blocks, and
    the signature of a moved image is the moved signature (odd and even sides)."""
    from segcut.orientation import _KEY_BLOCKS, _block_sums, _symmetric_edges

    values = np.random.default_rng(8).random(shape)
    q = np.floor(values * 65535 + 0.5).astype(np.int64)
    if q.ndim == 4:
        q = q.sum(axis=0)
    b = _KEY_BLOCKS
    e0, e1 = _symmetric_edges(q.shape[0], b), _symmetric_edges(q.shape[1], b)
    assert np.array_equal(e0, q.shape[0] - e0[::-1])  # mirror-symmetric edges
    expected = np.array([[q[e0[i]:e0[i + 1], e1[j]:e1[j + 1]].sum(axis=(0, 1))
                          for j in range(b)] for i in range(b)])
    sums = _block_sums(values)
    assert np.array_equal(sums, expected)
    plane = (values.ndim - 3, values.ndim - 2)
    for transform in NUMPY_TRANSFORMS.values():
        moved = np.moveaxis(transform(np.moveaxis(values, plane, (0, 1))), (0, 1), plane)
        assert np.array_equal(_block_sums(moved), transform(sums))


def test_unknown_transform_name():
    with pytest.raises(ValueError, match="unknown transform 'spin'"):
        apply_transform(np.zeros((2, 2)), "spin")


@pytest.fixture(scope="module")
def scene_base():
    image = _scene(0)
    return image, split(image)  # default config: tabu search plus the SDP certificate


@pytest.mark.parametrize("name", list(NUMPY_TRANSFORMS))
def test_split_is_equivariant_default_config(scene_base, name):
    image, base = scene_base
    transform = NUMPY_TRANSFORMS[name]
    moved = split(np.ascontiguousarray(transform(image)))
    _assert_same_split(moved, base, transform)
    assert moved.upper_bound is not None  # the certificate was computed


@pytest.mark.parametrize("name", list(NUMPY_TRANSFORMS))
def test_split_is_equivariant_with_seeds_and_box(name):
    image = _scene(1)
    seeds = np.zeros(image.shape[:2], dtype=np.uint8)
    seeds[18:24, 24:30] = 1
    seeds[:, :3] = 2
    box = (2, 4, 80, 66)
    cfg = FAST.replace(prior=("border", "center"), box=box, min_region_size=30)
    base = split(image, cfg, seeds=seeds)
    transform = NUMPY_TRANSFORMS[name]
    moved_cfg = cfg.replace(box=_moved_box(box, image.shape[:2], transform))
    moved = split(np.ascontiguousarray(transform(image)), moved_cfg, seeds=transform(seeds))
    _assert_same_split(moved, base, transform)
    assert base.mask[18:24, 24:30].all() and not base.mask[:, :3].any()  # seeds hold


@pytest.mark.parametrize("name", ["rot90", "flip_rows", "anti_transpose"])
def test_split_is_equivariant_for_3d_stacks(name):
    planes = [_scene(s, shape=(40, 48)).mean(axis=-1) for s in (2, 3, 4)]
    stack = np.stack(planes)
    cfg = FAST.replace(n_superpixels=150)
    base = split(stack, cfg, channel_axis=None)
    transform = _stack_transform(name)
    moved = split(np.ascontiguousarray(transform(stack)), cfg, channel_axis=None)
    _assert_same_split(moved, base, transform)


def test_non_finite_values_are_filled_alike():
    image = _scene(5)
    image[10:13, 50:60] = np.nan
    image[40, 7] = np.inf
    base = split(image, FAST)
    for name in ("rot90", "transpose"):
        transform = NUMPY_TRANSFORMS[name]
        _assert_same_split(split(np.ascontiguousarray(transform(image)), FAST), base,
                           transform)


def test_score_reproduces_the_value_in_any_orientation(scene_base):
    """The graph of a moved image is the graph of the image: scoring agrees exactly."""
    image, base = scene_base
    for name in ("rot270", "flip_columns"):
        transform = NUMPY_TRANSFORMS[name]
        moved_image = np.ascontiguousarray(transform(image))
        ig = build_image_graph(moved_image)
        sides, agreement = mask_to_sides(ig, transform(base.mask))
        assert cut_value(ig.graph, sides) == base.value
        assert agreement == mask_to_sides(base.image_graph, base.mask)[1]
        r = score(moved_image, [transform(base.mask)])
        assert r.masks[0].value == base.value


def test_symmetric_image_same_value_mask_up_to_its_symmetry():
    """An image equal to its own quarter turns: any of its symmetric copies may come back."""
    rng = np.random.default_rng(6)
    quarter = rng.random((20, 20))
    quarter[12:, 12:] += 1.0  # an object near the centre, in every quarter after mirroring
    half = np.concatenate([quarter, quarter[:, ::-1]], axis=1)
    image = np.concatenate([half, half[::-1]], axis=0) / 2.0
    image = np.maximum(image, image.T)  # also symmetric about the diagonal
    symmetries = [f for f in NUMPY_TRANSFORMS.values() if np.array_equal(f(image), image)]
    assert len(symmetries) == 8
    base = split(image, FAST, channel_axis=None)
    # every view ties; the first name in order is recorded
    assert base.canonical_transform == "identity"
    for name, transform in NUMPY_TRANSFORMS.items():
        moved = split(np.ascontiguousarray(transform(image)), FAST, channel_axis=None)
        assert moved.value == base.value and moved.upper_bound == base.upper_bound
        assert any(np.array_equal(moved.mask, transform(s(base.mask))) for s in symmetries)


def test_canonical_view_is_the_same_for_every_transform():
    image = _scene(7)
    name = canonical_transform(image)
    canonical = apply_transform(image, name, axes=(0, 1))
    for transform in NUMPY_TRANSFORMS.values():
        moved = np.ascontiguousarray(transform(image))
        view = apply_transform(moved, canonical_transform(moved), axes=(0, 1))
        assert np.array_equal(view, canonical)


def test_record_names_the_transform():
    image = _scene(0)
    result = split(np.ascontiguousarray(np.rot90(image)), FAST)
    record = result.to_record()
    assert record["canonical_transform"] == result.canonical_transform
    assert result.canonical_transform in CANONICAL_TRANSFORMS
    assert record["orientation"] == "border_rule"  # orientation still says who chose the side


@pytest.mark.skipif(not (DEV_IMAGES / "images").is_dir(),
                    reason="dev photographs (../shared/data/horses-dev) are not present")
def test_dev_photograph_is_equivariant():
    from PIL import Image

    path = sorted((DEV_IMAGES / "images").iterdir())[0]
    photo = np.asarray(Image.open(path).convert("RGB"))
    cfg = SplitConfig(prior=("border", "center"))
    base = split(photo, cfg)
    assert base.upper_bound is not None
    for name, transform in NUMPY_TRANSFORMS.items():
        moved = split(np.ascontiguousarray(transform(photo)), cfg)
        _assert_same_split(moved, base, transform)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**16), rows=st.integers(6, 44), cols=st.integers(6, 44),
       colour=st.booleans(), name=st.sampled_from(list(NUMPY_TRANSFORMS)))
def test_property_equivariance(seed, rows, cols, colour, name):
    rng = np.random.default_rng(seed)
    shape = (rows, cols, 3) if colour else (rows, cols)
    image = (rng.random(shape) * 4).round() / 4  # few levels: block sums often tie
    image[rows // 3: rows // 2 + 1, cols // 4: cols // 2 + 2] += 0.5
    if not np.ptp(image) > 0:
        image[0, 0] = 1.0 - image[0, 0]
    transform = NUMPY_TRANSFORMS[name]
    channel_axis = -1 if colour else None
    base = split(image, FAST, channel_axis=channel_axis)
    moved = split(np.ascontiguousarray(transform(image)), FAST, channel_axis=channel_axis)
    _assert_same_split(moved, base, transform)
