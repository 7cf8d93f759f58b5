"""``segcut split`` and ``segcut report`` through ``main([...])``: exit codes, messages and
the files written."""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from segcut.batch import BatchProgress, load_records
from segcut.config import SplitConfig, load_config
from segcut_cli.commands.split import ProgressPrinter
from segcut_cli.main import main


def _write_scene(path: Path, index: int) -> None:
    rng = np.random.default_rng(index)
    yy, xx = np.mgrid[0:96, 0:96]
    disc = (yy - 44 - 2 * index) ** 2 + (xx - 50) ** 2 < (18 + 3 * index) ** 2
    image = np.where(disc[..., None], (0.8, 0.25, 0.2), (0.2, 0.45, 0.7))
    image = image + rng.normal(0, 0.03, image.shape)
    path.parent.mkdir(parents=True, exist_ok=True)
    Image.fromarray((np.clip(image, 0, 1) * 255).astype(np.uint8)).save(path)


@pytest.fixture
def inputs(tmp_path) -> Path:
    src = tmp_path / "in"
    _write_scene(src / "one.png", 0)
    _write_scene(src / "nested" / "two.png", 1)
    (src / "notes.txt").write_text("not an image\n")
    return src


def test_split_quiet_success_writes_the_run_folder(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), "--jobs", "1", "--quiet"]) == 0
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == ""
    for name in ("run.toml", "records.jsonl", "summary.csv", "report.html", "masks/one.png",
                 "masks/nested/two.png", "overlays/one.png", "overlays/nested/two.png"):
        assert (out / name).is_file(), name
    assert sorted(load_records(out)) == ["nested/two.png", "one.png"]


def test_split_prints_skipped_files_and_a_summary_then_resumes(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), "-j", "1"]) == 0
    captured = capsys.readouterr()
    assert f"segcut: skipped {inputs / 'notes.txt'}: not a known image type (.txt)" in captured.err
    assert "segcut: 2 images: 2 split, 0 failed, 1 files skipped;" in captured.out
    assert main(["split", str(inputs), "-o", str(out), "-j", "1"]) == 0
    assert "2 split (2 from an earlier run)" in capsys.readouterr().out


def test_split_options_reach_the_config(inputs, tmp_path):
    config_file = tmp_path / "base.toml"
    config_file.write_text(SplitConfig(n_superpixels=80, seed=9).to_toml())
    out = tmp_path / "out"
    code = main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q",
                 "--config", str(config_file), "--prior", "border,center",
                 "--box", "10,12,80,84", "--seed", "3", "--affinity", "contrast"])
    assert code == 0
    config = load_config(out / "run.toml")
    assert config == SplitConfig(n_superpixels=80, seed=3, prior=("border", "center"),
                                 box=(10, 12, 80, 84), affinity="contrast")
    record = load_records(out)["one.png"]
    assert record["config_hash"] == config.config_hash()


def test_split_json_output(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    (inputs / "bad.png").write_bytes(b"")
    assert main(["split", str(inputs), "-o", str(out), "-j", "1", "--json", "--no-report"]) == 1
    captured = capsys.readouterr()
    data = json.loads(captured.out)
    assert (data["total"], data["done"], data["failed"], data["resumed"]) == (3, 2, 1, 0)
    assert data["failures"][0]["input"] == "bad.png"
    assert data["skipped"] == [{"path": str(inputs / "notes.txt"),
                                "reason": "not a known image type (.txt)"}]
    assert data["report"] is None and not (out / "report.html").exists()
    assert captured.err == ""


def test_failed_input_gives_exit_1_and_one_line_per_problem(inputs, tmp_path, capsys):
    (inputs / "empty.png").write_bytes(b"")
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), "-j", "1", "-q"]) == 1
    lines = capsys.readouterr().err.splitlines()
    assert len(lines) == 2
    assert lines[0].startswith(f"segcut: {inputs / 'empty.png'}: ")
    assert lines[1].startswith("segcut: 3 images: 2 split, 1 failed")
    assert load_records(out)["empty.png"]["status"] == "failed"


@pytest.mark.parametrize("args, message", [
    (["--box", "1,2,3"], "expected X0,Y0,X1,Y1"),
    (["--jobs", "0"], "expected a number >= 1"),
    (["--prior", "sky"], "prior 'sky' is not known"),
    (["--method", "nope"], "unknown max-cut method 'nope'"),
    (["--affinity", "nope"], "unknown affinity model 'nope'"),
    (["--scheduler", "tcp://h:1", "--dask-local", "2"], "not allowed with argument"),
])
def test_bad_options_are_usage_errors(inputs, tmp_path, capsys, args, message):
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), *args]) == 2
    assert message in capsys.readouterr().err
    assert not out.exists()


def test_missing_input_empty_folder_and_foreign_run_folder(inputs, tmp_path, capsys):
    assert main(["split", str(tmp_path / "nope"), "-o", str(tmp_path / "o1")]) == 1
    assert capsys.readouterr().err == f"segcut: {tmp_path / 'nope'}: no such file or folder\n"
    (tmp_path / "empty").mkdir()
    assert main(["split", str(tmp_path / "empty"), "-o", str(tmp_path / "o2"), "-q"]) == 1
    assert "no image files found" in capsys.readouterr().err
    out = tmp_path / "o3"
    assert main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q"]) == 0
    code = main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q",
                 "--prior", "border"])
    assert code == 1
    err = capsys.readouterr().err
    assert err.startswith(f"segcut: {out}: this run folder holds results of a different "
                          "configuration") and err.count("\n") == 1


def test_report_command(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), "-j", "1", "-q", "--no-report"]) == 0
    assert main(["report", str(out), "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == {"report": str(out / "report.html")}
    assert (out / "report.html").read_text(encoding="utf-8").count("<tr data-input=") == 2
    assert main(["report", str(tmp_path)]) == 1
    assert "not a run folder" in capsys.readouterr().err


def _progress(done, failed=0, total=10, resumed=0, rate=2.0, eta=4.0):
    return BatchProgress(total=total, done=done, failed=failed, resumed=resumed, elapsed=1.0,
                         rate=rate, eta=eta, last=None)


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_bar_on_a_terminal_and_lines_elsewhere():
    terminal = _Terminal()
    printer = ProgressPrinter(terminal, width=10)
    printer(_progress(4, failed=1, resumed=2))
    assert terminal.getvalue() == ("\r[#####-----] 5/10 images, 4 done (2 resumed), 1 failed, "
                                   "2.00 images/s, 0:04 left\x1b[K")
    printer(_progress(9, failed=1, eta=0.0))
    assert terminal.getvalue().endswith("0:00 left\x1b[K\n")  # the bar ends its line when done

    plain = io.StringIO()
    printer = ProgressPrinter(plain, interval=3600.0)
    printer(_progress(0, rate=None, eta=None))
    printer(_progress(1))  # within the interval: nothing
    printer(_progress(10, eta=0.0))  # the last one is always shown
    assert plain.getvalue().splitlines() == [
        "segcut: 0/10 images, 0 done, 0 failed, - images/s, --:-- left",
        "segcut: 10/10 images, 10 done, 0 failed, 2.00 images/s, 0:00 left",
    ]
