"""``segcut compare`` run in-process: exit codes, tables, JSON, CSV and messages."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from segcut.io import write_image, write_mask
from segcut.scoring import compare_masks
from segcut_cli.main import main


def _square(top: int, left: int, size: int = 6, shape=(16, 20)) -> np.ndarray:
    m = np.zeros(shape, dtype=bool)
    m[top:top + size, left:left + size] = True
    return m


@pytest.fixture
def folders(tmp_path):
    """refs/ with three masks; good/ close to them, poor/ far from them."""
    refs = {"a": _square(2, 2), "b": _square(5, 8), "c": _square(8, 12)}
    for name, m in refs.items():
        write_mask(m, tmp_path / "refs" / f"{name}.png")
        write_mask(np.roll(m, 1, axis=1), tmp_path / "good" / f"{name}.png")
        write_mask(np.roll(m, 4, axis=0), tmp_path / "poor" / f"{name}.png")
    return tmp_path, refs


def test_two_sets_ranked_with_json_matching_the_engine(folders, capsys):
    root, refs = folders
    code = main(["compare", str(root / "poor"), str(root / "good"),
                 "--reference", str(root / "refs"), "--json"])
    assert code == 0
    payload = json.loads(capsys.readouterr().out)
    sets = payload["summary"]["sets"]
    assert [s["name"] for s in sets] == [str(root / "good"), str(root / "poor")]
    expected = np.mean([compare_masks(np.roll(m, 1, axis=1), m)["iou"] for m in refs.values()])
    assert sets[0]["metrics"]["iou"]["mean"] == pytest.approx(expected)
    assert payload["summary"]["paired"]["first"] == str(root / "good")
    assert len(payload["images"]) == 6 and payload["unmatched"] == []


def test_table_and_csv(folders, capsys):
    root, refs = folders
    out_csv = root / "table.csv"
    code = main(["compare", str(root / "good"), str(root / "poor"), "-r", str(root / "refs"),
                 "--csv", str(out_csv), "--tolerance", "0.5"])
    assert code == 0
    text = capsys.readouterr().out
    assert "1. " + str(root / "good") in text and "Wilcoxon signed-rank p" in text
    assert "boundary tolerance 0.5 px" in text
    with open(out_csv, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 6
    row = next(r for r in rows if r["image"] == "b" and r["set"] == str(root / "poor"))
    ref = refs["b"]
    m = compare_masks(np.roll(ref, 4, axis=0), ref, tolerance=0.5)
    assert float(row["iou"]) == pytest.approx(m["iou"])
    assert float(row["boundary_f"]) == pytest.approx(m["boundary_f"])
    assert row["reference"] == str(root / "refs" / "b.png")


def test_unmatched_files_are_listed_not_fatal(folders, capsys):
    root, _ = folders
    write_mask(_square(1, 1), root / "good" / "extra.png")
    (root / "poor" / "c.png").unlink()
    code = main(["compare", str(root / "good"), str(root / "poor"), "-r", str(root / "refs")])
    assert code == 0
    err = capsys.readouterr().err
    assert f"{root / 'good'}: 1 prediction without a reference: {root / 'good' / 'extra.png'}" in err
    assert f"{root / 'poor'}: 1 reference without a prediction: {root / 'refs' / 'c.png'}" in err


def test_sub_folders_are_matched_by_relative_path_and_every_unmatched_file_counted(
        tmp_path, capsys):
    """What `segcut split nest -o r` writes (day1/a, day2/a, top) against a nested truth."""
    masks = {"day1/a": _square(2, 2), "day2/a": _square(8, 12), "top": _square(5, 8)}
    for key, m in masks.items():
        write_mask(m, tmp_path / "truth" / f"{key}.png")
        write_mask(m, tmp_path / "r" / "masks" / f"{key}.png")  # predictions equal the truth
    write_mask(_square(1, 1), tmp_path / "r" / "masks" / "day3" / "b.png")  # no reference
    code = main(["compare", str(tmp_path / "r" / "masks"), "-r", str(tmp_path / "truth"),
                 "--json"])
    assert code == 0
    captured = capsys.readouterr()
    payload = json.loads(captured.out)
    # every pair is found, each with itself: IoU 1 (identical masks; common knowledge)
    assert sorted(r["image"] for r in payload["images"]) == ["day1/a", "day2/a", "top"]
    assert all(r["iou"] == 1.0 for r in payload["images"])
    assert payload["n_unmatched"] == 1
    assert payload["unmatched"][0]["files"] == [str(tmp_path / "r" / "masks" / "day3" / "b.png")]
    assert "1 prediction without a reference" in captured.err
    # a flat truth folder: matched by file name where that is unambiguous only
    flat = tmp_path / "flat"
    write_mask(masks["top"], flat / "top.png")
    write_mask(masks["day1/a"], flat / "a.png")
    code = main(["compare", str(tmp_path / "r" / "masks"), "-r", str(flat), "--json"])
    payload = json.loads(capsys.readouterr().out)
    assert [r["image"] for r in payload["images"]] == ["top"]  # day1/a or day2/a: ambiguous
    assert payload["n_unmatched"] == 4  # day1/a, day2/a, day3/b and the reference a.png


def test_nothing_matched_fails_with_json(tmp_path, capsys):
    write_mask(_square(1, 1), tmp_path / "p" / "x.png")
    write_mask(_square(1, 1), tmp_path / "t" / "y.png")
    code = main(["compare", str(tmp_path / "p"), "-r", str(tmp_path / "t"), "--json"])
    assert code == 1
    payload = json.loads(capsys.readouterr().out)
    assert payload["exit_code"] == 1 and payload["n_unmatched"] == 2
    assert payload["error"].startswith("no prediction could be compared")


def test_size_mismatch_is_one_line_and_others_still_compared(folders, capsys):
    root, _ = folders
    write_mask(np.zeros((16, 21), dtype=bool), root / "good" / "a.png")
    code = main(["compare", str(root / "good"), "-r", str(root / "refs"), "--json"])
    assert code == 1
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert lines == [f"segcut: {root / 'good' / 'a.png'}: mask size 21 x 16 does not match "
                     f"the reference {root / 'refs' / 'a.png'} size 20 x 16"]
    assert {r["image"] for r in json.loads(captured.out)["images"]} == {"b", "c"}


def test_empty_reference_gets_a_message(tmp_path, capsys):
    write_mask(np.zeros((8, 8), dtype=bool), tmp_path / "ref.png")
    write_mask(np.zeros((8, 8), dtype=bool), tmp_path / "pred.png")
    code = main(["compare", str(tmp_path / "pred.png"), "-r", str(tmp_path / "ref.png"), "--json"])
    assert code == 0
    captured = capsys.readouterr()
    assert "reference mask is empty" in captured.err
    assert json.loads(captured.out)["images"][0]["iou"] == 1.0  # both empty: agreement


def test_noisy_reference_is_thresholded_and_threshold_overrides(tmp_path, capsys):
    truth = _square(3, 4)
    noisy = np.where(truth, 250, 4).astype(np.uint8)  # like a JPEG-compressed 0/255 mask
    noisy[0, 0], noisy[5, 5] = 9, 241
    write_image(noisy, tmp_path / "ref.png")
    write_mask(truth, tmp_path / "pred.png")
    assert main(["compare", str(tmp_path / "pred.png"), "-r", str(tmp_path / "ref.png"),
                 "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["images"][0]["iou"] == 1.0
    # with the threshold at 0 the background noise becomes foreground
    assert main(["compare", str(tmp_path / "pred.png"), "-r", str(tmp_path / "ref.png"),
                 "--threshold", "0", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["images"][0]["iou"] == pytest.approx(36 / 320)


def test_several_files_against_one_reference_file(tmp_path, capsys):
    ref = _square(4, 4)
    write_mask(ref, tmp_path / "truth.png")
    write_mask(ref, tmp_path / "mine.png")
    write_mask(np.roll(ref, 2, axis=0), tmp_path / "theirs.png")
    code = main(["compare", str(tmp_path / "theirs.png"), str(tmp_path / "mine.png"),
                 "-r", str(tmp_path / "truth.png"), "--json"])
    assert code == 0
    sets = json.loads(capsys.readouterr().out)["summary"]["sets"]
    assert [s["name"] for s in sets] == [str(tmp_path / "mine.png"), str(tmp_path / "theirs.png")]
    assert sets[0]["metrics"]["iou"]["mean"] == 1.0


def test_duplicate_stems_fail_that_image_only(folders, capsys):
    root, _ = folders
    write_mask(_square(2, 2), root / "good" / "a.tif")
    code = main(["compare", str(root / "good"), "-r", str(root / "refs"), "--json"])
    assert code == 1
    captured = capsys.readouterr()
    assert "several prediction files have the stem 'a' (a.png, a.tif)" in captured.err
    assert {r["image"] for r in json.loads(captured.out)["images"]} == {"b", "c"}


def test_missing_reference_is_a_one_line_usage_error_also_in_json(tmp_path, capsys):
    code = main(["compare", str(tmp_path), "-r", str(tmp_path / "nowhere")])
    assert code == 2  # a missing input is a usage error (README: exit codes)
    assert capsys.readouterr().err == f"segcut: {tmp_path / 'nowhere'}: no such file or folder\n"
    code = main(["compare", str(tmp_path), "-r", str(tmp_path / "nowhere"), "--json"])
    captured = capsys.readouterr()
    assert code == 2
    assert json.loads(captured.out) == {
        "command": "compare", "exit_code": 2,
        "error": f"{tmp_path / 'nowhere'}: no such file or folder"}


def test_unreadable_prediction_is_reported(folders, capsys):
    root, _ = folders
    (root / "good" / "b.png").write_bytes(b"not an image at all")
    code = main(["compare", str(root / "good"), "-r", str(root / "refs")])
    assert code == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"segcut: {root / 'good' / 'b.png'}: ")


def test_reference_option_is_required(capsys):
    assert main(["compare", "x.png"]) == 2
    assert "--reference" in capsys.readouterr().err


def test_rank_by_distance(folders, capsys):
    root, _ = folders
    assert main(["compare", str(root / "poor"), str(root / "good"), "-r", str(root / "refs"),
                 "--rank-by", "assd", "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)["summary"]
    assert summary["rank_by"] == "assd"
    assert summary["sets"][0]["name"] == str(root / "good")


def test_jpeg_reference_is_read_as_its_mask(tmp_path, capsys):
    # JPEG compression leaves values near 0 and 255 (not strictly binary); the
    # reference is cut at half the 8-bit range, so it reads back as the drawn mask
    # except at a few edge pixels.
    from PIL import Image

    truth = np.zeros((48, 64), dtype=bool)
    truth[10:38, 14:50] = True
    Image.fromarray(np.where(truth, 255, 0).astype(np.uint8)).save(tmp_path / "ref.jpg", quality=70)
    pred_dir = tmp_path / "pred"
    write_mask(truth, pred_dir / "ref.png")  # the exact mask, matched by stem
    values = np.asarray(Image.open(tmp_path / "ref.jpg"))
    assert len(np.unique(values)) > 2  # the file really is not binary
    ref_dir = tmp_path / "refs"
    ref_dir.mkdir()
    (tmp_path / "ref.jpg").rename(ref_dir / "ref.jpg")
    assert main(["compare", str(pred_dir), "-r", str(ref_dir), "--json"]) == 0
    (row,) = json.loads(capsys.readouterr().out)["images"]
    assert row["iou"] > 0.98 and row["reference"] == str(ref_dir / "ref.jpg")


def test_same_inputs_give_the_same_bytes(folders, capsys):
    root, _ = folders
    args = ["compare", str(root / "good"), str(root / "poor"), "-r", str(root / "refs"), "--json"]
    assert main(args) == 0
    first = capsys.readouterr().out
    assert main(args) == 0
    assert capsys.readouterr().out == first


def test_negative_tolerance_is_a_usage_error(folders, capsys):
    root, _ = folders
    assert main(["compare", str(root / "good"), "-r", str(root / "refs"), "--tolerance", "-1"]) == 2
    assert "expected a number >= 0" in capsys.readouterr().err
