"""Tests of the exact (branch and bound) max-cut method.

Outside references: exhaustive enumeration of all splits (tests/checks.py, plain numpy)
and textbook max-cut values (common knowledge).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from checks import assert_valid_cut, brute_force_maxcut
from segcut.graph import graph_from_edges
from segcut.maxcut import solve_maxcut
from segcut.maxcut.exact import MAX_EXACT_VERTICES, exact_maxcut


def random_signed_graph(n, density, seed, *, integer=False):
    rng = np.random.default_rng(seed)
    pairs = [(a, b) for a, b in itertools.combinations(range(n), 2) if rng.random() < density]
    if not pairs:
        pairs = [(0, 1)]
    i, j = map(np.array, zip(*pairs))
    w = rng.integers(-3, 4, len(i)).astype(float) if integer else rng.normal(size=len(i))
    return graph_from_edges(n, i, j, w)


def complete_graph(n):
    i, j = map(np.array, zip(*itertools.combinations(range(n), 2)))
    return graph_from_edges(n, i, j)


def cycle(n):
    return graph_from_edges(n, np.arange(n), (np.arange(n) + 1) % n)


@pytest.mark.parametrize("n", [2, 3, 5, 8, 11, 13, 16])
@pytest.mark.parametrize("density", [0.3, 0.9])
def test_exact_equals_brute_force(n, density):
    # reference: exhaustive enumeration of every split
    for seed in range(3):
        g = random_signed_graph(n, density, seed=100 * n + seed)
        best, _ = brute_force_maxcut(g)
        result = solve_maxcut(g, method="exact", rng=seed)
        assert_valid_cut(g, result)
        assert result.value == pytest.approx(best, abs=1e-9)
        assert result.status == "optimal"
        assert result.upper_bound == pytest.approx(best, abs=1e-9)


@pytest.mark.parametrize("n", range(2, 13))
def test_complete_graph_optimum_is_floor_n_squared_over_four(n):
    # common knowledge: unit-weight K_n has max cut floor(n^2 / 4)
    assert solve_maxcut(complete_graph(n), method="exact").value == n * n // 4


@pytest.mark.parametrize("n", [3, 5, 7, 9, 15, 29])
def test_odd_cycle_optimum_is_n_minus_one(n):
    # common knowledge: an odd cycle is not bipartite, so one edge stays uncut
    assert solve_maxcut(cycle(n), method="exact").value == n - 1


@pytest.mark.parametrize("n", [4, 10, 30])
def test_even_cycle_cuts_every_edge(n):
    # common knowledge: even cycles are bipartite
    assert solve_maxcut(cycle(n), method="exact").value == n


def test_thirty_vertices_signed_graph_is_solved():
    g = random_signed_graph(MAX_EXACT_VERTICES, 0.5, seed=7, integer=True)
    result = solve_maxcut(g, method="exact", rng=0)
    assert result.status == "optimal"
    # any other method's cut is at most the optimum
    other = solve_maxcut(g, method="tabu", rng=0, max_moves=20_000)
    assert other.value <= result.value + 1e-9


def test_too_large_graph_is_refused():
    with pytest.raises(ValueError, match="at most 30 vertices; this graph has 31"):
        solve_maxcut(cycle(31), method="exact")


def test_graph_without_edges():
    g = graph_from_edges(4, [], [])
    result = solve_maxcut(g, method="exact")
    assert result.value == 0.0 and result.status == "optimal"


def test_time_limit_returns_an_unproven_cut():
    # K_30 is the worst case of the bound; a tiny time limit stops the search early
    g = complete_graph(30)
    sides, complete, nodes = exact_maxcut(g, time_limit=1e-6, rng=0)
    assert not complete and nodes > 0
    result = solve_maxcut(g, method="exact", time_limit=1e-6)
    assert result.status == "time_limit" and result.upper_bound is None
    assert_valid_cut(g, result)


@settings(max_examples=30, deadline=None)
@given(n=st.integers(2, 10), seed=st.integers(0, 2 ** 32 - 1),
       scale=st.floats(0.01, 100.0), density=st.floats(0.2, 1.0))
def test_scaling_weights_scales_the_optimum(n, seed, scale, density):
    g = random_signed_graph(n, density, seed)
    i, j, w = g.edges()
    scaled = graph_from_edges(n, i, j, w * scale)
    a = solve_maxcut(g, method="exact").value
    b = solve_maxcut(scaled, method="exact").value
    assert b == pytest.approx(a * scale, rel=1e-9, abs=1e-9)


@settings(max_examples=30, deadline=None)
@given(n=st.integers(2, 10), seed=st.integers(0, 2 ** 32 - 1), density=st.floats(0.2, 1.0))
def test_relabelling_vertices_keeps_the_optimum(n, seed, density):
    g = random_signed_graph(n, density, seed)
    perm = np.random.default_rng(seed).permutation(n)
    i, j, w = g.edges()
    relabelled = graph_from_edges(n, perm[i], perm[j], w)
    a = solve_maxcut(g, method="exact").value
    b = solve_maxcut(relabelled, method="exact").value
    assert b == pytest.approx(a, abs=1e-9)
