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
    assert "segcut: 2 images: 2 split, 0 failed, 1 file skipped;" in captured.out
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
    (["--dask-local", "2", "--jobs", "3"], "--jobs sets the local process pool"),
    (["--box", "-5,0,50,50"], "expected pixel positions >= 0"),
    (["--box", "50,0,10,50"], "expected X0 < X1 and Y0 < Y1"),
    (["--superpixels", "1"], "expected at least 8 superpixels"),
])
def test_bad_options_are_usage_errors(inputs, tmp_path, capsys, args, message):
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), *args]) == 2
    assert message in capsys.readouterr().err
    assert not out.exists()


def test_bad_options_print_one_json_object(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), "--box", "-5,0,50,50", "--json"]) == 2
    payload = json.loads(capsys.readouterr().out)
    assert payload["command"] == "split" and payload["exit_code"] == 2
    assert "expected pixel positions >= 0" in payload["error"]


@pytest.mark.parametrize("case", ["missing", "out_is_file", "bad_config", "foreign"])
def test_whole_command_failures_print_json_and_exit_2(inputs, tmp_path, capsys, case):
    out = tmp_path / "out"
    paths = [str(inputs / "one.png")]
    extra = []
    if case == "missing":
        paths = [str(tmp_path / "nope")]
    elif case == "out_is_file":
        out.write_text("x")
    elif case == "bad_config":
        (tmp_path / "bad.toml").write_text("[solver]\nmethod = 3\n")
        extra = ["--config", str(tmp_path / "bad.toml")]
    else:
        assert main(["split", *paths, "-o", str(out), "-j", "1", "-q"]) == 0
        extra = ["--prior", "border"]
    capsys.readouterr()
    code = main(["split", *paths, "-o", str(out), "-j", "1", "--json", *extra])
    captured = capsys.readouterr()
    assert code == 2, captured.err
    payload = json.loads(captured.out)
    assert payload["exit_code"] == 2 and payload["command"] == "split" and payload["error"]
    assert captured.err.count("\n") == 1


def test_one_missing_path_among_several_is_a_failed_input(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["split", str(inputs / "one.png"), str(tmp_path / "nope.png"), "-o", str(out),
                 "-j", "1", "-q"])
    assert code == 1
    err = capsys.readouterr().err
    assert f"segcut: {tmp_path / 'nope.png'}: no such file or folder" in err
    assert "2 images: 1 split, 1 failed" in err
    assert sorted(load_records(out)) == ["one.png"]


def test_force_takes_over_a_folder_of_another_configuration(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q"]) == 0
    code = main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q",
                 "--prior", "border"])
    assert code == 2
    assert "or give --force to start it again" in capsys.readouterr().err
    code = main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q",
                 "--prior", "border", "--force"])
    assert code == 0
    config = load_config(out / "run.toml")
    assert config.prior == ("border",)
    assert {r["config_hash"] for r in load_records(out).values()} == {config.config_hash()}


def test_extreme_settings_are_clamped_or_warned(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q",
                 "--superpixels", "100000", "--box", "10,10,500,60"])
    assert code == 0
    err = capsys.readouterr().err
    assert "(--superpixels) 100000 lowered to 20000" in err
    assert load_config(out / "run.toml").n_superpixels == 20000
    record = load_records(out)["one.png"]
    assert any("reaches outside the 96 x 96 image; clipped to 10,10,96,60" in w
               for w in record["warnings"])
    # a config file gets the same guards as the options
    tiny = tmp_path / "tiny.toml"
    tiny.write_text(SplitConfig(n_superpixels=2).to_toml())
    assert main(["split", str(inputs / "one.png"), "-o", str(tmp_path / "o2"), "-q",
                 "--config", str(tiny)]) == 2
    assert "must be at least 8" in capsys.readouterr().err


