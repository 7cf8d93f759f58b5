"""``segcut score`` run in-process: the mask ``segcut split`` wrote scores its recorded value."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from segcut.config import SplitConfig
from segcut.io import write_image, write_mask
from segcut_cli.main import main


def _scene(seed: int, shape=(36, 44)) -> np.ndarray:
    """A noisy colour image: a warm ellipse on a cool ground (uint8)."""
    rng = np.random.default_rng(seed)
    rr, cc = np.ogrid[:shape[0], :shape[1]]
    cy, cx = shape[0] / 2 + rng.integers(-3, 4), shape[1] / 2 + rng.integers(-3, 4)
    blob = ((rr - cy) / (shape[0] / 3.5)) ** 2 + ((cc - cx) / (shape[1] / 3.0)) ** 2 <= 1
    img = np.where(blob[..., None], [200, 90, 60], [60, 120, 150]).astype(float)
    img += rng.normal(0, 12, img.shape)
    return np.clip(img, 0, 255).astype(np.uint8)


@pytest.fixture(scope="module")
def split_run(tmp_path_factory):
    """Two images split by `segcut split` with a small config; returns the folders."""
    root = tmp_path_factory.mktemp("score")
    images = root / "images"
    for k in range(2):
        write_image(_scene(k), images / f"scene{k}.png", channel_axis=-1)
    config = root / "small.toml"
    config.write_text(SplitConfig(n_superpixels=60, pixel_grid_max_pixels=0,
                                  prior=("border",), seed=4).to_toml())
    out = root / "out"
    assert main(["split", str(images), "-o", str(out), "--config", str(config), "--jobs", "1",
                 "--quiet", "--no-report"]) == 0
    records = {}
    for line in (out / "records.jsonl").read_text().splitlines():
        rec = json.loads(line)
        records[rec["input"].rsplit(".", 1)[0]] = rec
    return root, images, out, records


def test_score_of_split_masks_equals_recorded_values(split_run, capsys):
    root, images, out, records = split_run
    capsys.readouterr()
    code = main(["score", str(images), str(out / "masks"), "--config", str(out / "run.toml"),
                 "--json"])
    assert code == 0
    payload = json.loads(capsys.readouterr().out)
    assert len(payload["images"]) == 2
    for item in payload["images"]:
        rec = records[item["stem"]]
        (m,) = item["masks"]
        assert m["value"] == rec["value"]  # exactly the recorded cut value
        assert 0.9 < m["agreement"] <= 1.0 and m["rank"] == 1  # refined off the superpixels
        assert item["seed"] == rec["seed"]
        assert m["value"] <= item["upper_bound"] + 1e-9


def test_single_image_with_other_masks_ranked_and_csv(split_run, capsys):
    root, images, out, records = split_run
    shape = _scene(0).shape[:2]
    everything = root / "everything.png"
    write_mask(np.ones(shape, dtype=bool), everything)
    table = root / "scores.csv"
    code = main(["score", str(images / "scene0.png"), str(everything), str(out / "masks"),
                 "--config", str(out / "run.toml"), "--csv", str(table)])
    assert code == 0
    text = capsys.readouterr().out
    assert "certified upper bound" in text
    with open(table, newline="") as fh:
        rows = list(csv.DictReader(fh))
    by_mask = {r["mask"]: r for r in rows}
    assert set(by_mask) == {str(everything), str(out / "masks")}
    assert float(by_mask[str(out / "masks")]["value"]) == records["scene0"]["value"]
    assert by_mask[str(out / "masks")]["rank"] == "1"
    assert float(by_mask[str(everything)]["gap"]) > 0


def test_mask_size_mismatch_is_one_line(split_run, capsys):
    root, images, out, _ = split_run
    wrong = root / "wrong" / "scene0.png"
    write_mask(np.ones((5, 7), dtype=bool), wrong)
    capsys.readouterr()
    code = main(["score", str(images / "scene0.png"), str(wrong), "--config",
                 str(out / "run.toml")])
    assert code == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert err[0] == (f"segcut: {wrong}: mask size 7 x 5 does not match the image "
                      f"{images / 'scene0.png'} size 44 x 36")


def test_unmatched_masks_are_listed_not_fatal(split_run, tmp_path, capsys):
    root, images, out, _ = split_run
    extra = tmp_path / "masks"
    write_mask(np.zeros((36, 44), dtype=bool), extra / "scene0.png")
    write_mask(np.zeros((36, 44), dtype=bool), extra / "elsewhere.png")
    capsys.readouterr()
    code = main(["score", str(images), str(extra), "--config", str(out / "run.toml"), "--json"])
    assert code == 0
    captured = capsys.readouterr()
    assert f"{extra}: 1 mask without an image: {extra / 'elsewhere.png'}" in captured.err
    assert f"{extra}: 1 image without a mask: {images / 'scene1.png'}" in captured.err
    payload = json.loads(captured.out)
    assert [i["stem"] for i in payload["images"]] == ["scene0"]
    assert payload["n_unmatched"] == 2


def test_nested_folders_are_matched_by_relative_path(split_run, tmp_path, capsys):
    """Images in sub-folders (as split mirrors them) find their masks; none is skipped."""
    root, images, out, records = split_run
    nest = tmp_path / "nest"
    for day in ("day1", "day2"):
        (nest / day).mkdir(parents=True)
        (nest / day / "a.png").write_bytes((images / "scene0.png").read_bytes())
        write_mask(np.ones((36, 44), dtype=bool), tmp_path / "m" / day / "a.png")
    capsys.readouterr()
    code = main(["score", str(nest), str(tmp_path / "m"), "--config", str(out / "run.toml"),
                 "--json"])
    assert code == 0
    payload = json.loads(capsys.readouterr().out)
    assert sorted(i["stem"] for i in payload["images"]) == ["day1/a", "day2/a"]
    assert payload["n_unmatched"] == 0


def test_missing_mask_path_is_one_line_error(split_run, capsys):
    root, images, _, _ = split_run
    code = main(["score", str(images), str(root / "nowhere")])
    assert code == 2  # a missing input is a usage error
    assert capsys.readouterr().err == f"segcut: {root / 'nowhere'}: no such file or folder\n"
    code = main(["score", str(images), str(root / "nowhere"), "--json"])
    assert code == 2
    payload = json.loads(capsys.readouterr().out)
    assert payload == {"command": "score", "exit_code": 2,
                       "error": f"{root / 'nowhere'}: no such file or folder"}


def test_seeds_need_one_image(split_run, capsys):
    root, images, out, _ = split_run
    code = main(["score", str(images), str(out / "masks"), "--seeds", str(images / "scene0.png")])
    assert code == 2
    assert "--seeds takes one marker image" in capsys.readouterr().err
