"""Signed affinity models: sign around the threshold, bounds, registry, k-NN edges."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from segcut.affinity import (
    available_affinity_models,
    edge_weights,
    get_affinity_model,
    knn_edges,
    register_affinity_model,
    signed_weights,
)
from segcut.regions import describe_regions, region_adjacency

_MODELS = ["colour", "colour_gaussian", "contrast", "histogram", "mixed"]


@settings(max_examples=50, deadline=None)
@given(d=arrays(np.float64, st.integers(2, 40), elements=st.floats(0, 100)),
       q=st.floats(0.05, 0.95), shape=st.sampled_from(["linear", "gaussian"]))
def test_sign_follows_threshold_and_weight_is_bounded(d, q, shape):
    border = np.arange(1, d.size + 1, dtype=float)
    w, t = signed_weights(d, border, quantile=q, shape=shape)
    assert np.all(np.abs(w) <= border + 1e-12)
    if np.quantile(d, q) > 1e-9 * d.max():
        assert t == np.quantile(d, q)
        assert np.all(w[d < t] < 0)   # similar neighbours attract
        assert np.all(w[d > t] > 0)   # dissimilar neighbours repel
        assert np.allclose(w[d == t], 0.0)


def _scene():
    labels = np.repeat(np.repeat(np.arange(16).reshape(4, 4), 5, 0), 5, 1)
    feats = np.zeros((20, 20, 3))
    feats[:, 10:, 0] = 50.0
    feats += np.random.default_rng(0).normal(0, 1.0, feats.shape)
    return labels, feats


@pytest.mark.parametrize("model", _MODELS)
def test_every_model_separates_a_two_colour_scene(model):
    labels, feats = _scene()
    regions = describe_regions(labels, feats, n_colour_words=4)
    adj = region_adjacency(labels, feats)
    w, _ = edge_weights(model, regions, adj, quantile=0.5)
    crosses = (adj.rows % 4 < 2) != (adj.cols % 4 < 2)
    assert np.all(w[crosses] > 0)
    assert w[crosses].min() > w[~crosses].max()  # the colour edge repels most


def test_histogram_distance_extremes():
    # chi-square distance 0.5 sum (p - q)^2 / (p + q): 0 for equal histograms, 1 for
    # disjoint ones (common knowledge)
    labels = np.array([[0, 1, 2]])
    feats = np.array([[[0.0], [0.0], [90.0]]])
    regions = describe_regions(labels, feats, n_colour_words=2)
    adj = region_adjacency(labels, feats)
    d = get_affinity_model("histogram").distance(regions, adj)
    assert np.allclose(d, [0.0, 1.0])


def test_registry_and_custom_model():
    assert set(_MODELS) <= set(available_affinity_models())
    with pytest.raises(ValueError, match="unknown affinity model 'nope'"):
        get_affinity_model("nope")
    register_affinity_model("test_border_only", lambda f, a: np.ones(a.n_pairs),
                            replace_existing=True)
    labels, feats = _scene()
    w, t = edge_weights("test_border_only", describe_regions(labels, feats, n_colour_words=2),
                        region_adjacency(labels, feats))
    assert t == 1.0 and np.all(w == 0.0)


def test_register_twice_is_refused():
    with pytest.raises(ValueError, match="already registered"):
        register_affinity_model("colour", lambda f, a: None)


def test_knn_edges_match_brute_force():
    rng = np.random.default_rng(7)
    labels = np.arange(30).reshape(5, 6)
    feats = rng.random((5, 6, 3)) * 50
    regions = describe_regions(labels, feats, n_colour_words=3)
    rows, cols, d = knn_edges(regions, 3)
    dist = np.sqrt(((regions.mean[:, None] - regions.mean[None]) ** 2).sum(-1))
    np.fill_diagonal(dist, np.inf)
    expected = set()
    for i in range(30):
        for j in np.argsort(dist[i])[:3]:
            expected.add((min(i, j), max(i, j)))
    assert set(zip(rows.tolist(), cols.tolist())) == expected
    assert np.allclose(d, dist[rows, cols])


def test_shape_is_declared_not_read_from_the_name():
    # formulas of signed_weights by hand (its docstring): linear w = b clip((d - t)/t, -1, 1),
    # gaussian w = b (1 - 2 exp(-ln 2 (d / t)^2))
    from segcut import affinity

    labels, feats = _scene()
    regions = describe_regions(labels, feats, n_colour_words=2)
    adj = region_adjacency(labels, feats)
    d = get_affinity_model("colour").distance(regions, adj)
    try:
        register_affinity_model("plain_gaussian", get_affinity_model("colour").distance)
        register_affinity_model("bell", get_affinity_model("colour").distance, shape="gaussian")
        linear, t = edge_weights("plain_gaussian", regions, adj, quantile=0.5)
        bell, _ = edge_weights("bell", regions, adj, quantile=0.5)
    finally:
        affinity._MODELS.pop("plain_gaussian", None)
        affinity._MODELS.pop("bell", None)
    assert np.allclose(linear, adj.border * np.clip((d - t) / t, -1, 1))
    assert np.allclose(bell, adj.border * (1 - 2 * np.exp(-np.log(2) * (d / t) ** 2)))
    with pytest.raises(ValueError, match="shape must be one of"):
        register_affinity_model("wavy", get_affinity_model("colour").distance, shape="wavy")


def test_model_options_reach_the_distance_and_are_checked():
    from segcut import affinity

    seen = []

    def scaled(features, adjacency, *, scale=1.0):
        seen.append(scale)
        return scale * np.ones(adjacency.n_pairs)

    labels, feats = _scene()
    regions = describe_regions(labels, feats, n_colour_words=2)
    adj = region_adjacency(labels, feats)
    try:
        register_affinity_model("scaled", scaled, options={"scale": 1.0})
        edge_weights("scaled", regions, adj)
        edge_weights("scaled", regions, adj, options={"scale": 3.0})
        with pytest.raises(ValueError, match="has no option"):
            edge_weights("scaled", regions, adj, options={"size": 3.0})
        with pytest.raises(ValueError, match="must be a float"):
            edge_weights("scaled", regions, adj, options={"scale": "big"})
    finally:
        affinity._MODELS.pop("scaled", None)
    assert seen == [1.0, 3.0]


@pytest.mark.parametrize("model", ["colour", "histogram", "contrast"])
def test_knn_edges_use_a_long_range_model(model):
    # reference: the formula of weigh_pairs' docstring evaluated by hand with numpy:
    # w = smoothness * median border * min(0, clip(d / t - 1, -1, 1)) (linear sign), d the
    # model's distance for long-range models, the mean-colour distance otherwise
    from segcut.affinity import weigh_pairs
    from segcut.config import SplitConfig
    from segcut.regions import RegionAdjacency

    rng = np.random.default_rng(3)
    labels = np.repeat(np.repeat(np.arange(36).reshape(6, 6), 4, 0), 4, 1)
    feats = rng.random((24, 24, 3)) * 40
    regions = describe_regions(labels, feats, n_colour_words=4)
    adj = region_adjacency(labels, feats)
    cfg = SplitConfig(affinity=model, n_neighbors=3, threshold_quantile=0.6, smoothness=2.0)
    rows, cols, w, t = weigh_pairs(regions, adj, cfg)
    near, near_t = edge_weights(model, regions, adj, quantile=0.6)
    m = adj.n_pairs
    assert t == near_t and np.array_equal(w[:m], 2.0 * near)
    kr, kc = rows[m:], cols[m:]
    assert kr.size > 0 and not set(zip(kr.tolist(), kc.tolist())) & set(
        zip(adj.rows.tolist(), adj.cols.tolist()))
    spec = get_affinity_model(model)
    if spec.long_range:
        d = spec.distance(regions, RegionAdjacency(kr, kc, np.full(kr.size, np.nan),
                                                   np.full(kr.size, np.nan)))
        thr = near_t
    else:
        d = np.sqrt(((regions.mean[kr] - regions.mean[kc]) ** 2).sum(1))
        thr = np.quantile(np.sqrt(((regions.mean[adj.rows] - regions.mean[adj.cols]) ** 2)
                                  .sum(1)), 0.6)
    expected = 2.0 * np.median(adj.border) * np.minimum(0, np.clip(d / thr - 1, -1, 1))
    assert np.allclose(w[m:], expected)
    assert spec.long_range == (model != "contrast")