def test_missing_input_empty_folder_and_foreign_run_folder(inputs, tmp_path, capsys):
    assert main(["split", str(tmp_path / "nope"), "-o", str(tmp_path / "o1")]) == 2
    assert capsys.readouterr().err == f"segcut: {tmp_path / 'nope'}: no such file or folder\n"
    (tmp_path / "empty").mkdir()
    assert main(["split", str(tmp_path / "empty"), "-o", str(tmp_path / "o2"), "-q"]) == 1
    assert "no image files found" in capsys.readouterr().err
    out = tmp_path / "o3"
    assert main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q"]) == 0
    code = main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q",
                 "--prior", "border"])
    assert code == 2  # a refused folder is a usage error
    err = capsys.readouterr().err
    assert err.startswith(f"segcut: {out}: this run folder holds results of a different "
                          "configuration") and err.count("\n") == 1


def test_report_command(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), "-j", "1", "-q", "--no-report"]) == 0
    assert main(["report", str(out), "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == {"command": "report",
                                                   "report": str(out / "report.html")}
    page = (out / "report.html").read_text(encoding="utf-8")
    assert page.count("<tr data-input=") == 2
    assert 'href="run.toml"' in page and "<dt>prior</dt><dd>none</dd>" in page
    assert "<dt>seeds</dt><dd>none</dd>" in page and "<dt>method</dt><dd>auto</dd>" in page
    assert main(["report", str(tmp_path)]) == 2
    assert "not a run folder" in capsys.readouterr().err
    assert main(["report", str(tmp_path / "nowhere"), "--json"]) == 2
    assert json.loads(capsys.readouterr().out)["error"].endswith("no such file or folder")


def _progress(done, failed=0, total=10, resumed=0, rate=2.0, eta=4.0, working=None, since=None):
    return BatchProgress(total=total, done=done, failed=failed, resumed=resumed, elapsed=1.0,
                         rate=rate, eta=eta, last=None, working=working, working_since=since)


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_bar_on_a_terminal_and_lines_elsewhere():
    terminal = _Terminal()
    printer = ProgressPrinter(terminal, width=10, heartbeat=None)
    printer(_progress(4, failed=1, resumed=2))
    assert terminal.getvalue() == ("\r[#####-----] 5/10 images, 4 done (2 resumed), 1 failed, "
                                   "2.00 images/s, 0:04 left\x1b[K")
    printer(_progress(9, failed=1, eta=0.0))
    assert terminal.getvalue().endswith("0:00 left\x1b[K\n")  # the bar ends its line when done

    plain = io.StringIO()
    printer = ProgressPrinter(plain, interval=3600.0, heartbeat=None)
    printer(_progress(0, rate=None, eta=None))
    printer(_progress(1))  # within the interval: nothing
    printer(_progress(10, eta=0.0))  # the last one is always shown
    assert plain.getvalue().splitlines() == [
        "segcut: 0/10 images, 0 done, 0 failed, - images/s, estimating time left",
        "segcut: 10/10 images, 10 done, 0 failed, 2.00 images/s, 0:00 left",
    ]


def test_progress_names_the_image_being_worked_on_and_refreshes():
    import time

    terminal = _Terminal()
    printer = ProgressPrinter(terminal, width=10, heartbeat=0.05)
    started = time.monotonic() - 65
    printer(_progress(0, total=1, rate=None, eta=None, working="big.png", since=started))
    time.sleep(0.3)
    printer.close()
    frames = terminal.getvalue().split("\r")[1:]
    assert len(frames) >= 3  # redrawn while the image is being split
    assert "working on big.png for 1:05" in frames[0]
    assert "estimating time left" in frames[0]


def test_a_single_image_reports_its_stages(inputs, tmp_path):
    from segcut.batch import run_batch

    seen = []
    run_batch([inputs / "one.png"], tmp_path / "out", SplitConfig(), jobs=1, report=False,
              progress=seen.append)
    stages = [p.stage for p in seen if p.working == "one.png" and p.stage]
    from segcut.pipeline import STAGES

    # the stages of segcut.split, as it announces them (its progress argument)
    assert stages == ["reading", "splitting", *[f"splitting: {s}" for s in STAGES], "writing"]
    assert seen[-1].stage is None and seen[-1].done == 1
    line = ProgressPrinter(io.StringIO(), heartbeat=None).text(
        next(p for p in seen if p.stage == "splitting: solve"))
    assert "working on one.png (splitting: solve) for" in line


def test_confidence_option_writes_the_maps_and_turns_confidence_on(inputs, tmp_path):
    from segcut.confidence import confidence_to_uint8
    from segcut.io import read_image
    from segcut.pipeline import split

    config = tmp_path / "off.toml"
    config.write_text("[confidence]\nconfidence = false\n")
    out = tmp_path / "out"
    assert main(["split", str(inputs), "-o", str(out), "-j", "1", "-q", "--config",
                 str(config), "--confidence"]) == 0
    assert load_config(out / "run.toml").confidence is True  # the option overrides the file
    records = load_records(out)
    assert {k: r["confidence"] for k, r in records.items()} == {
        "one.png": "confidence/one.png", "nested/two.png": "confidence/nested/two.png"}
    # Reference: segcut.split on the same file with the record's seed.
    data = read_image(inputs / "nested" / "two.png")
    direct = split(data.array, SplitConfig(), channel_axis=data.channel_axis,
                   rng=records["nested/two.png"]["seed"])
    written = np.asarray(Image.open(out / "confidence" / "nested" / "two.png"))
    assert np.array_equal(written, confidence_to_uint8(direct.confidence))
    assert main(["split", str(inputs), "-o", str(out), "-j", "1", "--json", "--config",
                 str(config), "--confidence"]) == 0
    # without the option there are no maps, and score does not take it
    plain = tmp_path / "plain"
    assert main(["split", str(inputs / "one.png"), "-o", str(plain), "-j", "1", "-q"]) == 0
    assert not (plain / "confidence").exists() and "confidence" not in load_records(plain)[
        "one.png"]
    assert main(["score", str(inputs / "one.png"), str(plain / "masks" / "one.png"),
                 "--confidence"]) == 2


def test_estimate_leaves_out_the_first_image():
    """The first image also compiles kernels: the estimate uses the median of the others."""
    from segcut.batch.run import _Tally

    seen = []
    tally = _Tally(total=10, resumed=0, workers=2, progress=seen.append)
    tally.finished({"input": "a", "status": "ok", "seconds": 90.0})
    assert seen[-1].eta is None  # one image says nothing yet
    tally.finished({"input": "b", "status": "ok", "seconds": 1.0})
    tally.finished({"input": "c", "status": "ok", "seconds": 3.0})
    # median of (1, 3) = 2 s per image, 7 images left, 2 workers
    assert seen[-1].eta == 2.0 * 7 / 2


def test_a_new_config_option_is_one_table_entry(inputs, tmp_path, monkeypatch):
    """One ConfigOption added to CONFIG_OPTIONS is parsed and reaches the run's config."""
    from segcut_cli import options

    extra = options.ConfigOption(("--compactness",), "compactness", options.positive_float,
                                 "C", "superpixel compactness")
    monkeypatch.setattr(options, "CONFIG_OPTIONS", options.CONFIG_OPTIONS + (extra,))
    out = tmp_path / "out"
    assert main(["split", str(inputs / "one.png"), "-o", str(out), "-j", "1", "-q",
                 "--compactness", "7.5"]) == 0
    assert load_config(out / "run.toml").compactness == 7.5
    assert main(["split", str(inputs / "one.png"), "-o", str(out), "--compactness", "-1"]) == 2


def test_every_config_option_maps_to_a_config_field():
    from dataclasses import fields

    from segcut_cli.main import build_parser
    from segcut_cli.options import CONFIG_OPTIONS

    names = {f.name for f in fields(SplitConfig)}
    help_text = build_parser()._subparsers._group_actions[0].choices["split"].format_help()
    for option in CONFIG_OPTIONS:
        assert option.field in names, option.flags
        assert option.flags[0] in help_text
