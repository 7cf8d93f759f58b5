"""Each row of DEVELOPERS.md's "where a change belongs" table that names an extension
point, checked by making the change it describes and running ``segcut.split``.

Outside references: the common trimap convention of matting (white foreground,
mid-gray unknown, black background; common knowledge) and weak duality (an upper bound
is at least every cut's value; common knowledge).
"""

from __future__ import annotations

import numpy as np
import pytest

from segcut import affinity, priors
from segcut.config import SplitConfig
from segcut.graph import cut_value
from segcut.maxcut import CutResult, _common, register_method, unregister_method
from segcut.maxcut.local import descend
from segcut.pipeline import split
from segcut.scoring import score


def _picture():
    """A bright square on a dark noisy ground (36 x 40, gray)."""
    image = np.random.default_rng(4).normal(0.2, 0.03, (36, 40))
    image[10:26, 12:28] += 0.6
    return np.clip(image, 0, 1)


FAST = dict(n_superpixels=60, pixel_grid_max_pixels=0)


def test_a_new_max_cut_method_registered_with_warm_start_gets_the_start():
    starts = []

    def from_start(graph, *, time_limit=None, rng=None, start=None):
        """1-flip descent from the given start."""
        starts.append(np.array(start))
        sides, moves = descend(graph, start, rng=rng)
        return CutResult(sides=sides, value=cut_value(graph, sides), upper_bound=None, gap=None,
                         method="from_start", status="local_optimum")

    register_method("from_start", from_start, warm_start=True)
    try:
        result = split(_picture(), SplitConfig(method="from_start", **FAST))
    finally:
        unregister_method("from_start")
    assert result.method == "from_start" and len(starts) == 1
    assert starts[0].shape == (result.image_graph.graph.n_vertices,)
    assert np.array_equal(starts[0], result.image_graph.start)
    with pytest.raises(ValueError, match="declares warm_start but takes no 'start'"):
        register_method("no_start", lambda graph, *, time_limit=None, rng=None: None,
                        warm_start=True)
    assert "no_start" not in _common._REGISTRY


def test_a_new_edge_weight_formula_is_a_registered_affinity_model():
    calls = []

    def lightness(features, adjacency, *, scale=1.0):
        calls.append(scale)
        return scale * np.abs(features.mean[adjacency.rows, 0] - features.mean[adjacency.cols, 0])

    affinity.register_affinity_model("lightness_row", lightness, shape="gaussian",
                                     options={"scale": 1.0}, long_range=True)
    try:
        result = split(_picture(), SplitConfig(affinity="lightness_row", **FAST))
    finally:
        affinity._MODELS.pop("lightness_row", None)
    assert calls and result.mask[18, 20] and not result.mask[2, 2]


def test_a_new_prior_is_registered_and_named_in_the_config():
    calls = []

    def middle(spatial_shape, config):
        """A central box of half each side is foreground."""
        calls.append(tuple(spatial_shape))
        out = -np.ones(spatial_shape)
        rows, cols = spatial_shape[-2:]
        out[..., rows // 4:rows - rows // 4, cols // 4:cols - cols // 4] = 1.0
        return out

    priors.register_prior("middle_row", middle)
    try:
        result = split(_picture(), SplitConfig(prior=("middle_row",), **FAST))
    finally:
        priors._PRIORS.pop("middle_row", None)
    assert calls and result.orientation == "terminal"
    assert result.mask[18, 20] and not result.mask[2, 2]


def test_a_seed_rule_lives_in_read_seeds(tmp_path):
    from segcut.io import read_seeds, write_image

    trimap = np.full((36, 40), 128, np.uint8)  # mid-gray: unknown
    trimap[16:20, 2:6] = 255                   # white: foreground (on the dark ground)
    trimap[0:3, :] = 0                         # black: background
    write_image(trimap, tmp_path / "trimap.png")
    seeds = read_seeds(tmp_path / "trimap.png")
    result = split(_picture(), SplitConfig(**FAST), seeds=seeds)
    assert result.mask[17, 3] and not result.mask[0:3].any()


def test_certificate_settings_change_split_and_score_alike(monkeypatch):
    from segcut.maxcut import sdp

    cfg = SplitConfig(**FAST)
    image = _picture()
    before = split(image, cfg)
    monkeypatch.setattr(sdp, "QUICK", sdp.SdpSettings(tol=0.2, n_hyperplanes=20))
    after = split(image, cfg)
    scored = score(image, [after.mask], config=cfg)
    assert after.upper_bound != before.upper_bound  # the looser setting took effect
    assert scored.upper_bound == after.upper_bound >= after.value
