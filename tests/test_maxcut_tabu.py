"""Tests of the tabu search (the default max-cut method).

Outside references: exhaustive enumeration (tests/checks.py), textbook max-cut values
(common knowledge) and the best known cut of G-set G11 (564, Benlic & Hao 2013; the
file and its source are in tests/data).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from checks import assert_valid_cut, brute_force_maxcut
from segcut.graph import cut_value, graph_from_edges
from segcut.maxcut import solve_maxcut
from segcut.maxcut.formats import read_graph
from segcut.maxcut.tabu import tabu_search

G11_BEST_KNOWN = 564  # Benlic & Hao, Eng. Appl. Artif. Intell. 26(3), 2013


def random_signed_graph(n, degree, seed, *, integer=True):
    rng = np.random.default_rng(seed)
    m = max(1, n * degree // 2)
    i = rng.integers(0, n, m)
    j = rng.integers(0, n, m)
    keep = i != j
    if integer:
        w = rng.choice([-1.0, 1.0], size=keep.sum())
    else:
        w = rng.normal(size=keep.sum())
    return graph_from_edges(n, i[keep], j[keep], w)


@pytest.mark.parametrize("n", [6, 10, 14, 16])
def test_finds_the_brute_force_optimum_on_small_graphs(n):
    # reference: exhaustive enumeration; a tabu search of 20k moves finds the optimum
    for seed in range(3):
        g = random_signed_graph(n, 4, seed=10 * n + seed, integer=False)
        best, _ = brute_force_maxcut(g)
        result = solve_maxcut(g, method="tabu", rng=seed, max_moves=20_000, start_from="random")
        assert_valid_cut(g, result, local_optimum=True)
        assert result.value <= best + 1e-9
        assert result.value == pytest.approx(best, abs=1e-9)


@pytest.mark.parametrize("n", [8, 12, 16])
def test_buckets_find_the_brute_force_optimum_on_integer_weights(n):
    # reference: exhaustive enumeration; whole-number weights use the gain buckets
    for seed in range(3):
        g = random_signed_graph(n, 5, seed=20 * n + seed, integer=True)
        best, _ = brute_force_maxcut(g)
        start = np.ones(n, dtype=np.int8)
        sides, info = tabu_search(g, start, rng=seed, max_moves=5_000)
        assert info["selection"] == "buckets"
        assert cut_value(g, sides) == best


def test_selection_must_suit_the_weights():
    g = random_signed_graph(30, 4, seed=0, integer=False)
    with pytest.raises(ValueError, match="selection='buckets' needs whole-number weights"):
        tabu_search(g, np.ones(30, dtype=np.int8), max_moves=10, selection="buckets")


@pytest.mark.parametrize("selection", ["scan", "trees"])
def test_scan_and_trees_make_the_same_moves(selection):
    # both selections break ties by the same random keys: identical trajectories
    g = random_signed_graph(300, 6, seed=3)
    start = np.random.default_rng(0).choice(np.array([-1, 1], dtype=np.int8), size=300)
    sides, info = tabu_search(g, start, rng=5, max_moves=30_000, selection=selection)
    reference, _ = tabu_search(g, start, rng=5, max_moves=30_000, selection="scan")
    assert np.array_equal(sides, reference)
    assert info["moves"] == 30_000 and info["perturbations"] > 0


def test_same_seed_same_cut_and_different_seed_runs():
    g = random_signed_graph(400, 5, seed=1)
    a = solve_maxcut(g, rng=11, max_moves=50_000, start_from="random")
    b = solve_maxcut(g, rng=11, max_moves=50_000, start_from="random")
    assert np.array_equal(a.sides, b.sides) and a.value == b.value
    assert a.status == "iteration_limit" and a.n_iter == 50_000


@pytest.mark.parametrize("n", [9, 21, 101])
def test_odd_cycle(n):
    # common knowledge: odd cycle C_n has max cut n - 1
    g = graph_from_edges(n, np.arange(n), (np.arange(n) + 1) % n)
    assert solve_maxcut(g, rng=0, max_moves=20_000).value == n - 1


@pytest.mark.parametrize("n", [7, 20, 41])
def test_complete_graph(n):
    # common knowledge: unit K_n has max cut floor(n^2 / 4)
    i, j = map(np.array, zip(*itertools.combinations(range(n), 2)))
    g = graph_from_edges(n, i, j)
    assert solve_maxcut(g, rng=0, max_moves=20_000).value == n * n // 4


def test_g11_reaches_99_percent_of_best_known_in_two_seconds(test_data):
    # reference: best known cut 564 of G-set G11 (Benlic & Hao 2013)
    g = read_graph(test_data / "G11.txt")
    solve_maxcut(g, max_moves=100)  # compile or load the kernels outside the clock
    result = solve_maxcut(g, time_limit=2.0, rng=0)
    assert_valid_cut(g, result, local_optimum=True)
    assert result.method == "tabu"
    assert result.value >= 0.99 * G11_BEST_KNOWN
    assert result.value <= G11_BEST_KNOWN  # nobody has found better
    assert result.seconds < 2.5


def test_start_is_used_and_never_made_worse():
    g = random_signed_graph(200, 4, seed=2)
    start = solve_maxcut(g, method="local", rng=0).sides
    result = solve_maxcut(g, rng=0, max_moves=1, start=start)
    assert result.value >= solve_maxcut(g, method="local", rng=0).value


def test_sdp_start_brings_a_certified_bound():
    pytest.importorskip("segcut.maxcut.sdp")
    g = random_signed_graph(120, 6, seed=4, integer=False)
    result = solve_maxcut(g, rng=0, max_moves=20_000, start_from="sdp")
    assert_valid_cut(g, result, local_optimum=True)
    assert result.info["start_from"] == "sdp"
    assert result.upper_bound is not None and result.upper_bound >= result.value


def test_auto_start_on_real_weights_uses_the_sdp():
    pytest.importorskip("segcut.maxcut.sdp")
    g = random_signed_graph(60, 4, seed=6, integer=False)
    assert solve_maxcut(g, rng=0, max_moves=1000).info["start_from"] == "sdp"
    # +-1 weights on a torus-like ring with chords: no duplicate edges to sum
    ring = np.arange(60)
    h = graph_from_edges(60, np.concatenate([ring, ring]),
                         np.concatenate([(ring + 1) % 60, (ring + 7) % 60]),
                         np.where(np.arange(120) % 3 == 0, -1.0, 1.0))
    assert np.all(np.abs(h.weights) == 1.0)
    assert solve_maxcut(h, rng=0, max_moves=1000).info["start_from"] == "random"


def test_time_limit_status():
    g = random_signed_graph(500, 4, seed=8)
    result = solve_maxcut(g, rng=0, time_limit=0.2, start_from="random")
    assert result.status == "time_limit" and result.n_iter > 0
    assert result.seconds < 1.0


@pytest.mark.parametrize(("options", "message"), [
    ({"start_from": "best"}, "start_from must be one of random, sdp, auto"),
    ({"max_moves": -1}, "max_moves must be a whole number >= 0"),
    ({"tenure": 0}, "tenure must be a whole number >= 1"),
    ({"stall_moves": 2.5}, "stall_moves must be a whole number >= 1"),
    ({"temperature": 1.0}, "does not take option"),
])
def test_bad_options_are_refused(options, message):
    g = random_signed_graph(20, 3, seed=0)
    with pytest.raises(ValueError, match=message):
        solve_maxcut(g, **options)


def test_tabu_search_needs_a_budget():
    g = random_signed_graph(20, 3, seed=0)
    with pytest.raises(ValueError, match="needs max_moves or time_limit"):
        tabu_search(g, np.ones(20, dtype=np.int8))


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2 ** 32 - 1), n=st.integers(2, 40), scale=st.sampled_from([0.5, 3.0, 1e3]))
def test_scaling_weights_scales_the_value_with_the_same_seed(seed, n, scale):
    g = random_signed_graph(n, 3, seed, integer=False)
    i, j, w = g.edges()
    scaled = graph_from_edges(n, i, j, w * scale)
    a = solve_maxcut(g, rng=seed, max_moves=2000, start_from="random")
    b = solve_maxcut(scaled, rng=seed, max_moves=2000, start_from="random")
    assert np.array_equal(a.sides, b.sides)
    assert b.value == pytest.approx(a.value * scale, rel=1e-9, abs=1e-9)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2 ** 32 - 1), n=st.integers(2, 40))
def test_flipping_all_sides_keeps_the_value(seed, n):
    g = random_signed_graph(n, 3, seed, integer=False)
    result = solve_maxcut(g, rng=seed, max_moves=500, start_from="random")
    assert cut_value(g, -result.sides) == pytest.approx(result.value, abs=1e-12)


@pytest.mark.parametrize("selection", ["buckets", "scan", "trees"])
def test_chunking_does_not_change_the_search(selection, monkeypatch):
    # the kernel keeps all its state in arrays: stopping every 1000 moves to look at
    # the clock must give exactly the moves of long uninterrupted chunks
    import segcut.maxcut.tabu as tabu_module

    g = random_signed_graph(300, 5, seed=9, integer=selection == "buckets")
    start = np.random.default_rng(1).choice(np.array([-1, 1], dtype=np.int8), size=300)
    runs = []
    for chunk_seconds in (1e-12, 1e3):
        monkeypatch.setattr(tabu_module, "_CHUNK_SECONDS", chunk_seconds)
        runs.append(tabu_search(g, start, rng=2, max_moves=40_000, selection=selection))
    (a, info_a), (b, info_b) = runs
    assert np.array_equal(a, b)
    assert info_a["perturbations"] == info_b["perturbations"] > 0


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.sampled_from([-2.0, -0.5, -0.0, 0.0, 0.5, 1.0, 3.0, 1e-300]),
                          st.integers(0, 3), st.booleans()), min_size=1, max_size=70))
def test_scan_selection_is_the_best_gain_then_tie_then_first_index(entries):
    # reference: brute force over the vertices (Python's max by key, first on equal keys)
    from segcut.maxcut._kernels import _scan_best

    gains = np.array([g for g, _, _ in entries], dtype=np.float64)
    tie = np.array([t for _, t, _ in entries], dtype=np.uint64)
    tabu = np.array([int(b) for _, _, b in entries], dtype=np.int8)

    def best(kind):
        members = [v for v in range(len(entries)) if tabu[v] == kind]
        if not members:
            return -1
        top = max((gains[v], int(tie[v])) for v in members)
        return next(v for v in members if (gains[v], int(tie[v])) == top)

    assert _scan_best(gains, tie, tabu) == (best(0), best(1))
