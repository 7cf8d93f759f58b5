"""A separately installed package adds a max-cut method through the entry-point group.

The plugin is written during the test into a temporary folder (package plus a
hand-written ``.dist-info`` with ``entry_points.txt``, as an installer would leave
it), put on ``sys.path`` / ``PYTHONPATH``, and removed afterwards: nothing is
installed into the environment.
"""

from __future__ import annotations

import importlib
import json
import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from checks import assert_valid_cut
from segcut.errors import SegcutWarning
from segcut.graph import graph_from_edges
from segcut.maxcut import _common, available_methods, solve_maxcut
from segcut_cli.main import main

PLUGIN_CODE = '''
"""A tiny max-cut plugin for the tests: alternate sides by vertex number."""
import numpy as np

from segcut.graph import cut_value
from segcut.maxcut import CutResult


def solve_alternating(graph, *, time_limit=None, rng=None):
    """Even vertices on one side, odd vertices on the other."""
    sides = np.where(np.arange(graph.n_vertices) % 2 == 0, 1, -1).astype(np.int8)
    return CutResult(sides=sides, value=cut_value(graph, sides), upper_bound=None, gap=None,
                     method="alternate", status="iteration_limit", message="alternating sides")
'''


def write_plugin(site, *, entry_points: str, dist="segcut_test_plugin", module="segcut_test_plugin"):
    (site / module).mkdir(parents=True)
    (site / module / "__init__.py").write_text(PLUGIN_CODE)
    info = site / f"{dist}-0.1.dist-info"
    info.mkdir()
    (info / "METADATA").write_text(f"Metadata-Version: 2.1\nName: {dist}\nVersion: 0.1\n")
    (info / "entry_points.txt").write_text(entry_points)
    (info / "RECORD").write_text("")


@pytest.fixture
def plugin_site(tmp_path, monkeypatch):
    site = tmp_path / "site"
    write_plugin(site, entry_points=textwrap.dedent("""\
        [segcut.maxcut_methods]
        alternate = segcut_test_plugin:solve_alternating
        """))
    monkeypatch.syspath_prepend(str(site))
    importlib.invalidate_caches()
    monkeypatch.setattr(_common, "_ENTRY_POINTS_LOADED", False)
    yield site
    _common.unregister_method("alternate")
    sys.modules.pop("segcut_test_plugin", None)


def square_file(tmp_path):
    path = tmp_path / "square.txt"
    path.write_text("4 4\n1 2\n2 3\n3 4\n4 1\n")
    return path


def test_plugin_method_is_listed_and_solves(plugin_site):
    assert "alternate" in available_methods()
    g = graph_from_edges(6, np.arange(6), (np.arange(6) + 1) % 6)
    result = solve_maxcut(g, method="alternate")
    assert_valid_cut(g, result)
    assert result.value == 6.0  # an even cycle: alternating sides cut every edge


def test_plugin_options_are_checked(plugin_site):
    g = graph_from_edges(2, [0], [1])
    with pytest.raises(ValueError, match="does not take option"):
        solve_maxcut(g, method="alternate", max_moves=3)


def test_plugin_in_the_command_line(plugin_site, tmp_path, capsys):
    assert main(["maxcut", str(square_file(tmp_path)), "--method", "alternate", "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    assert record["method"] == "alternate" and record["value"] == 4.0
    assert main(["maxcut", "--help"]) == 0
    assert "alternate" in capsys.readouterr().out


def test_plugin_in_a_separate_process(plugin_site, tmp_path):
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(plugin_site), env.get("PYTHONPATH")) if p)
    done = subprocess.run([sys.executable, "-m", "segcut_cli", "maxcut", str(square_file(tmp_path)),
                           "--method", "alternate", "--json"],
                          capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    record = json.loads(done.stdout)
    assert record["method"] == "alternate" and record["value"] == 4.0


def test_broken_plugin_warns_and_is_skipped(tmp_path, monkeypatch):
    site = tmp_path / "site"
    write_plugin(site, entry_points="[segcut.maxcut_methods]\nghost = segcut_no_such_module:solve\n",
                 dist="segcut_broken_plugin", module="segcut_broken_plugin")
    monkeypatch.syspath_prepend(str(site))
    importlib.invalidate_caches()
    monkeypatch.setattr(_common, "_ENTRY_POINTS_LOADED", False)
    with pytest.warns(SegcutWarning, match="plugin 'ghost' of segcut.maxcut_methods"):
        methods = available_methods()
    assert "ghost" not in methods and "tabu" in methods
