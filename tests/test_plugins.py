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


# --- a prior, an affinity model and a max-cut method from one separate package ----------

EXTENSIONS_CODE = '''
"""Test extensions of segcut: a prior, an affinity model and a max-cut method."""
import json
import os

import numpy as np

from segcut.affinity import AffinityModel
from segcut.graph import cut_value
from segcut.maxcut import CutResult, MaxcutMethod
from segcut.maxcut.local import descend


def middle_band(spatial_shape, config):
    """The middle third of the columns is foreground, the rest background."""
    out = -np.ones(spatial_shape)
    cols = spatial_shape[-1]
    out[..., cols // 3:cols - cols // 3] = 1.0
    return out


def _lightness(features, adjacency, *, scale=1.0):
    with open(os.environ["SEGCUT_TEST_MARKER"], "a") as fh:
        fh.write(json.dumps({"scale": scale, "pairs": int(adjacency.rows.size)}) + "\\n")
    return scale * np.abs(features.mean[adjacency.rows, 0] - features.mean[adjacency.cols, 0])


LIGHTNESS = AffinityModel(name="lightness", distance=_lightness, shape="gaussian",
                          options={"scale": 1.0}, long_range=True,
                          description="difference of mean lightness (gaussian sign)")


def _polish(graph, *, time_limit=None, rng=None, start=None):
    sides = np.ones(graph.n_vertices, np.int8) if start is None else np.asarray(start, np.int8)
    sides, moves = descend(graph, sides, rng=rng)
    return CutResult(sides=sides, value=cut_value(graph, sides), upper_bound=None, gap=None,
                     method="polish", status="local_optimum", message=f"{moves} flips")


POLISH = MaxcutMethod(name="polish", solve=_polish, options=frozenset({"start"}),
                      warm_start=True, description="1-flip descent from the given start")
'''

EXTENSIONS_ENTRY_POINTS = """\
[segcut.priors]
middle_band = segcut_test_extensions:middle_band

[segcut.affinity_models]
lightness = segcut_test_extensions:LIGHTNESS

[segcut.maxcut_methods]
polish = segcut_test_extensions:POLISH
"""


def write_extensions(site):
    package = site / "segcut_test_extensions"
    package.mkdir(parents=True)
    (package / "__init__.py").write_text(EXTENSIONS_CODE)
    info = site / "segcut_test_extensions-0.1.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: segcut_test_extensions\n"
                                   "Version: 0.1\n")
    (info / "entry_points.txt").write_text(EXTENSIONS_ENTRY_POINTS)
    (info / "RECORD").write_text("")


def test_prior_affinity_and_method_of_a_separate_package_go_through_split(tmp_path):
    from segcut.io import read_mask, write_image

    site = tmp_path / "site"
    write_extensions(site)
    # a featureless noisy gray image: only the prior can say where the foreground is
    image = (np.random.default_rng(0).random((40, 48)) * 30 + 100).astype(np.uint8)
    write_image(image, tmp_path / "noise.png")
    (tmp_path / "run.toml").write_text(
        '[affinity]\naffinity = "lightness"\naffinity_options = {scale = 2.0}\n')
    marker = tmp_path / "marker.jsonl"
    env = dict(os.environ, SEGCUT_TEST_MARKER=str(marker))
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(site), env.get("PYTHONPATH")) if p)
    done = subprocess.run(
        [sys.executable, "-m", "segcut_cli", "split", str(tmp_path / "noise.png"), "-o",
         str(tmp_path / "out"), "--prior", "middle_band", "--affinity", "lightness", "--method",
         "polish", "--config", str(tmp_path / "run.toml"), "--jobs", "1", "--json"],
        capture_output=True, text=True, env=env, timeout=300)
    assert done.returncode == 0, done.stderr
    record = json.loads((tmp_path / "out" / "records.jsonl").read_text().splitlines()[0])
    assert record["status"] == "ok" and record["method"] == "polish"
    assert record["orientation"] == "terminal"  # the prior put a terminal in the graph
    # the affinity model weighed the neighbour pairs
    calls = [json.loads(line) for line in marker.read_text().splitlines()]
    assert calls and all(call["pairs"] > 0 for call in calls)
    # the prior decided the split: the middle band is foreground, the sides background
    mask = read_mask(tmp_path / "out" / "masks" / "noise.png")
    assert mask[:, 18:30].mean() > 0.9 and mask[:, :12].mean() < 0.1
    assert mask[:, 36:].mean() < 0.1
    help_text = subprocess.run([sys.executable, "-m", "segcut_cli", "split", "--help"],
                               capture_output=True, text=True, env=env, timeout=120).stdout
    for name in ("middle_band", "lightness", "polish"):
        assert name in help_text
