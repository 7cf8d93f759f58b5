"""Confidence of a split: hand-made graphs with known answers, brute force, invariances.

The outside reference is brute force over every cut of a tiny graph: the exact flip
cost of vertex ``i`` is ``V* - max V(y)`` over the cuts ``y`` that move ``i``
(without a terminal: that move at most half the vertices, the rest being the same
partition). The forced-flip cascades only ever find real cuts, so their cost can
never be below the exact one; on the hand-made graphs they are equal.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from checks import NUMPY_TRANSFORMS, brute_force_maxcut, reference_cut_value
from segcut.confidence import (
    DEFAULT_LEVEL,
    TIE,
    confident_disagreement,
    confident_reference,
    flip_costs,
    uncertain_fraction,
    vertex_confidence,
)
from segcut.config import SplitConfig
from segcut.graph import graph_from_edges
from segcut.pipeline import build_image_graph, split


def brute_force_confidence(graph, reference, terminal=None):
    """Exact ``1/2 + 1/2 clip(d_i / D_i)`` by trying every cut (tiny graphs only)."""
    n = graph.n_vertices
    reference = np.asarray(reference)
    best = reference_cut_value(graph, reference)
    other = np.full(n, -np.inf)
    for bits in itertools.product((1, -1), repeat=n):
        y = np.array(bits)
        if terminal is not None and y[terminal] != reference[terminal]:
            continue
        moved = y != reference
        if terminal is None and 2 * np.count_nonzero(moved) > n:
            continue
        value = reference_cut_value(graph, y)
        other[moved] = np.maximum(other[moved], value)
    cost = best - other
    i, j, w = graph.edges()
    weight = np.zeros(n)
    np.add.at(weight, i, np.abs(w))
    np.add.at(weight, j, np.abs(w))
    ratio = np.divide(cost, weight, out=np.zeros(n), where=weight > 0)
    out = 0.5 + 0.5 * np.clip(ratio, -1, 1)
    if terminal is not None:
        out[terminal] = 1.0
    return out


def test_two_equal_components_joined_by_a_weak_edge_are_uncertain_on_both_sides():
    # pairs 0-1 and 2-3 strongly repel inside (each pair is cut), one weak edge 1-2:
    # turning either pair over costs only the weak edge
    g = graph_from_edges(4, [0, 1, 2], [1, 2, 3], [9.0, 1.0, 9.0])
    value, sides = brute_force_maxcut(g)
    assert value == 19.0  # brute force
    c = vertex_confidence(g, sides)
    np.testing.assert_allclose(c, brute_force_confidence(g, sides))  # brute force
    assert c[1] == c[2] and c[0] == c[3]  # the graph is symmetric (common knowledge)
    assert np.all(c < DEFAULT_LEVEL)
    # the weak edge is 1/10 of vertex 1's edge weight and 1/9 of vertex 0's
    np.testing.assert_allclose(c, [0.5 + 0.5 / 9, 0.55, 0.55, 0.5 + 0.5 / 9])


def test_two_equal_components_with_a_terminal_tie_with_the_relaxation_roundings():
    # components {0, 1} and {2, 3} attract inside and repel each other weakly; the
    # terminal 4 has no say (one zero-weight edge): both orientations are optimal
    from segcut.maxcut.sdp import solve_sdp_relaxation

    g = graph_from_edges(5, [0, 2, 1, 4], [1, 3, 2, 0], [-5.0, -5.0, 1.0, 0.0])
    sides = np.array([1, 1, -1, -1, 1])
    assert reference_cut_value(g, sides) == brute_force_maxcut(g)[0]  # an optimum
    exact = brute_force_confidence(g, sides, terminal=4)
    np.testing.assert_allclose(exact, [TIE] * 4 + [1.0])
    # the cascades move one component at a time (for the weak edge, 1/6 or 1/5 of
    # the regions' edge weight): uncertain, above the exact tie
    alone = vertex_confidence(g, sides, terminal=4)
    np.testing.assert_allclose(alone[:4], [0.6, 0.5 + 0.5 / 6, 0.5 + 0.5 / 6, 0.6])
    assert np.all(alone[:4] < DEFAULT_LEVEL)
    # the relaxation's roundings also turn both components over: the exact tie
    factor = solve_sdp_relaxation(g, rng=0).factor
    both = vertex_confidence(g, sides, terminal=4, factor=factor, rng=0)
    np.testing.assert_allclose(both, exact)


def test_unique_strongly_separated_optimum_is_certain_everywhere():
    # a 4-cycle of repulsive edges: the alternating cut is the unique optimum (up to
    # the global flip); moving any vertex uncuts both of its edges (common knowledge)
    g = graph_from_edges(4, [0, 1, 2, 3], [1, 2, 3, 0], [10.0] * 4)
    value, sides = brute_force_maxcut(g)
    assert value == 40.0
    c = vertex_confidence(g, sides)
    assert c.tolist() == [1.0, 1.0, 1.0, 1.0]
    np.testing.assert_allclose(c, brute_force_confidence(g, sides))


def test_terminal_evidence_that_holds_every_region_gives_confidence_one():
    # path 0-1-2 attracting, each region pulled strongly to the terminal's side
    g = graph_from_edges(4, [0, 1, 3, 3, 3], [1, 2, 0, 1, 2], [-1.0, -1.0, -10.0, -10.0, -10.0])
    sides = np.ones(4, dtype=np.int8)
    c = vertex_confidence(g, sides, terminal=3)
    assert c.tolist() == [1.0, 1.0, 1.0, 1.0]
    np.testing.assert_allclose(c, brute_force_confidence(g, sides, terminal=3))


def test_a_vertex_whose_flip_costs_exactly_zero_gets_the_tie_value():
    # 0 and 2 repel strongly (opposite sides); 1 repels both equally: whichever side
    # it takes, exactly one of its two edges is cut
    g = graph_from_edges(3, [0, 0, 1], [2, 1, 2], [10.0, 1.0, 1.0])
    sides = np.array([1, 1, -1])
    assert reference_cut_value(g, sides) == brute_force_maxcut(g)[0]
    cost, _ = flip_costs(g, sides)
    assert cost[1] == 0.0
    c = vertex_confidence(g, sides)
    assert c[1] == TIE == 0.5
    np.testing.assert_allclose(c, brute_force_confidence(g, sides))


def test_a_vertex_without_edges_is_a_tie():
    g = graph_from_edges(3, [0], [1], [2.0])
    assert vertex_confidence(g, [1, -1, 1])[2] == TIE


def test_a_better_cut_that_moves_a_vertex_gives_confidence_below_the_tie():
    # reference puts 1 on the same side as both neighbours it repels: moving it gains
    # all of its edge weight, the lowest confidence
    g = graph_from_edges(3, [0, 1], [1, 2], [1.0, 1.0])
    c = vertex_confidence(g, [1, 1, 1])
    assert c[1] == 0.0
    np.testing.assert_allclose(c, brute_force_confidence(g, [1, 1, 1]))


@st.composite
def small_graphs(draw):
    n = draw(st.integers(2, 7))
    pairs = [(i, j) for i in range(n) for j in range(i + 1, n)]
    chosen = draw(st.lists(st.sampled_from(pairs), min_size=1, max_size=len(pairs), unique=True))
    weights = draw(st.lists(st.integers(-6, 6), min_size=len(chosen), max_size=len(chosen)))
    rows, cols = zip(*chosen)
    with_terminal = draw(st.booleans())
    return graph_from_edges(n, rows, cols, [float(w) for w in weights]), with_terminal


@settings(max_examples=60, deadline=None)
@given(small_graphs())
def test_cascade_cost_is_never_below_the_exact_flip_cost(case):
    # the cascades find real cuts, so V_other is at most the best one (brute force)
    g, with_terminal = case
    _, sides = brute_force_maxcut(g)
    terminal = g.n_vertices - 1 if with_terminal else None
    if terminal is not None and sides[terminal] != 1:
        sides = -sides
    c = vertex_confidence(g, sides, terminal=terminal)
    exact = brute_force_confidence(g, sides, terminal=terminal)
    assert np.all(c >= exact - 1e-12)
    assert np.all((c >= TIE - 1e-12) & (c <= 1.0))  # an optimum: no move gains


def test_bad_arguments_are_refused():
    g = graph_from_edges(3, [0], [1], [1.0])
    with pytest.raises(ValueError, match="margin must be a number > 0"):
        vertex_confidence(g, [1, 1, 1], margin=0)
    with pytest.raises(ValueError, match="terminal must be a vertex index"):
        vertex_confidence(g, [1, 1, 1], terminal=3)
    with pytest.raises(ValueError, match="one entry per vertex"):
        vertex_confidence(g, [1, 1])


def test_hyperplane_roundings_are_deterministic_for_a_seed():
    from segcut.maxcut.sdp import solve_sdp_relaxation

    rng = np.random.default_rng(3)
    n = 14
    i, j = np.triu_indices(n, 1)
    keep = rng.random(i.size) < 0.4
    g = graph_from_edges(n, i[keep], j[keep], rng.normal(size=int(keep.sum())))
    _, sides = brute_force_maxcut(g)
    factor = solve_sdp_relaxation(g, rng=0).factor
    a = vertex_confidence(g, sides, factor=factor, rng=5)
    b = vertex_confidence(g, sides, factor=factor, rng=5)
    assert a.tobytes() == b.tobytes()
    # more cuts in the ensemble can only lower the confidence (brute force bound kept)
    assert np.all(a <= vertex_confidence(g, sides) + 1e-12)
    assert np.all(a >= brute_force_confidence(g, sides) - 1e-12)


def _scene(seed, shape=(40, 52)):
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:shape[0], :shape[1]] / max(shape)
    truth = (yy - 0.35) ** 2 + (xx - 0.4) ** 2 < 0.18 ** 2
    image = np.where(truth[..., None], [0.8, 0.5, 0.25], [0.3, 0.45, 0.35])
    image = image * (0.8 + 0.3 * xx)[..., None] + rng.normal(0, 0.08, image.shape)
    return np.clip(image, 0, 1)


FAST = SplitConfig(method="local", n_superpixels=120)


def test_split_confidence_is_a_pixel_map_in_range_and_recorded():
    r = split(_scene(0), FAST, rng=1)
    assert r.confidence.shape == r.mask.shape and r.confidence.dtype == np.float64
    assert r.confidence.min() >= 0.0 and r.confidence.max() <= 1.0
    record = r.to_record()
    assert record["uncertain_fraction"] == round(float(np.mean(r.confidence < 0.9)), 6)
    # pixels of one superpixel share one value
    for label in np.unique(r.labels)[:20]:
        assert np.unique(r.confidence[r.labels == label]).size == 1


def test_confidence_can_be_turned_off():
    r = split(_scene(0), FAST.replace(confidence=False), rng=1)
    assert r.confidence is None and r.to_record()["uncertain_fraction"] is None
    assert "confidence" not in r.seconds
    on = split(_scene(0), FAST, rng=1)
    assert np.array_equal(on.mask, r.mask)  # the mask does not depend on it


def test_uncertain_level_is_a_config_setting():
    cfg = FAST.replace(uncertain_level=0.6)
    assert SplitConfig.from_toml(cfg.to_toml()) == cfg
    assert "[confidence]" in cfg.to_toml()
    r = split(_scene(2), cfg, rng=0)
    assert r.to_record()["uncertain_fraction"] == round(uncertain_fraction(r.confidence, 0.6), 6)
    with pytest.raises(ValueError, match="uncertain_level must be <= 1"):
        SplitConfig(uncertain_level=1.5)


def test_confidence_is_deterministic_for_a_seed():
    a = split(_scene(1), FAST, rng=7).confidence
    b = split(_scene(1), FAST, rng=7).confidence
    assert a.tobytes() == b.tobytes()


@pytest.mark.parametrize("name", sorted(NUMPY_TRANSFORMS))
def test_confidence_moves_with_the_image_under_flips_and_turns(name):
    # numpy's flip/rot90/transpose are the reference for each transform
    transform = NUMPY_TRANSFORMS[name]
    image = _scene(3)
    base = split(image, FAST, rng=0)
    moved = split(np.ascontiguousarray(transform(image)), FAST, rng=0)
    assert np.array_equal(moved.mask, transform(base.mask))
    assert np.array_equal(moved.confidence, transform(base.confidence))
    assert moved.to_record()["uncertain_fraction"] == base.to_record()["uncertain_fraction"]


def test_no_contrast_image_is_certain():
    r = split(np.zeros((16, 16)), FAST)
    assert r.confidence.tolist() == np.ones((16, 16)).tolist()
    assert r.to_record()["uncertain_fraction"] == 0.0


def test_confident_disagreement_counts_only_confident_pixels():
    reference = np.array([[True, True], [False, False]])
    confidence = np.array([[1.0, 0.5], [0.95, 0.2]])
    everything_wrong = ~reference
    # two of the four pixels are confident (>= 0.9): by hand
    assert confident_disagreement(everything_wrong, reference, confidence) == 0.5
    assert confident_disagreement(reference, reference, confidence) == 0.0
    with pytest.raises(ValueError, match="must be equal"):
        confident_disagreement(reference[0], reference, confidence)


def test_score_reports_disagreement_with_the_confident_split():
    from segcut.scoring import score

    image = _scene(4)
    cfg = FAST.replace(method="auto")
    ig = build_image_graph(image, cfg, rng=0)
    reference, confidence = confident_reference(ig, ig.start, margin=cfg.confidence_margin)
    result = score(image, {"segcut": reference, "inverted": ~reference}, config=cfg, rng=0)
    inverted = result.masks[1].confident_disagreement
    # the inverted mask contradicts segcut on every confident pixel of its own split
    assert inverted > 0.5
    assert result.masks[0].confident_disagreement < inverted
    off = score(image, [reference], config=cfg.replace(confidence=False), rng=0)
    assert off.masks[0].confident_disagreement is None
