"""Tests of graph files (edge lists, GraphML) and side-label files.

Outside references: the G-set file format (first line `n m`, then `i j w`, 1-based;
G11 in tests/data and G14, stored as distributed in UTF-16 with CRLF, in the public
data) and networkx's GraphML reader/writer.
"""

from __future__ import annotations

import os

import networkx as nx
import numpy as np
import pytest

from segcut.errors import InputError
from segcut.graph import graph_from_edges
from segcut.maxcut.formats import read_graph, read_sides, write_graph, write_sides


def same_graph(a, b):
    return (a.n_vertices == b.n_vertices and np.array_equal(a.indptr, b.indptr)
            and np.array_equal(a.indices, b.indices) and np.allclose(a.weights, b.weights, rtol=0, atol=0))


def test_reads_g11(test_data):
    g = read_graph(test_data / "G11.txt")
    assert (g.n_vertices, g.n_edges) == (800, 1600)  # G-set G11: toroidal 800 x 2 edges
    assert set(np.unique(g.weights)) == {-1.0, 1.0}
    # each vertex of the toroidal grid has 4 neighbours
    assert np.all(np.diff(g.indptr) == 4)


def test_reads_utf16_crlf_g14(shared_data):
    g = read_graph(shared_data / "gset" / "G14.txt")
    assert (g.n_vertices, g.n_edges) == (800, 4694)  # as listed in best_known.csv


@pytest.mark.parametrize("encoding", ["utf-8", "utf-8-sig", "utf-16", "utf-16-le", "utf-16-be"])
@pytest.mark.parametrize("newline", ["\n", "\r\n"])
def test_encodings_and_line_ends(tmp_path, encoding, newline):
    text = newline.join(["# a comment", "", "4 3   # header", "1 2 1.5", "", "2 3", "3 4 -2"]) + newline
    path = tmp_path / "g.txt"
    path.write_bytes(text.encode(encoding))
    g = read_graph(path)
    assert g.edges()[2].tolist() == [1.5, 1.0, -2.0]


def test_duplicate_edges_are_summed(tmp_path):
    path = tmp_path / "dup.txt"
    path.write_text("3 3\n1 2 1\n2 1 2.5\n2 3 1\n")
    g = read_graph(path)
    assert g.n_edges == 2
    assert g.edges()[2].tolist() == [3.5, 1.0]


@pytest.mark.parametrize("suffix", [".txt", ".graphml"])
def test_round_trip(tmp_path, suffix):
    rng = np.random.default_rng(0)
    i = rng.integers(0, 30, 80)
    j = rng.integers(0, 30, 80)
    keep = i != j
    g = graph_from_edges(30, i[keep], j[keep], rng.normal(size=keep.sum()))
    path = tmp_path / f"g{suffix}"
    write_graph(g, path)
    assert same_graph(read_graph(path), g)


def test_graphml_written_by_networkx(tmp_path):
    # reference: a GraphML file produced by networkx itself
    h = nx.Graph()
    h.add_edge("a", "b", weight=2.0)
    h.add_edge("b", "c", weight=-1.0)
    h.add_edge("c", "d")
    path = tmp_path / "g.graphml"
    nx.write_graphml(h, path)
    g = read_graph(path)
    assert g.n_vertices == 4
    assert sorted(g.edges()[2].tolist()) == [-1.0, 1.0, 2.0]


def test_write_replaces_atomically(tmp_path):
    path = tmp_path / "g.txt"
    path.write_text("old content")
    write_graph(graph_from_edges(2, [0], [1]), path)
    assert path.read_text() == "2 1\n1 2 1\n"
    assert sorted(os.listdir(tmp_path)) == ["g.txt"]  # no temporary file left behind


BAD_FILES = [
    (b"", None, "empty graph file"),
    (b"# only a comment\n\n", None, "empty graph file"),
    (b"3\n1 2 1\n", 1, "expected a header 'n m'"),
    (b"three 2\n1 2 1\n", 1, "header must be two whole numbers"),
    (b"3 2\n1 2 1\n", 1, "announces 2 edges but the file has 1"),
    (b"3 1\n1 2 1\n2 3 1\n", 3, "more edges than the 1 the header announces"),
    (b"3 1\n1 4 1\n", 2, "vertex 4 is out of range 1..3"),
    (b"3 1\n0 2 1\n", 2, "vertex 0 is out of range 1..3"),
    (b"3 1\n1 x 1\n", 2, "vertex 'x' is not a whole number"),
    (b"3 1\n2 2 1\n", 2, "self-loop on vertex 2"),
    (b"3 1\n1 2 heavy\n", 2, "weight 'heavy' is not a number"),
    (b"3 1\n1 2 nan\n", 2, "weight 'nan' is not finite"),
    (b"3 1\n1 2 inf\n", 2, "weight 'inf' is not finite"),
    (b"3 1\n1 2 1 7\n", 2, "expected an edge 'i j w'"),
    (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\xff\xd8", None, "not a text file"),
    (b"\xff\xfe3\x00 \x004", None, "not a text file"),  # UTF-16 cut in mid-character
]


@pytest.mark.parametrize(("content", "line", "message"), BAD_FILES)
def test_bad_files_give_one_line_errors(tmp_path, content, line, message):
    path = tmp_path / "bad.txt"
    path.write_bytes(content)
    with pytest.raises(InputError, match=message) as info:
        read_graph(path)
    err = info.value
    assert err.line == line
    assert err.path == str(path)
    text = str(err)
    assert "\n" not in text
    assert text.startswith(f"{path}:{line}: " if line else f"{path}: ")


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        read_graph(tmp_path / "absent.txt")


def test_folder_instead_of_file(tmp_path):
    with pytest.raises(InputError, match="is a folder"):
        read_graph(tmp_path)


@pytest.mark.parametrize(("content", "message"), [
    ("<graphml><broken", "not a readable GraphML file"),
    ("", "not a readable GraphML file"),
])
def test_bad_graphml(tmp_path, content, message):
    path = tmp_path / "bad.graphml"
    path.write_text(content)
    with pytest.raises(InputError, match=message):
        read_graph(path)


def test_directed_graphml_is_refused(tmp_path):
    path = tmp_path / "d.graphml"
    nx.write_graphml(nx.DiGraph([(0, 1)]), path)
    with pytest.raises(InputError, match="directed"):
        read_graph(path)


def test_graphml_with_bad_weight(tmp_path):
    h = nx.Graph()
    h.add_edge(0, 1, weight="heavy")
    path = tmp_path / "w.graphml"
    nx.write_graphml(h, path)
    with pytest.raises(InputError, match="not a number"):
        read_graph(path)


def test_sides_round_trip(tmp_path):
    sides = np.array([1, -1, -1, 1], dtype=np.int8)
    path = tmp_path / "sides.txt"
    write_sides(sides, path)
    assert path.read_text() == "1\n0\n0\n1\n"
    assert np.array_equal(read_sides(path, n_vertices=4), sides)


def test_bad_sides_file(tmp_path):
    path = tmp_path / "sides.txt"
    path.write_text("1\n2\n")
    with pytest.raises(InputError, match="expected a side label 0 or 1"):
        read_sides(path)


def test_sides_count_must_match(tmp_path):
    path = tmp_path / "sides.txt"
    path.write_text("1\n0\n")
    with pytest.raises(InputError, match="2 side labels for a graph of 3 vertices"):
        read_sides(path, n_vertices=3)
