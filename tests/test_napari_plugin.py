"""The napari plugin (segcut_napari): manifest, dock widget, reader, writer, sample data.

The viewer runs headless under an X server that pytest-xvfb starts (Debian's xvfb with
Mesa's software OpenGL; Qt's offscreen platform has no OpenGL context for napari's
canvas). Without the ``napari`` extra these tests are skipped; under CI (``CI`` set)
they are not skipped, so a missing install fails loudly.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

ON_CI = bool(os.environ.get("CI"))
if not ON_CI:
    pytest.importorskip("napari", reason="the napari extra is not installed (pip install -e '.[napari]')")
    pytest.importorskip("segcut_napari", reason="segcut_napari is not installed")
    if not os.environ.get("DISPLAY"):
        pytest.skip("no X display: install Debian's xvfb so pytest-xvfb can start one",
                    allow_module_level=True)

import napari  # noqa: E402
from napari.layers import Labels  # noqa: E402

import segcut  # noqa: E402
from scipy import ndimage as ndi  # noqa: E402
from segcut import io as segcut_io  # noqa: E402
from segcut.batch import hash_file, image_seed, load_records  # noqa: E402
from segcut.drawing import overlay_image  # noqa: E402
from segcut.pipeline import STAGES  # noqa: E402
from segcut_cli.main import main as cli_main  # noqa: E402
from segcut_napari import _widget  # noqa: E402
from segcut_napari._inputs import box_from_shapes, make_config, points_seeds  # noqa: E402
from segcut_napari._reader import read_run_folder  # noqa: E402
from segcut_napari._sample_data import SAMPLES, sample_folder  # noqa: E402

# napari with a Qt5 binding says once per viewer that it cannot follow the desktop theme.
pytestmark = pytest.mark.filterwarnings(
    "ignore:System theme detection requires a Qt6 backend:UserWarning")

ROOT = Path(__file__).resolve().parent.parent
IMAGES = ROOT / "sample_images" / "images"
WAIT_MS = 120_000


@pytest.fixture
def errors(monkeypatch):
    """Every error notification the widget shows, in order."""
    shown: list = []
    monkeypatch.setattr(_widget, "show_error", shown.append)
    return shown


def _widget_for(viewer):
    _, widget = viewer.window.add_plugin_dock_widget("segcut", "Split and score")
    return widget


def _run(qtbot, widget, action):
    worker = action()
    assert worker is not None
    qtbot.waitUntil(lambda: not widget.busy, timeout=WAIT_MS)
    return worker


def _labels_named(viewer, name):
    return [layer for layer in viewer.layers if layer.name == name and isinstance(layer, Labels)]


def test_manifest_validates():
    # Reference: npe2's own validator (the `npe2 validate` command of the npe2 package).
    done = subprocess.run([sys.executable, "-m", "npe2", "validate", "segcut"],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "valid" in done.stdout.lower()


def test_widget_split_equals_engine_and_reruns_replace(make_napari_viewer, qtbot, errors):
    viewer = make_napari_viewer()
    image = segcut.read_image(IMAGES / "oak_gray.png")
    viewer.add_image(image.array, name="oak")  # no file behind it: the seed is the panel's
    widget = _widget_for(viewer)
    widget.image_choice.setCurrentText("oak")
    widget.prior_choice.setCurrentText("border")
    widget.random_seed.setValue(3)
    _run(qtbot, widget, widget.run_split)
    # Reference: segcut.split called directly on the same array and config.
    expected = segcut.split(image.array, make_config(prior="border", seed=3), channel_axis=None,
                            rng=3)
    (layer,) = _labels_named(viewer, "oak split")
    assert layer.data.dtype == np.uint8 and set(np.unique(layer.data)) <= {0, 1}
    np.testing.assert_array_equal(layer.data, expected.mask.astype(np.uint8))
    assert float(widget.numbers["cut value"].text()) == pytest.approx(expected.value, rel=1e-9)
    assert float(widget.numbers["bound"].text()) == pytest.approx(expected.upper_bound, rel=1e-9)
    assert widget.numbers["side decided by"].text() == "priors or seeds"
    assert layer.metadata["segcut"]["record"]["value"] == expected.value
    # The progress bar went through the stages segcut.split announces, in its order.
    heard = []
    segcut.split(image.array, make_config(prior="border", seed=3), channel_axis=None, rng=3,
                 progress=heard.append)
    assert widget.stages_seen == heard == list(STAGES)
    assert widget.progress.value() == len(STAGES) - 1
    assert widget.progress.format() == f"confidence ({len(STAGES)} of {len(STAGES)})"
    # A second run with another prior replaces the layer's data; no new layer appears.
    widget.prior_choice.setCurrentText("none")
    _run(qtbot, widget, widget.run_split)
    again = segcut.split(image.array, make_config(prior="none", seed=3), channel_axis=None,
                         rng=3)
    assert len(viewer.layers) == 2
    np.testing.assert_array_equal(_labels_named(viewer, "oak split")[0].data,
                                  again.mask.astype(np.uint8))
    assert widget.numbers["side decided by"].text() == "frame rule (no prior)"
    assert errors == []


def test_background_radius_field_reaches_the_split(make_napari_viewer, qtbot, errors):
    # A shaded scene (bright spots on a strong ramp of illumination): "auto" flattens it
    # as segcut.split does, 0 does not; the panel shows which.
    rng = np.random.default_rng(1)
    yy, xx = np.mgrid[:160, :160]
    spots = ((yy % 32 - 16) ** 2 + (xx % 32 - 16) ** 2) <= 9
    image = 0.7 * (xx + yy) / 320 + 0.25 * spots + rng.normal(0, 0.02, spots.shape)
    viewer = make_napari_viewer()
    viewer.add_image(image, name="shaded")
    widget = _widget_for(viewer)
    widget.image_choice.setCurrentText("shaded")
    assert widget.background_radius.text() == "auto"
    assert widget.current_config().background_radius is None
    _run(qtbot, widget, widget.run_split)
    expected = segcut.split(image, make_config(), channel_axis=None, rng=0)
    assert expected.background["radius"] > 0
    np.testing.assert_array_equal(_labels_named(viewer, "shaded split")[0].data,
                                  expected.mask.astype(np.uint8))
    assert widget.numbers["background"].text().startswith("flattened (radius ")
    widget.background_radius.setValue(0)
    assert widget.current_config().background_radius == 0
    _run(qtbot, widget, widget.run_split)
    assert widget.numbers["background"].text() == "as given"
    assert errors == []


def _cli_mask(tmp_path, name, *extra):
    out = tmp_path / f"run_{name}"
    assert cli_main(["split", str(IMAGES / "sprig_trio.png"), "-o", str(out), *extra]) == 0
    return segcut.read_mask(out / "masks" / "sprig_trio.png")


def test_seeds_change_the_result_as_on_the_command_line(make_napari_viewer, qtbot, tmp_path,
                                                         errors):
    viewer = make_napari_viewer()
    viewer.open_sample("segcut", "sprig_trio")  # the scan (with its file), truth and seeds
    # Seeds that call the leaf under the pixel (60, 71) background, the rest unknown.
    truth = viewer.layers["sprig_trio truth"].data != 0
    leaves, _ = ndi.label(truth)
    assert leaves[60, 71] > 0
    seeds = np.where(leaves == leaves[60, 71], 2, 0).astype(np.uint8)
    marker = tmp_path / "marker.png"
    segcut_io.write_image(seeds, marker)
    viewer.add_labels(seeds, name="my seeds")
    widget = _widget_for(viewer)
    widget.image_choice.setCurrentText("sprig_trio")
    _run(qtbot, widget, widget.run_split)
    without = _labels_named(viewer, "sprig_trio split")[0].data.copy()
    widget.seeds_choice.setCurrentText("my seeds")
    _run(qtbot, widget, widget.run_split)
    with_seeds = _labels_named(viewer, "sprig_trio split")[0].data.copy()
    # Reference: the command line on the same file, without and with --seeds.
    np.testing.assert_array_equal(without, _cli_mask(tmp_path, "plain"))
    np.testing.assert_array_equal(with_seeds,
                                  _cli_mask(tmp_path, "seeded", "--seeds", str(marker)))
    assert without[60, 71] == 1 and with_seeds[60, 71] == 0
    assert errors == []


def test_score_ranks_layers_as_segcut_score(make_napari_viewer, qtbot, errors):
    viewer = make_napari_viewer()
    image = segcut.read_image(IMAGES / "willow_pair.png")
    viewer.add_image(image.array, name="willow", rgb=True)
    truth = segcut.read_mask(ROOT / "sample_images" / "truth" / "willow_pair.png")
    left = np.zeros(truth.shape, dtype=np.uint8)
    left[:, : truth.shape[1] // 2] = 1
    viewer.add_labels(truth.astype(np.uint8), name="truth")
    viewer.add_labels(left, name="left half")
    widget = _widget_for(viewer)
    widget.image_choice.setCurrentText("willow")
    widget.prior_choice.setCurrentText("border and center")
    widget.set_checked_masks(["truth", "left half"])
    _run(qtbot, widget, widget.run_score)
    # Reference: segcut.score called directly, as `segcut score` does.
    expected = segcut.score(image.array, {"truth": truth, "left half": left},
                            config=make_config(prior="border and center"), channel_axis=-1,
                            rng=0)
    table = widget.score_table
    shown = [(table.item(r, 0).text(), table.item(r, 1).text(), float(table.item(r, 2).text()))
             for r in range(table.rowCount())]
    assert [(s[0], s[1]) for s in shown] == [(str(m.rank), m.name) for m in expected.ranking]
    assert [s[2] for s in shown] == pytest.approx([m.value for m in expected.ranking], rel=1e-9)
    assert shown[0][1] == "truth"  # the true leaves outscore half the sheet
    assert widget.score_bound.text() == f"bound: {_widget.format_number(expected.upper_bound)}"
    assert errors == []


def test_three_d_stack_and_errors_in_one_line(make_napari_viewer, qtbot, errors):
    viewer = make_napari_viewer()
    stack = np.full((6, 40, 48), 0.2)
    stack[1:5, 10:30, 12:36] = 0.8
    stack += np.random.default_rng(0).normal(0, 0.02, stack.shape)
    viewer.add_image(stack, name="stack")
    widget = _widget_for(viewer)
    widget.image_choice.setCurrentText("stack")
    _run(qtbot, widget, widget.run_split)
    # Reference: segcut.split on the same gray stack (channel_axis None).
    expected = segcut.split(stack, make_config(), channel_axis=None, rng=0)
    np.testing.assert_array_equal(_labels_named(viewer, "stack split")[0].data,
                                  expected.mask.astype(np.uint8))
    assert errors == []
    # A seeds layer with a label other than 0, 1, 2: refused before any work, in one line.
    viewer.add_labels(np.full(stack.shape, 5, dtype=np.uint8), name="bad seeds")
    widget.seeds_choice.setCurrentText("bad seeds")
    assert widget.run_split() is None
    assert len(errors) == 1 and "\n" not in errors[0] and "bad seeds" in errors[0]
    # A failure inside the worker (an image with NaN) also arrives as one line.
    widget.seeds_choice.setCurrentText(_widget.NO_LAYER)
    viewer.add_image(np.full((20, 20), np.nan), name="nan")
    widget.image_choice.setCurrentText("nan")
    _run(qtbot, widget, widget.run_split)
    assert len(errors) == 2 and "\n" not in errors[1] and errors[1].startswith("segcut: nan:")


def test_box_and_point_seeds_map_to_image_pixels(make_napari_viewer):
    viewer = make_napari_viewer()
    image = viewer.add_image(np.zeros((50, 60)), scale=(2.0, 2.0), translate=(10.0, 0.0))
    # A rectangle in world coordinates over rows 20..40 and columns 5..30 of the image.
    shapes = viewer.add_shapes([np.array([[50.0, 10.0], [90.0, 60.0]])], shape_type="rectangle")
    # Reference: hand computation, world = 2 * pixel + (10, 0); x1, y1 exclusive.
    assert box_from_shapes(shapes, image, (50, 60)) == (5, 20, 31, 41)
    points = viewer.add_points(np.array([[30.0, 8.0], [70.0, 40.0], [500.0, 0.0]]),
                               features={"seed": ["foreground", "background", "foreground"]})
    seeds = points_seeds(points, image, (50, 60))
    assert seeds[10, 4] == 1 and seeds[30, 20] == 2
    assert np.count_nonzero(seeds) == 2  # the third point lies outside the image


@settings(max_examples=25, deadline=None)
@given(image_scale=st.tuples(st.floats(0.25, 4.0), st.floats(0.25, 4.0)),
       image_shift=st.tuples(st.floats(-50, 50), st.floats(-50, 50)),
       shapes_scale=st.tuples(st.floats(0.25, 4.0), st.floats(0.25, 4.0)),
       shapes_shift=st.tuples(st.floats(-50, 50), st.floats(-50, 50)),
       rows=st.tuples(st.integers(0, 29), st.integers(0, 29)),
       cols=st.tuples(st.integers(0, 39), st.integers(0, 39)))
def test_box_follows_the_layers_transforms(image_scale, image_shift, shapes_scale, shapes_shift,
                                           rows, cols):
    # Invariant: a rectangle drawn through two pixel centres (in world coordinates, on a
    # Shapes layer with its own scale and shift) gives the box of exactly those pixels,
    # whatever the two layers' transforms (world = scale * data + shift, common knowledge
    # for napari's affine layer transforms).
    image = napari.layers.Image(np.zeros((30, 40)), scale=image_scale, translate=image_shift)
    corners_px = np.array([[rows[0], cols[0]], [rows[1], cols[1]]], dtype=float)
    world = corners_px * np.array(image_scale) + np.array(image_shift)
    data = (world - np.array(shapes_shift)) / np.array(shapes_scale)
    shapes = napari.layers.Shapes([data], shape_type="rectangle", scale=shapes_scale,
                                  translate=shapes_shift)
    expected = (min(cols), min(rows), max(cols) + 1, max(rows) + 1)
    assert box_from_shapes(shapes, image, (30, 40)) == expected


def test_reader_round_trips_a_run_folder(make_napari_viewer, qtbot, tmp_path, errors):
    inputs = tmp_path / "images"
    inputs.mkdir()
    for name in ("oak_gray.png", "ivy_nir.tif"):
        shutil.copy(IMAGES / name, inputs / name)
    run = tmp_path / "run"
    assert cli_main(["split", str(inputs), "-o", str(run), "--prior", "border,center",
                     "--seed", "5"]) == 0
    records = load_records(run)
    viewer = make_napari_viewer()
    layers = viewer.open(str(run), plugin="segcut")
    names = [layer.name for layer in layers]
    assert names == ["ivy_nir", "ivy_nir mask", "oak_gray", "oak_gray mask"]
    for stem, file in (("ivy_nir", "ivy_nir.tif"), ("oak_gray", "oak_gray.png")):
        mask_layer = viewer.layers[f"{stem} mask"]
        # Reference: the files the command line wrote, read back by segcut.read_mask/read_image.
        np.testing.assert_array_equal(mask_layer.data != 0,
                                      segcut.read_mask(run / "masks" / f"{stem}.png"))
        np.testing.assert_array_equal(viewer.layers[stem].data,
                                      segcut.read_image(inputs / file).array)
        assert mask_layer.metadata["segcut"]["record"] == records[file]
        assert mask_layer.metadata["segcut"]["record"]["seed"] == image_seed(
            5, hash_file(inputs / file))
    # The run's settings in the widget split the run's image into the run's mask again.
    widget = _widget_for(viewer)
    widget.image_choice.setCurrentText("oak_gray")
    widget.use_run_settings()
    assert (widget.prior_choice.currentText(), widget.random_seed.value()) == (
        "border and center", 5)
    _run(qtbot, widget, widget.run_split)
    np.testing.assert_array_equal(_labels_named(viewer, "oak_gray split")[0].data != 0,
                                  segcut.read_mask(run / "masks" / "oak_gray.png"))
    assert float(widget.numbers["cut value"].text()) == pytest.approx(
        records["oak_gray.png"]["value"], rel=1e-9)
    assert errors == []
    # The writer: a Labels layer saved as .png reads back as the same mask (0 / 255).
    out = tmp_path / "saved.png"
    viewer.layers.selection = {viewer.layers["oak_gray mask"]}
    assert viewer.layers.save(str(out), selected=True, plugin="segcut") == [str(out)]
    np.testing.assert_array_equal(segcut.read_mask(out), viewer.layers["oak_gray mask"].data != 0)
    assert set(np.unique(segcut.read_image(out).array)) <= {0, 255}
    # Moved away from its inputs, the run folder still opens, with the overlays instead.
    moved = tmp_path / "elsewhere" / "run"
    shutil.copytree(run, moved)
    ivy = segcut.read_image(inputs / "ivy_nir.tif")
    shutil.rmtree(inputs)
    layers = read_run_folder(str(moved))
    assert [kw["name"] for _, kw, _ in layers][:2] == ["ivy_nir overlay", "ivy_nir mask"]
    # The overlay is cut to the mask's size (its legend strip left out) and lines up with it:
    # reference, segcut.drawing.overlay_image of the image and mask without the legend.
    (picture, kwargs, _), (mask, _, _) = layers[:2]
    assert picture.shape == (*mask.shape, 3) and kwargs["rgb"] is True
    np.testing.assert_array_equal(picture, overlay_image(ivy.array, mask != 0,
                                                         channel_axis=ivy.channel_axis))


def test_sample_data_are_the_demo_scans(make_napari_viewer):
    viewer = make_napari_viewer()
    for key in ("oak_gray", "ivy_nir"):
        viewer.open_sample("segcut", key)
        # Reference: the scan and its true mask read from sample_images/ by segcut's readers.
        np.testing.assert_array_equal(viewer.layers[key].data,
                                      segcut.read_image(sample_folder() / "images" /
                                                        SAMPLES[key]).array)
        np.testing.assert_array_equal(
            viewer.layers[f"{key} truth"].data != 0,
            segcut.read_mask(sample_folder() / "truth" / f"{key}.png"))
    assert sorted(p.name for p in (sample_folder() / "images").iterdir()) == sorted(
        SAMPLES.values())
