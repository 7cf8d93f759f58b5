"""Region features and adjacency against brute force and scipy/scikit-image references."""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import ndimage as ndi

from segcut.regions import (
    assign_colour_words,
    describe_regions,
    learn_colour_words,
    region_adjacency,
    word_histograms,
)


def _random_labels(rng, shape, n):
    labels = rng.integers(0, n, size=shape)
    _, labels = np.unique(labels, return_inverse=True)
    return labels.reshape(shape)


def _brute_adjacency(labels, feats):
    border, contrast = Counter(), Counter()
    it = np.ndindex(labels.shape)
    for idx in it:
        for axis in range(labels.ndim):
            nb = list(idx)
            nb[axis] += 1
            if nb[axis] >= labels.shape[axis]:
                continue
            nb = tuple(nb)
            a, b = labels[idx], labels[nb]
            if a != b:
                key = (min(a, b), max(a, b))
                border[key] += 1
                contrast[key] += float(np.linalg.norm(feats[idx] - feats[nb]))
    return border, contrast


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), three_d=st.booleans())
def test_adjacency_matches_brute_force(seed, three_d):
    rng = np.random.default_rng(seed)
    shape = (3, 5, 6) if three_d else (7, 9)
    labels = _random_labels(rng, shape, 6)
    feats = rng.random(shape + (2,))
    adj = region_adjacency(labels, feats)
    border, contrast = _brute_adjacency(labels, feats)
    assert sorted(border) == list(zip(adj.rows.tolist(), adj.cols.tolist()))
    for r, c, b, k in zip(adj.rows, adj.cols, adj.border, adj.contrast):
        assert b == border[(r, c)]
        assert np.isclose(k, contrast[(r, c)] / border[(r, c)])


def test_adjacency_matches_skimage_rag():
    from skimage.graph import RAG

    rng = np.random.default_rng(3)
    labels = _random_labels(rng, (12, 15), 9)
    adj = region_adjacency(labels)
    rag = RAG(labels, connectivity=1)  # 4-connectivity, as ours
    expected = sorted((min(u, v), max(u, v)) for u, v in rag.edges)
    assert list(zip(adj.rows.tolist(), adj.cols.tolist())) == expected


def test_features_match_scipy_ndimage():
    rng = np.random.default_rng(4)
    labels = _random_labels(rng, (20, 25), 12)
    feats = rng.random((20, 25, 3)) * 100
    r = describe_regions(labels, feats, n_colour_words=5)
    index = np.arange(labels.max() + 1)
    for c in range(3):
        assert np.allclose(r.mean[:, c], ndi.mean(feats[..., c], labels, index))
    assert np.allclose(r.std, ndi.standard_deviation(feats[..., 0], labels, index))
    assert np.array_equal(r.area, ndi.sum_labels(np.ones((20, 25)), labels, index))
    assert np.allclose(r.histogram.sum(axis=1), 1.0)
    frame = np.zeros((20, 25), bool)
    frame[[0, -1], :] = frame[:, [0, -1]] = True
    assert np.array_equal(r.frame, ndi.sum_labels(frame, labels, index))


def test_colour_words_do_not_depend_on_order():
    rng = np.random.default_rng(5)
    colours = np.concatenate([rng.normal(m, 1.0, (30, 3)) for m in (0, 20, 40, 60)])
    weights = rng.random(colours.shape[0]) + 0.5
    a = learn_colour_words(colours, weights, 4)
    perm = rng.permutation(colours.shape[0])
    b = learn_colour_words(colours[perm], weights[perm], 4)
    assert np.allclose(a, b)
    # four well separated blobs: the centres are the blob means (common knowledge)
    assert np.allclose(np.sort(a[:, 0]), [0, 20, 40, 60], atol=1.0)


def test_words_and_histograms_against_brute_force():
    rng = np.random.default_rng(6)
    feats = rng.random((6, 7, 3))
    centres = rng.random((4, 3))
    words = assign_colour_words(feats, centres)
    d = ((feats[..., None, :] - centres) ** 2).sum(-1)
    assert np.array_equal(words, np.argmin(d, axis=-1))
    labels = _random_labels(rng, (6, 7), 3)
    hist = word_histograms(labels, words, labels.max() + 1, 4)
    for region in range(labels.max() + 1):
        for word in range(4):
            assert hist[region, word] == np.count_nonzero((labels == region) & (words == word))


@pytest.mark.parametrize("channels", [1, 2, 3])
def test_colour_words_are_the_nearest_centre_first_on_ties(channels):
    # reference: numpy's argmin over all squared distances (first minimum on ties);
    # whole-number values keep every distance exact, a repeated centre makes ties
    from segcut.regions import assign_colour_words

    rng = np.random.default_rng(channels)
    features = rng.integers(0, 40, (70, 90, channels)).astype(np.float64)
    centres = rng.integers(0, 40, (9, channels)).astype(np.float64)
    centres[6] = centres[2]
    centres[7] = (centres[0] + centres[1]) / 2.0
    d = ((features.reshape(-1, 1, channels) - centres[None]) ** 2).sum(-1)
    expected = np.argmin(d, axis=1).reshape(70, 90)
    assert np.array_equal(assign_colour_words(features, centres), expected)
