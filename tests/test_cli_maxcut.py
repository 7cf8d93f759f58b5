"""Tests of ``segcut maxcut``: output, JSON record, sides file, exit codes.

Outside references: the best known cut of G-set G11 (564, Benlic & Hao 2013) bounds
every value; the cut of the written sides file is recomputed from the graph file.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from segcut.graph import cut_value
from segcut.maxcut.formats import read_graph, read_sides
from segcut_cli.main import main

G11_BEST_KNOWN = 564

JSON_KEYS = {"value", "upper_bound", "gap", "method", "status", "seconds", "solve_seconds",
             "n_vertices", "n_edges"}


def test_text_output(test_data, capsys):
    assert main(["maxcut", str(test_data / "G11.txt"), "--time-limit", "0.3"]) == 0
    out = capsys.readouterr().out
    assert "cut value" in out and "upper bound" in out and "seconds" in out
    value = float(out.split("cut value")[1].split()[0])
    assert 0.95 * G11_BEST_KNOWN <= value <= G11_BEST_KNOWN


def test_json_record_and_sides_file(test_data, tmp_path, capsys):
    sides_path = tmp_path / "sides.txt"
    code = main(["maxcut", str(test_data / "G11.txt"), "--time-limit", "0.3", "--json",
                 "-o", str(sides_path), "--seed", "3"])
    assert code == 0
    record = json.loads(capsys.readouterr().out)
    assert JSON_KEYS <= set(record)
    assert (record["n_vertices"], record["n_edges"]) == (800, 1600)
    # the default is the portfolio "auto": best cut and a certified bound, which can
    # never be below the best known cut
    assert record["method"] == "tabu+sdp"
    assert record["upper_bound"] >= G11_BEST_KNOWN >= record["value"]
    assert record["gap"] == pytest.approx(
        (record["upper_bound"] - record["value"]) / record["upper_bound"])
    assert 0 < record["solve_seconds"] <= record["seconds"]
    graph = read_graph(test_data / "G11.txt")
    sides = read_sides(sides_path, n_vertices=800)
    assert cut_value(graph, sides) == record["value"] <= G11_BEST_KNOWN


def test_exact_method_reports_its_bound(tmp_path, capsys):
    path = tmp_path / "pentagon.txt"
    path.write_text("5 5\n1 2\n2 3\n3 4\n4 5\n5 1\n")
    assert main(["maxcut", str(path), "--method", "exact", "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    # common knowledge: the odd cycle C_5 has max cut 4
    assert record["value"] == 4.0 and record["upper_bound"] == 4.0 and record["gap"] == 0.0
    assert record["status"] == "optimal"


def test_same_seed_same_sides_file(test_data, tmp_path):
    paths = [tmp_path / "a.txt", tmp_path / "b.txt"]
    for path in paths:
        assert main(["maxcut", str(test_data / "G11.txt"), "--method", "local", "--seed", "7",
                     "-o", str(path)]) == 0
    assert paths[0].read_bytes() == paths[1].read_bytes()


def test_sdp_method_reports_a_bound(test_data, capsys):
    pytest.importorskip("segcut.maxcut.sdp")
    from segcut.maxcut import available_methods

    if "sdp" not in available_methods():
        pytest.skip("the sdp method is not registered")
    assert main(["maxcut", str(test_data / "G11.txt"), "--method", "sdp", "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    # the certified bound can never be below the best known cut
    assert record["upper_bound"] >= G11_BEST_KNOWN >= record["value"]


def test_unknown_method_is_a_usage_error(test_data, capsys):
    assert main(["maxcut", str(test_data / "G11.txt"), "--method", "guess"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "unknown method 'guess'" in err and "tabu" in err


def test_bad_file_gives_one_line_and_exit_1(tmp_path, capsys):
    path = tmp_path / "bad.txt"
    path.write_text("3 2\n1 2 1\n2 7 1\n")
    assert main(["maxcut", str(path)]) == 1
    captured = capsys.readouterr()
    assert captured.err == f"segcut: {path}:3: vertex 7 is out of range 1..3\n"
    assert captured.out == ""


def test_missing_file(tmp_path, capsys):
    assert main(["maxcut", str(tmp_path / "absent.txt")]) == 2  # usage error (README)
    assert capsys.readouterr().err == f"segcut: {tmp_path / 'absent.txt'}: no such file\n"


def test_bad_time_limit_is_a_usage_error(test_data, capsys):
    assert main(["maxcut", str(test_data / "G11.txt"), "--time-limit", "-1"]) == 2
    assert "expected a positive number" in capsys.readouterr().err


def test_sides_file_is_not_written_on_error(tmp_path):
    bad = tmp_path / "bad.txt"
    bad.write_text("2 1\n1 1\n")
    out = tmp_path / "sides.txt"
    out.write_text("keep me\n")
    assert main(["maxcut", str(bad), "-o", str(out)]) == 1
    assert out.read_text() == "keep me\n"


def test_python_dash_m_segcut_runs(tmp_path):
    path = tmp_path / "square.txt"
    path.write_text("4 4\n1 2\n2 3\n3 4\n4 1\n")
    done = subprocess.run([sys.executable, "-m", "segcut", "maxcut", str(path), "--json",
                           "--method", "local"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)["value"] == 4.0
    assert np.isfinite(json.loads(done.stdout)["seconds"])


def test_method_that_refuses_the_graph_is_a_usage_error_in_command_line_words(test_data, capsys):
    code = main(["maxcut", str(test_data / "G11.txt"), "--method", "exact", "--json"])
    assert code == 2
    captured = capsys.readouterr()
    assert "--method tabu" in captured.err and "method='" not in captured.err
    assert "Traceback" not in captured.err
    payload = json.loads(captured.out)
    assert payload["exit_code"] == 2 and "--method tabu" in payload["error"]
