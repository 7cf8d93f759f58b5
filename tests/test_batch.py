"""Folder runs (segcut.batch): finding inputs, resuming, refusing mixed configs, surviving
SIGKILL, isolating bad files, and equal bytes from every executor.

The scenes are generated here (one disc on a plain ground under noise). Each mask a
run writes is checked against a direct call of ``segcut.split`` on the same file with
the record's seed, so a mask written under the wrong name, or with a seed that depends
on worker order, fails.
"""

from __future__ import annotations

import csv
import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from PIL import Image

from segcut.batch import (SUMMARY_COLUMNS, find_inputs, hash_file, image_seed, load_records,
                          run_batch, write_report)
from segcut.config import SplitConfig
from segcut.errors import ConfigError, InputError

PROJECT_ROOT = Path(__file__).resolve().parent.parent
SIZE = 96  # above the pipeline's pixel-grid limit: the superpixel path photographs take


def scene(index: int, size: int = SIZE):
    """RGB uint8 image of a disc (foreground) on a plain ground, and the disc's mask."""
    rng = np.random.default_rng(1000 + index)
    yy, xx = np.mgrid[0:size, 0:size]
    cy, cx = rng.uniform(0.35, 0.65, 2) * size
    radius = rng.uniform(0.16, 0.26) * size
    truth = (yy - cy) ** 2 + (xx - cx) ** 2 < radius ** 2
    fg, bg = rng.uniform(0.0, 0.4, 3), rng.uniform(0.6, 1.0, 3)
    if index % 2:
        fg, bg = bg, fg
    image = np.where(truth[..., None], fg, bg) + rng.normal(0, 0.04, (size, size, 3))
    return (np.clip(image, 0, 1) * 255).astype(np.uint8), truth


def write_scenes(folder: Path, names) -> dict:
    truths = {}
    for index, name in enumerate(names):
        image, truth = scene(index)
        path = folder / name
        path.parent.mkdir(parents=True, exist_ok=True)
        Image.fromarray(image).save(path)
        truths[name] = truth
    return truths


def direct_mask(path: Path, seed: int, seeds_path: Path | None = None) -> np.ndarray:
    """The mask of one file from segcut.split itself (the engine, outside any batch)."""
    from segcut import io
    from segcut.pipeline import split

    data = io.read_image(path)
    seeds = None if seeds_path is None else io.read_seeds(seeds_path)
    return split(data.array, SplitConfig(), seeds=seeds, channel_axis=data.channel_axis,
                 rng=seed).mask


def read_mask(path: Path) -> np.ndarray:
    return np.asarray(Image.open(path)) > 127


def folder_bytes(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


NAMES = ["a.png", "b.png", "sub/c.png", "sub/deeper/d.png"]


@pytest.fixture(scope="module")
def scenes(tmp_path_factory):
    folder = tmp_path_factory.mktemp("scenes")
    truths = write_scenes(folder, NAMES)
    return folder, truths


@pytest.fixture(scope="module")
def serial_run(scenes, tmp_path_factory):
    folder, _ = scenes
    out = tmp_path_factory.mktemp("serial") / "out"
    summary = run_batch([folder], out, SplitConfig(), jobs=1, report=False)
    return out, summary


# --- finding inputs -------------------------------------------------------------------

def test_find_inputs_recurses_sorts_and_lists_skipped(tmp_path):
    for name in ["z.png", "a/b.JPG", "a/notes.txt", ".hidden.png", "a/.cache/x.png",
                 "données/é.tif", "m/x.bmp", "m/x.png"]:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_bytes(b"")
    listing = find_inputs([tmp_path])
    assert [i.input for i in listing.items] == ["a/b.JPG", "données/é.tif", "m/x.bmp", "m/x.png",
                                                "z.png"]
    reasons = {Path(p).name: r for p, r in listing.skipped}
    assert reasons == {"notes.txt": "not a known image type (.txt)"}
    # m/x.bmp and m/x.png share the name up to the suffix: both keep their suffix
    assert [i.output for i in listing.items] == ["a/b", "données/é", "m/x.bmp", "m/x.png", "z"]


def test_every_input_gets_its_own_outputs(tmp_path):
    """Same stems in one folder and same relative paths in two folders: no input is lost."""
    for name in ["day1/a.png", "day1/a.jpg", "day2/a.png", "day2/sub/b.png", "c.png"]:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_bytes(b"")
    listing = find_inputs([tmp_path / "day1", tmp_path / "day2", tmp_path / "c.png"])
    pairs = [(i.input, i.output) for i in listing.items]
    # a.png is in both folders: those two are prefixed; then nothing clashes up to the suffix
    assert pairs == [("a.jpg", "a"), ("day1/a.png", "day1/a"), ("day2/a.png", "day2/a"),
                     ("sub/b.png", "sub/b"), ("c.png", "c")]
    assert len({i.output for i in listing.items}) == len(listing.items) == 5
    assert listing.skipped == ()
    # the same file given twice is one input
    twice = find_inputs([tmp_path / "c.png", tmp_path / "c.png"])
    assert [i.input for i in twice.items] == ["c.png"] and len(twice.skipped) == 1
    # two folders of the same name: numbered in the order given
    (tmp_path / "x" / "in").mkdir(parents=True)
    (tmp_path / "y" / "in").mkdir(parents=True)
    (tmp_path / "x" / "in" / "a.png").write_bytes(b"")
    (tmp_path / "y" / "in" / "a.png").write_bytes(b"1")
    same = find_inputs([tmp_path / "x" / "in", tmp_path / "y" / "in"])
    assert [i.input for i in same.items] == ["in~1/a.png", "in~2/a.png"]


def test_same_stem_inputs_each_get_a_mask_and_a_record(tmp_path):
    src = tmp_path / "in"
    write_scenes(src, ["a.png", "sub/a.png"])
    image, _ = scene(5)
    Image.fromarray(image).save(src / "a.jpg", quality=95)
    other = tmp_path / "other"
    write_scenes(other, ["a.png"])
    out = tmp_path / "out"
    summary = run_batch([src, other], out, SplitConfig(), jobs=1, report=False)
    assert (summary.total, summary.done, summary.failed) == (4, 4, 0)
    records = load_records(out)
    # only the clashing relative path a.png is prefixed with its folder's name
    assert sorted(records) == ["a.jpg", "in/a.png", "other/a.png", "sub/a.png"]
    masks = {k: r["mask"] for k, r in records.items()}
    assert masks == {"a.jpg": "masks/a.png", "in/a.png": "masks/in/a.png",
                     "other/a.png": "masks/other/a.png", "sub/a.png": "masks/sub/a.png"}
    for r in records.values():
        assert (out / r["mask"]).is_file() and (out / r["overlay"]).is_file()


def test_find_inputs_include_exclude_and_ignore(tmp_path):
    for name in ["keep/a.png", "keep/b_mask.png", "drop/c.png", "out/masks/a.png"]:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_bytes(b"")
    listing = find_inputs([tmp_path], include=["keep/*", "c.png"], exclude=["*_mask.png"],
                          ignore=[tmp_path / "out"])
    assert [i.input for i in listing.items] == ["drop/c.png", "keep/a.png"]
    file_listing = find_inputs([tmp_path / "keep" / "a.png"])
    assert [i.input for i in file_listing.items] == ["a.png"]


def test_find_inputs_missing_path_is_one_line_error(tmp_path):
    with pytest.raises(InputError, match=r"nothere: no such file or folder$"):
        find_inputs([tmp_path / "nothere"])


def test_hash_file_matches_hashlib(tmp_path):
    import hashlib

    data = os.urandom(3 * (1 << 20) + 17)  # more than one read chunk
    (tmp_path / "x").write_bytes(data)
    assert hash_file(tmp_path / "x") == "sha256:" + hashlib.sha256(data).hexdigest()


@settings(max_examples=30)
@given(st.integers(0, 2**31), st.text(min_size=1, max_size=20))
def test_image_seed_depends_only_on_its_arguments(seed, text):
    value = image_seed(seed, text)
    assert value == image_seed(seed, text)
    assert 0 <= value < 2**63
    assert value != image_seed(seed, text + "x")


# --- records.jsonl ------------------------------------------------------------------------

@settings(max_examples=40, deadline=None)
@given(st.lists(st.sampled_from(["a.png", "b.png", "c/d.png"]), min_size=1, max_size=8),
       st.integers(0, 10_000))
def test_load_records_keeps_last_whole_line_per_input(tmp_path_factory, inputs, cut):
    folder = tmp_path_factory.mktemp("records")
    lines = [json.dumps({"input": name, "n": k}) + "\n" for k, name in enumerate(inputs)]
    data = "".join(lines).encode()
    torn = data[: len(data) - 1 - cut % len(lines[-1])]  # the last line loses 1+ bytes
    (folder / "records.jsonl").write_bytes(torn)
    expected = {}
    for k, name in enumerate(inputs[:-1]):
        expected[name] = {"input": name, "n": k}
    if torn.endswith(b"}"):  # only the newline was lost: the line is whole JSON
        expected[inputs[-1]] = {"input": inputs[-1], "n": len(inputs) - 1}
    assert load_records(folder) == expected


# --- a run --------------------------------------------------------------------------------

def test_serial_run_writes_everything(scenes, serial_run):
    folder, truths = scenes
    out, summary = serial_run
    assert (summary.total, summary.done, summary.failed, summary.resumed) == (4, 4, 0, 0)
    records = load_records(out)
    assert sorted(records) == sorted(NAMES)
    lines = (out / "records.jsonl").read_text().splitlines()
    assert len(lines) == len(NAMES)  # compacted: one line per input
    for name, truth in truths.items():
        r = records[name]
        assert r["status"] == "ok" and r["input"] == name
        assert r["config_hash"] == SplitConfig().config_hash()
        assert r["input_hash"] == hash_file(folder / name)
        assert r["seed"] == image_seed(0, r["input_hash"])
        assert r["upper_bound"] >= r["value"] - 1e-6 * abs(r["upper_bound"])
        assert set(r["versions"]) >= {"segcut", "numpy", "python"}
        stem = name.rsplit(".", 1)[0]
        assert r["mask"] == f"masks/{stem}.png" and r["overlay"] == f"overlays/{stem}.png"
        mask = read_mask(out / r["mask"])
        assert mask.shape == truth.shape
        assert np.array_equal(mask, direct_mask(folder / name, r["seed"])), name
        assert abs(mask.mean() - r["foreground_fraction"]) < 1e-9
    with open(out / "summary.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert tuple(rows[0]) == SUMMARY_COLUMNS
    assert [row["input"] for row in rows] == sorted(NAMES)
    for row in rows:
        assert float(row["cut_value"]) == records[row["input"]]["value"]
        assert float(row["gap"]) == records[row["input"]]["gap"]
    run_toml = (out / "run.toml").read_text()
    assert SplitConfig.from_toml(run_toml) == SplitConfig()
    assert f"config hash {SplitConfig().config_hash()}" in run_toml


def test_resume_skips_finished_and_redoes_changed(scenes, serial_run, tmp_path):
    folder, _ = scenes
    out = tmp_path / "out"
    work = tmp_path / "in"
    write_scenes(work, NAMES)
    first = run_batch([work], out, SplitConfig(), jobs=1, report=False)
    assert first.done == 4
    before = folder_bytes(out / "masks")
    mtimes = {p: p.stat().st_mtime_ns for p in (out / "masks").rglob("*.png")}
    again = run_batch([work], out, SplitConfig(), jobs=1, report=False)
    assert (again.done, again.resumed, again.failed) == (4, 4, 0)
    assert {p: p.stat().st_mtime_ns for p in mtimes} == mtimes  # nothing rewritten
    # a changed file is redone (content hash), the others are not
    image, _ = scene(7)
    Image.fromarray(image).save(work / "b.png")
    changed = run_batch([work], out, SplitConfig(), jobs=1, report=False)
    assert changed.resumed == 3 and changed.done == 4
    assert load_records(out)["b.png"]["input_hash"] == hash_file(work / "b.png")
    assert folder_bytes(out / "masks")["b.png"] != before["b.png"]
    # force redoes all, with the same bytes
    forced = run_batch([work], out, SplitConfig(), jobs=1, report=False, force=True)
    assert forced.resumed == 0 and forced.done == 4
    assert len((out / "records.jsonl").read_text().splitlines()) == 4
    # a deleted mask is redone
    (out / "masks" / "a.png").unlink()
    healed = run_batch([work], out, SplitConfig(), jobs=1, report=False)
    assert healed.resumed == 3 and (out / "masks" / "a.png").is_file()


def test_folder_of_another_config_is_refused_untouched(serial_run, scenes):
    folder, _ = scenes
    out, _ = serial_run
    before = folder_bytes(out)
    other = SplitConfig(prior=("border",))
    with pytest.raises(ConfigError, match=r"holds results of a different configuration"):
        run_batch([folder], out, other, jobs=1, report=False)
    assert folder_bytes(out) == before


def test_torn_record_and_stale_temporary_are_cleaned(scenes, serial_run, tmp_path):
    import shutil

    folder, _ = scenes
    out = tmp_path / "out"
    shutil.copytree(serial_run[0], out)
    good = (out / "records.jsonl").read_bytes()
    with open(out / "records.jsonl", "ab") as fh:
        fh.write(b'{"input": "a.png", "status": "ok", "val')  # a kill mid-line
    # a writer killed inside segcut.io.atomic_path leaves its temporary file behind
    kill_mid_write = ("import os, sys; from segcut.io import atomic_path; "
                      "tmp = atomic_path(sys.argv[1]).__enter__(); tmp.write_bytes(b'half'); "
                      "os._exit(0)")
    subprocess.run([sys.executable, "-c", kill_mid_write, str(out / "masks" / "sub" / "c.png")],
                   check=True)
    stale = [p for p in (out / "masks" / "sub").iterdir() if p.name.startswith(".")]
    assert len(stale) == 1
    summary = run_batch([folder], out, SplitConfig(), jobs=1, report=False)
    assert summary.resumed == 4
    assert not stale[0].exists()
    assert (out / "records.jsonl").read_bytes() == good


def test_seed_folder_is_matched_by_relative_path_then_stem(scenes, serial_run, tmp_path):
    folder, _ = scenes
    marks = tmp_path / "marks"
    (marks / "sub").mkdir(parents=True)
    canvas = np.full((SIZE, SIZE), 128, np.uint8)  # a trimap: mid-gray is unknown
    canvas[:4, :] = 0  # the top rows are background (black)
    canvas[84:92, 84:92] = 255  # a patch of the ground is foreground (white): seeds overrule
    Image.fromarray(canvas).save(marks / "a.png")  # matches a.png by stem
    Image.fromarray(canvas).save(marks / "sub" / "c.png")  # matches sub/c.png by path
    Image.fromarray(canvas).save(marks / "d.png")  # matches sub/deeper/d.png by stem
    out = tmp_path / "out"
    summary = run_batch([folder], out, SplitConfig(), seeds=marks, jobs=1, report=False)
    assert summary.done == 4
    records = load_records(out)
    used = {"a.png": "a.png", "sub/c.png": "sub/c.png", "sub/deeper/d.png": "d.png"}
    for name, mark in used.items():
        assert records[name]["seeds_hash"] == hash_file(marks / mark)
        mask = read_mask(out / records[name]["mask"])
        assert np.array_equal(mask, direct_mask(folder / name, records[name]["seed"],
                                                marks / mark))
    unseeded = folder_bytes(serial_run[0] / "masks")
    seeded = folder_bytes(out / "masks")
    assert any(seeded[f"{n[:-4]}.png"] != unseeded[f"{n[:-4]}.png"] for n in used)  # seeds used
    assert records["b.png"]["seeds_hash"] is None
    assert any("no marker image" in w for w in records["b.png"]["warnings"])
    # a changed marker redoes only the image that uses it
    canvas[60:64, 60:64] = 255
    Image.fromarray(canvas).save(marks / "d.png")
    again = run_batch([folder], out, SplitConfig(), seeds=marks, jobs=1, report=False)
    assert again.resumed == 3
    page = write_report(out).read_text(encoding="utf-8")  # the report says seeds were used
    assert "<dt>seeds</dt><dd>a marker image for 3 of 4</dd>" in page


def test_bad_files_become_records_and_the_run_goes_on(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    image, truth = scene(0)
    gray16 = (image.mean(axis=2) * 257).astype(np.uint16)
    import tifffile

    tifffile.imwrite(src / "deep16.tif", gray16)
    Image.fromarray(image).convert("P", palette=Image.Palette.ADAPTIVE, colors=16).save(
        src / "palette.png")
    Image.fromarray(image).convert("CMYK").save(src / "cmyk.jpg", quality=95)
    # stored 96 wide x 60 high; orientation 6 says "rotate 90 degrees clockwise to view"
    stored = Image.fromarray(image[:60])
    exif = Image.Exif()
    exif[0x0112] = 6
    stored.save(src / "rotated.jpg", quality=95, exif=exif)
    Image.fromarray(image).save(src / "naïve café ü.png")
    (src / "empty.png").write_bytes(b"")
    full = (tmp_path / "full.png")
    Image.fromarray(image).save(full)
    (src / "truncated.png").write_bytes(full.read_bytes()[:300])
    (src / "text.png").write_text("this is not an image\n")
    (src / "readme.md").write_text("not an image type at all\n")

    out = tmp_path / "out"
    summary = run_batch([src], out, SplitConfig(), jobs=1, report=True)
    records = load_records(out)
    ok = {"deep16.tif", "palette.png", "cmyk.jpg", "rotated.jpg", "naïve café ü.png"}
    bad = {"empty.png", "truncated.png", "text.png"}
    assert set(records) == ok | bad
    assert {k for k, r in records.items() if r["status"] == "ok"} == ok
    for name in bad:
        error = records[name]["error"]
        assert "\n" not in error and "Traceback" not in error
        assert error.startswith(str(src / name) + ": "), error
    assert "empty" in records["empty.png"]["error"]
    assert [Path(p).name for p, _ in summary.skipped] == ["readme.md"]
    assert summary.failed == 3 and summary.done == 5
    rotated = read_mask(out / "masks" / "rotated.png")
    assert rotated.shape == (96, 60)  # EXIF orientation applied before splitting
    for name in ok:
        stem = name.rsplit(".", 1)[0]
        assert np.array_equal(read_mask(out / "masks" / f"{stem}.png"),
                              direct_mask(src / name, records[name]["seed"])), name
    assert (out / "report.html").is_file()


def test_file_name_that_is_not_utf8_is_recorded_and_resumed(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    name = os.fsdecode(b"caf\xe9.png")  # Latin-1 bytes: not valid UTF-8
    try:
        Image.fromarray(scene(0)[0]).save(src / name)
    except (OSError, UnicodeError):
        pytest.skip("this file system does not take file names that are not UTF-8")
    out = tmp_path / "out"
    first = run_batch([src], out, SplitConfig(), jobs=1, report=True)
    assert first.done == 1 and first.failed == 0
    assert list(load_records(out)) == [name]
    (out / "records.jsonl").read_bytes().decode("utf-8")  # the log stays valid UTF-8
    (out / "summary.csv").read_bytes().decode("utf-8")
    assert run_batch([src], out, SplitConfig(), jobs=1, report=False).resumed == 1


def _write_stack(src):
    """A 4-slice gray TIFF stack of a noisy ball, ``src/stack.tif``; returns ``src``."""
    import tifffile

    rng = np.random.default_rng(3)
    _, yy, xx = np.mgrid[0:4, 0:64, 0:64]
    ball = (yy - 32) ** 2 + (xx - 30) ** 2 < 18 ** 2
    volume = np.clip(np.where(ball, 0.8, 0.2) + rng.normal(0, 0.03, ball.shape), 0, 1)
    src.mkdir()
    tifffile.imwrite(src / "stack.tif", (volume * 255).astype(np.uint8), photometric="minisblack")
    return src


def test_multipage_tiff_stack_gets_a_tiff_mask(tmp_path):
    import tifffile

    src = _write_stack(tmp_path / "in")
    out = tmp_path / "out"
    summary = run_batch([src], out, SplitConfig(), jobs=1, report=False)
    assert summary.done == 1
    record = load_records(out)["stack.tif"]
    assert record["mask"] == "masks/stack.tif" and record["overlay"] == "overlays/stack.png"
    mask = tifffile.imread(out / "masks" / "stack.tif") > 127
    assert mask.shape == (4, 64, 64)
    assert np.array_equal(mask, direct_mask(src / "stack.tif", record["seed"]))
    resumed = run_batch([src], out, SplitConfig(), jobs=1, report=False)
    assert resumed.resumed == 1  # the .tif mask counts as finished


# --- processes, kills and executors -------------------------------------------------------------

def _cli(*args) -> list:
    return [sys.executable, "-m", "segcut_cli", *map(str, args)]


def test_sigkill_mid_run_then_resume_matches_uninterrupted(tmp_path):
    names = [f"s{k:02d}.png" for k in range(14)]
    src = tmp_path / "in"
    write_scenes(src, names)
    reference = tmp_path / "reference"
    run_batch([src], reference, SplitConfig(), jobs=1, report=False)

    out = tmp_path / "out"
    process = subprocess.Popen(_cli("split", src, "-o", out, "--jobs", "2", "--quiet",
                                    "--no-report"), cwd=PROJECT_ROOT, start_new_session=True,
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    records = out / "records.jsonl"
    deadline = time.monotonic() + 90
    try:
        while time.monotonic() < deadline and process.poll() is None:
            if records.is_file() and records.read_bytes().count(b"\n") >= 3:
                break
            time.sleep(0.02)
    finally:
        try:
            os.killpg(process.pid, signal.SIGKILL)  # the run and its workers, without warning
        except ProcessLookupError:  # it ended by itself; the assertion below says how
            pass
        process.wait()
    assert process.returncode == -signal.SIGKILL, process.stderr.read().decode()
    process.stderr.close()
    finished = load_records(out)
    assert 3 <= len(finished) < len(names)  # killed part-way
    for path in (out / "masks").glob("*.png"):  # every mask in place is whole
        with Image.open(path) as im:
            im.load()

    summary = run_batch([src], out, SplitConfig(), jobs=1, report=False)
    assert summary.resumed == len(finished) and summary.done == len(names)
    assert len((out / "records.jsonl").read_text().splitlines()) == len(names)
    assert folder_bytes(out / "masks") == folder_bytes(reference / "masks")
    assert folder_bytes(out / "overlays") == folder_bytes(reference / "overlays")
    assert not [p for p in out.rglob(".*") if p.is_file()]  # no temporaries left


def test_ctrl_c_exits_130_and_leaves_valid_outputs(tmp_path):
    names = [f"s{k:02d}.png" for k in range(10)]
    src = tmp_path / "in"
    write_scenes(src, names)
    out = tmp_path / "out"
    process = subprocess.Popen(_cli("split", src, "-o", out, "--jobs", "1", "--quiet"),
                               cwd=PROJECT_ROOT, start_new_session=True,
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    records = out / "records.jsonl"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and process.poll() is None:
        if records.is_file() and records.read_bytes().count(b"\n") >= 2:
            break
        time.sleep(0.02)
    try:
        os.killpg(process.pid, signal.SIGINT)  # what Ctrl-C in a terminal sends
    except ProcessLookupError:  # it ended by itself; the assertion below says how
        pass
    _, err = process.communicate(timeout=60)
    assert process.returncode == 130, err.decode()
    lines = err.decode().strip().splitlines()
    assert lines[-1] == "segcut: interrupted"
    finished = load_records(out)
    assert 2 <= len(finished) < len(names)
    # how many finished and how to go on, in one line; the report is rewritten
    assert lines[-2].startswith(f"segcut: {len(finished)} of 10 images finished")
    assert "run the same command again" in lines[-2]
    assert (out / "report.html").read_text(encoding="utf-8").count("<tr data-input=") == len(
        finished)
    with open(out / "summary.csv", newline="", encoding="utf-8") as fh:
        assert len(list(csv.DictReader(fh))) == len(finished)
    for record in finished.values():
        with Image.open(out / record["mask"]) as im:
            im.load()


def test_ctrl_c_waits_until_a_record_and_its_count_agree():
    """SIGINT inside the held block arrives after it: no record without its count."""
    from segcut.batch.run import _interrupts_held

    steps = []
    with pytest.raises(KeyboardInterrupt):
        with _interrupts_held():
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.05)  # Python runs handlers between bytecodes: it would raise here
            steps.append("record written")
            steps.append("count updated")
    assert steps == ["record written", "count updated"]
    with _interrupts_held():  # no signal: nothing raised, the usual handler is back
        pass
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler


def test_process_pool_and_dask_local_cluster_write_identical_bytes(scenes, serial_run, tmp_path):
    folder, _ = scenes
    reference, _ = serial_run
    pool = run_batch([folder], tmp_path / "pool", SplitConfig(), jobs=2, report=False)
    assert pool.done == 4
    dask = run_batch([folder], tmp_path / "dask", SplitConfig(), dask_local=2, report=False)
    assert dask.done == 4
    for name in ("masks", "overlays"):
        expected = folder_bytes(reference / name)
        assert len(expected) == 4
        assert folder_bytes(tmp_path / "pool" / name) == expected
        assert folder_bytes(tmp_path / "dask" / name) == expected
    timing = {"seconds", "stage_seconds"}

    def strip(records):
        return {k: {f: v for f, v in r.items() if f not in timing} for k, r in records.items()}

    assert strip(load_records(tmp_path / "dask")) == strip(load_records(reference))
    assert strip(load_records(tmp_path / "pool")) == strip(load_records(reference))


def test_bad_arguments_are_refused_before_any_work(tmp_path, scenes):
    folder, _ = scenes
    with pytest.raises(ValueError, match="jobs must be >= 1"):
        run_batch([folder], tmp_path / "o", SplitConfig(), jobs=0)
    with pytest.raises(ValueError, match="not both"):
        run_batch([folder], tmp_path / "o", SplitConfig(), scheduler="tcp://x:1", dask_local=1)
    (tmp_path / "file").write_text("x")
    with pytest.raises(InputError, match="exists and is not a folder"):
        run_batch([folder], tmp_path / "file", SplitConfig())
    assert not (tmp_path / "o").exists()


# --- confidence maps ------------------------------------------------------------------------------

def direct_confidence(path: Path, seed: int) -> np.ndarray:
    """The confidence map of one file from segcut.split itself, as 8-bit gray levels."""
    from segcut import io
    from segcut.confidence import confidence_to_uint8
    from segcut.pipeline import split

    data = io.read_image(path)
    return confidence_to_uint8(split(data.array, SplitConfig(), channel_axis=data.channel_axis,
                                     rng=seed).confidence)


def test_confidence_maps_are_named_as_the_masks_and_written_beside_them(tmp_path):
    src = tmp_path / "in"
    write_scenes(src, ["a.png", "sub/a.png", "b.png"])
    image, _ = scene(5)
    Image.fromarray(image).save(src / "a.jpg", quality=95)  # same stem as a.png
    out = tmp_path / "out"
    summary = run_batch([src], out, SplitConfig(confidence=False), jobs=1,
                        confidence_maps=True)
    assert (summary.done, summary.failed) == (4, 0)
    assert load_config_hash(out) == str(SplitConfig().config_hash())  # confidence turned on
    records = load_records(out)
    for name, record in records.items():
        # the same collision-free name as the mask, in confidence/ instead of masks/
        assert record["confidence"] == "confidence/" + record["mask"].split("/", 1)[1], name
        written = np.asarray(Image.open(out / record["confidence"]))
        assert written.dtype == np.uint8 and written.shape == (SIZE, SIZE)
        # Reference: segcut.split on the same file with the record's seed, outside the batch.
        assert np.array_equal(written, direct_confidence(src / name, record["seed"]))
        # c < 0.9 exactly when round(255 c) < 230 (255 * 0.9 = 229.5; common knowledge)
        assert record["uncertain_fraction"] == pytest.approx(np.mean(written < 230), abs=1e-6)
    assert len({r["confidence"] for r in records.values()}) == 4
    with open(out / "summary.csv", newline="", encoding="utf-8") as fh:
        rows = {row["input"]: row for row in csv.DictReader(fh)}
    for name, record in records.items():
        assert float(rows[name]["uncertain_fraction"]) == record["uncertain_fraction"]
    page = (out / "report.html").read_text(encoding="utf-8")
    assert page.count('<img class="confidence"') == 4
    # the rows come most uncertain first
    order = re.findall(r'<tr data-input="([^"]+)"', page)
    assert order == sorted(records, key=lambda k: -records[k]["uncertain_fraction"])


def load_config_hash(out: Path) -> str:
    from segcut.config import load_config

    return str(load_config(out / "run.toml").config_hash())


def test_resume_with_confidence_maps_needs_the_map(tmp_path):
    src = tmp_path / "in"
    write_scenes(src, ["a.png", "b.png"])
    out = tmp_path / "out"
    run_batch([src], out, SplitConfig(), jobs=1, report=False)
    assert "confidence" not in load_records(out)["a.png"]
    assert not (out / "confidence").exists()
    # the same config, now with maps: none exists yet, so both images are done again
    again = run_batch([src], out, SplitConfig(), jobs=1, report=False, confidence_maps=True)
    assert (again.resumed, again.done) == (0, 2)
    assert (out / "confidence" / "a.png").is_file() and (out / "confidence" / "b.png").is_file()
    assert run_batch([src], out, SplitConfig(), jobs=1, report=False,
                     confidence_maps=True).resumed == 2
    (out / "confidence" / "b.png").unlink()
    redo = run_batch([src], out, SplitConfig(), jobs=1, report=False, confidence_maps=True)
    assert (redo.resumed, redo.done) == (1, 2)
    assert (out / "confidence" / "b.png").is_file()
    # without the option a finished image needs no map
    (out / "confidence" / "b.png").unlink()
    assert run_batch([src], out, SplitConfig(), jobs=1, report=False).resumed == 2


def test_confidence_map_of_a_stack_is_a_tiff(tmp_path):
    import tifffile

    src = _write_stack(tmp_path / "in")
    out = tmp_path / "out"
    assert run_batch([src], out, SplitConfig(), jobs=1, report=False,
                     confidence_maps=True).done == 1
    record = load_records(out)["stack.tif"]
    assert record["confidence"] == "confidence/stack.tif"
    # Reference: tifffile reads the map back; segcut.split gives the same map directly.
    written = tifffile.imread(out / "confidence" / "stack.tif")
    assert written.shape == (4, 64, 64) and written.dtype == np.uint8
    assert np.array_equal(written, direct_confidence(src / "stack.tif", record["seed"]))
