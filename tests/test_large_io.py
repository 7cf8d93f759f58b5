"""Large inputs through the file-reading path: Zarr / OME-Zarr, mapped TIFF above
MAX_PIXELS, tiled masks and reduced overlays of folder runs.

References: zarr and tifffile themselves (they write the stores and files read here,
and read back the masks written), the OME-Zarr specification's metadata layout
(versions 0.4 and 0.5, from memory: ``multiscales`` with ``axes`` and ``datasets``
carrying ``scale`` transforms; 0.5 nests it under ``"ome"``), and ``segcut.split`` of
the same pixels held in memory. Images are small; ``max_graph_pixels``, ``MAX_PIXELS``
and ``LAZY_PIXELS`` are lowered to send them down the same code as large ones.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import tifffile
import zarr

from segcut import io
from segcut.batch import hash_file, load_records, run_batch
from segcut.batch.memory import image_pixels
from segcut.config import SplitConfig
from segcut.errors import InputError
from segcut.pipeline import split

from test_large import _iou, _scene

LARGE = SplitConfig(max_graph_pixels=20000)


def _ome(path, image, *, version="0.4", levels=2, channels_first=True, chunks=64):
    """An OME-Zarr image of ``image`` (M, N, 3) with ``levels`` levels (factor 2 apart)."""
    fmt = 3 if version == "0.5" else 2
    group = zarr.open_group(str(path), mode="w", zarr_format=fmt)
    datasets = []
    for k in range(levels):
        level = image[::2 ** k, ::2 ** k]
        if channels_first:
            level = np.moveaxis(level, -1, 0)
        c = (1, chunks, chunks) if channels_first else (chunks, chunks, 3)
        group.create_array(str(k), shape=level.shape, chunks=c, dtype=level.dtype)[:] = level
        scale = [1.0, 2.0 ** k, 2.0 ** k] if channels_first else [2.0 ** k, 2.0 ** k, 1.0]
        datasets.append({"path": str(k),
                         "coordinateTransformations": [{"type": "scale", "scale": scale}]})
    axes = [{"name": "y", "type": "space"}, {"name": "x", "type": "space"}]
    channel = {"name": "c", "type": "channel"}
    axes = [channel] + axes if channels_first else axes + [channel]
    multiscale = {"axes": axes, "datasets": datasets, "name": "scene"}
    if version == "0.5":
        group.attrs["ome"] = {"version": "0.5", "multiscales": [multiscale]}
    else:
        group.attrs["multiscales"] = [{**multiscale, "version": version}]
    return path


@pytest.mark.parametrize("fmt", [2, 3])
@pytest.mark.parametrize("shape", [(40, 30), (40, 30, 3), (5, 40, 30)])
def test_zarr_arrays_read_as_stored(tmp_path, fmt, shape):
    # reference: the array zarr itself stores (gray, RGB channels last, a stack)
    values = np.random.default_rng(0).integers(0, 65535, shape).astype(np.uint16)
    store = tmp_path / "a.zarr"
    zarr.open_array(str(store), mode="w", shape=shape, chunks=(16,) * len(shape),
                    dtype="u2", zarr_format=fmt)[:] = values
    data = io.read_image(store)
    assert data.format == "ZARR" and data.array.dtype == np.uint16
    assert np.array_equal(data.array, values)
    assert data.channel_axis == (-1 if shape == (40, 30, 3) else None)
    assert data.is_stack == (len(shape) == 3 and shape[-1] > 4)
    assert image_pixels(store) == data.spatial_shape


@pytest.mark.parametrize("version", ["0.4", "0.5"])
@pytest.mark.parametrize("channels_first", [True, False])
def test_ome_zarr_full_resolution_and_levels(tmp_path, version, channels_first):
    image, _ = _scene(0, shape=(90, 70))
    store = _ome(tmp_path / "i.zarr", image, version=version, channels_first=channels_first)
    data = io.read_image(store)
    assert np.array_equal(data.array, image)  # the first dataset, channels moved last
    assert data.channel_axis == -1 and data.mode.startswith(f"ome-zarr {version}")
    (fy, fx, read), = data.levels
    assert (fy, fx) == (2.0, 2.0)  # scale 2 over scale 1: common arithmetic
    assert np.array_equal(read(), image[::2, ::2])


def test_ome_zarr_without_axes_is_tczyx_and_unit_axes_are_dropped(tmp_path):
    # OME-Zarr 0.1/0.2 have no 'axes': 5-D t, c, z, y, x (from memory of the standard)
    values = np.arange(2 * 30 * 20, dtype=np.uint8).reshape(1, 2, 1, 30, 20)
    group = zarr.open_group(str(tmp_path / "o.zarr"), mode="w", zarr_format=2)
    group.create_array("0", shape=values.shape, dtype="u1")[:] = values
    group.attrs["multiscales"] = [{"version": "0.1", "datasets": [{"path": "0"}]}]
    data = io.read_image(tmp_path / "o.zarr")
    assert data.array.shape == (30, 20)  # gray + alpha: the second channel dropped
    assert np.array_equal(data.array, values[0, 0, 0])
    assert data.alpha is not None and np.array_equal(data.alpha, values[0, 1, 0])


def _bad_stores(tmp_path):
    yield "empty.zarr", None, "not a readable Zarr array or group"
    group = zarr.open_group(str(tmp_path / "two.zarr"), mode="w", zarr_format=2)
    group.create_array("a", shape=(4, 4), dtype="u1")
    group.create_array("b", shape=(4, 4), dtype="u1")
    yield "two.zarr", None, "no OME-Zarr 'multiscales' metadata and holds 2 arrays"

    def ome(name, shape, axes, dtype="u1", datasets=None):
        g = zarr.open_group(str(tmp_path / name), mode="w", zarr_format=2)
        g.create_array("0", shape=shape, dtype=dtype)
        g.attrs["multiscales"] = [{"version": "0.4", "axes": axes,
                                   "datasets": datasets or [{"path": "0"}]}]
        return name

    yield ome("time.zarr", (3, 8, 8), ["t", "y", "x"]), None, "time series of 3 time points"
    yield ome("many.zarr", (5, 8, 8), ["c", "y", "x"]), None, "has 5 channels"
    yield ome("axes.zarr", (8, 8), ["y", "x", "c"]), None, "do not match the array's 2"
    yield ome("noyx.zarr", (8, 8), ["y", "y"]), None, "are not ones segcut reads"
    yield ome("gone.zarr", (8, 8), ["y", "x"], datasets=[{"path": "9"}]), None, "is missing"
    yield ome("cplx.zarr", (8, 8), ["y", "x"], dtype="c8"), None, "unsupported pixel type"
    g = zarr.open_group(str(tmp_path / "nodata.zarr"), mode="w", zarr_format=2)
    g.attrs["multiscales"] = [{"version": "0.4", "axes": ["y", "x"], "datasets": []}]
    yield "nodata.zarr", None, "no 'datasets'"
    zarr.open_array(str(tmp_path / "wide.zarr"), mode="w", shape=(2, 3, 4, 9), dtype="u1")
    yield "wide.zarr", None, "unsupported Zarr array shape"


def test_bad_zarr_content_is_one_line_naming_the_store(tmp_path):
    (tmp_path / "empty.zarr").mkdir()
    for name, _, message in _bad_stores(tmp_path):
        with pytest.raises(InputError, match=message) as info:
            io.read_image(tmp_path / name)
        text = str(info.value)
        assert "\n" not in text and text.startswith(str(tmp_path / name) + ": "), text


@pytest.mark.parametrize("kind", ["zarr", "tiff", "bigtiff_tiled"])
def test_images_above_max_pixels_are_read_mapped(tmp_path, kind):
    # reference: the pixels as written by zarr / tifffile; a 2-D image above max_pixels
    # is read through a file mapping (a view, not a copy owned by the array)
    image, _ = _scene(1, shape=(96, 80))
    if kind == "zarr":
        path = tmp_path / "m.zarr"
        zarr.open_array(str(path), mode="w", shape=image.shape, chunks=(20, 32, 3),
                        dtype="u1")[:] = image
    else:
        path = tmp_path / "m.tif"
        extra = dict(bigtiff=True, tile=(32, 32), compression="zlib") if kind != "tiff" else {}
        tifffile.imwrite(path, image, photometric="rgb", **extra)
    data = io.read_image(path, max_pixels=1000)
    assert np.array_equal(data.array, image)
    assert not data.array.flags.owndata
    with pytest.raises(InputError, match="exceeds the limit of 7679 pixels for images read "
                                         "through a file mapping"):
        io.read_image(path, max_pixels=1000, max_mapped_pixels=7679)  # 96 * 80 = 7680


def test_stacks_and_whole_decoded_formats_keep_the_limit(tmp_path):
    stack = tmp_path / "s.tif"
    tifffile.imwrite(stack, np.zeros((3, 20, 20), np.uint8), photometric="minisblack")
    with pytest.raises(InputError, match="3-D TIFF image of 1200 pixels .* exceeds the limit "
                                         "of 1000 pixels for images decoded whole"):
        io.read_image(stack, max_pixels=1000)
    store = tmp_path / "z.zarr"
    zarr.open_array(str(store), mode="w", shape=(3, 20, 20), dtype="u1")
    with pytest.raises(InputError, match=r"3-D Zarr image of 1200 pixels \(shape \(3, 20, 20\)\)"):
        io.read_image(store, max_pixels=1000)
    png = tmp_path / "p.png"
    io.write_image(np.zeros((40, 40), np.uint8), png)
    with pytest.raises(InputError, match="save it as a 2-D TIFF .* or a Zarr array") as info:
        io.read_image(png, max_pixels=1000)
    assert str(info.value).startswith(f"{png}: PNG image of 1600 pixels")


def test_zarr_read_mapped_splits_as_the_array_in_memory(tmp_path, monkeypatch):
    # reference: split of the same pixels held in memory (the mapped copy is the same array)
    monkeypatch.setattr(io, "LAZY_PIXELS", 1000)
    image, truth = _scene(2, shape=(150, 140))
    store = _ome(tmp_path / "s.zarr", image, chunks=48)
    data = io.read_image(store)
    assert not data.array.flags.owndata
    mapped = split(data.array, LARGE, rng=3)
    held = split(image, LARGE, rng=3)
    assert mapped.mask.tobytes() == held.mask.tobytes()
    assert _iou(mapped.mask, truth) >= 0.9


def test_hash_of_a_zarr_store_follows_its_content(tmp_path):
    store = tmp_path / "h.zarr"
    array = zarr.open_array(str(store), mode="w", shape=(8, 8), chunks=(4, 4), dtype="u1")
    array[:] = 1
    first = hash_file(store)
    assert first == hash_file(store)
    array[0, 0] = 2
    assert hash_file(store) != first


def test_folder_run_writes_tiled_tiff_masks_for_large_inputs(tmp_path):
    # reference: tifffile reads the masks back; the TIFF and the Zarr input hold the same
    # pixels, so their masks are the same bytes (seeds are taken from the file hash, so
    # the run is forced to one seed through the same content)
    image, truth = _scene(3, shape=(200, 180))
    small, _ = _scene(4, shape=(64, 64))
    folder = tmp_path / "in"
    folder.mkdir()
    tifffile.imwrite(folder / "big.tif", image, photometric="rgb", tile=(64, 64))
    _ome(folder / "big_ome.zarr", image, levels=3)
    io.write_image(small, folder / "small.png", channel_axis=-1)
    (folder / "notes.txt").write_text("not an image")
    out = tmp_path / "out"
    summary = run_batch([folder], out, LARGE.replace(max_graph_pixels=9000), jobs=1,
                        confidence_maps=True)
    assert summary.done == 3 and summary.failed == 0
    records = load_records(out)
    assert records["big.tif"]["mask"] == "masks/big.tif"
    assert records["big_ome.zarr"]["mask"] == "masks/big_ome.tif"
    assert records["small.png"]["mask"] == "masks/small.png"
    for name in ("big.tif", "big_ome.tif"):
        with tifffile.TiffFile(out / "masks" / name) as tif:
            assert tif.pages[0].is_tiled and tif.pages[0].tilewidth == 256
            mask = tif.asarray() > 0
        assert mask.shape == truth.shape and _iou(mask, truth) >= 0.9
        with tifffile.TiffFile(out / "confidence" / name) as tif:
            assert tif.pages[0].is_tiled
    csv = (out / "summary.csv").read_text().splitlines()
    column = csv[0].split(",").index("mask")
    assert sorted(line.split(",")[column] for line in csv[1:]) == [
        "masks/big.tif", "masks/big_ome.tif", "masks/small.png"]
    assert not list(out.rglob("*.tmp*"))  # temp files renamed into place


def test_overlay_of_a_multiscale_image_comes_from_a_stored_level(tmp_path):
    # the overlay of a large OME-Zarr image is drawn from the largest level that fits:
    # a level whose pixels differ from the full image's reduction shows it
    from segcut.drawing import write_display_overlay

    image, truth = _scene(5, shape=(120, 100))
    store = _ome(tmp_path / "o.zarr", image, levels=3)
    marked = zarr.open_group(str(store), mode="r+")["1"]
    marked[:, :4, :4] = 255  # the level of factor 2 (60 x 50 = 3000 pixels)
    data = io.read_image(store)
    path = tmp_path / "o.png"
    write_display_overlay(data, truth, path, legend=False, max_pixels=4000)
    picture = io.read_image(path).array
    assert picture.shape == (60, 50, 3)  # the level's size: 120 / 2 by 100 / 2
    assert picture[:4, :4].min() > 200  # the marked corner (background, not tinted)
    write_display_overlay(data, truth, path, legend=False, max_pixels=2000)
    assert io.read_image(path).array.shape == (30, 25, 3)  # 750 pixels fit in 2000
    write_display_overlay(data, truth, path, legend=False, max_pixels=100)  # no level fits
    assert io.read_image(path).array.shape == (10, 9, 3)  # reduced by 12: common arithmetic


def test_cli_split_of_a_zarr_store(tmp_path):
    # the command line takes a .zarr folder as one input and reports bad stores in one line
    from segcut_cli.main import main

    image, truth = _scene(6, shape=(120, 110))
    store = _ome(tmp_path / "cli.zarr", image)
    assert main(["split", str(store), "-o", str(tmp_path / "run"), "--quiet"]) == 0
    records = [json.loads(line) for line in (tmp_path / "run/records.jsonl").read_text().splitlines()]
    assert records[-1]["mask"] == "masks/cli.png" and records[-1]["status"] == "ok"
    mask = io.read_mask(tmp_path / "run/masks/cli.png")
    assert _iou(mask, truth) >= 0.9
    bad = tmp_path / "bad.zarr"
    bad.mkdir()
    assert main(["split", str(bad), "-o", str(tmp_path / "run2"), "--quiet"]) == 1
    records = load_records(tmp_path / "run2")
    error = records["bad.zarr"]["error"]
    assert error.startswith(f"{bad}: not a readable Zarr") and "\n" not in error


def test_tiff_decoded_whole_above_the_limit_says_what_reads_it_mapped(tmp_path):
    # an LZW TIFF (written by Pillow, the reference writer) goes to Pillow when tifffile
    # lacks imagecodecs: above max_pixels the refusal says how to read it mapped instead
    pytest.importorskip("PIL")
    from PIL import Image

    try:
        import imagecodecs  # noqa: F401
    except ImportError:
        pass
    else:
        pytest.skip("imagecodecs is installed: tifffile reads LZW itself (mapped)")
    path = tmp_path / "lzw.tif"
    Image.fromarray(np.zeros((60, 50), np.uint8)).save(path, compression="tiff_lzw")
    with pytest.raises(InputError, match=r"TIFF \(its compression decoded whole, by Pillow\) "
                                         r"image of 3000 pixels .* imagecodecs package "
                                         r"installed this TIFF is read through a file mapping"):
        io.read_image(path, max_pixels=1000)
    assert io.read_image(path).array.shape == (60, 50)


def test_mapped_float_zarr_gets_its_non_finite_values_replaced_in_the_mapping(tmp_path):
    # reference: numpy's median of the finite values of each channel (the documented rule)
    values = np.random.default_rng(7).random((50, 40, 3)).astype(np.float32)
    values[3, 4, 0] = np.nan
    values[10, 11, 2] = np.inf
    store = tmp_path / "f.zarr"
    zarr.open_array(str(store), mode="w", shape=values.shape, chunks=(16, 16, 3),
                    dtype="f4")[:] = values
    data = io.read_image(store, max_pixels=1000)
    assert not data.array.flags.owndata and data.array.dtype == np.float32
    assert data.array[3, 4, 0] == np.median(values[..., 0][np.isfinite(values[..., 0])])
    assert data.array[10, 11, 2] == np.median(values[..., 2][np.isfinite(values[..., 2])])
    assert np.isfinite(data.array).all() and any("NaN or infinite" in w for w in data.warnings)
    assert np.isnan(zarr.open_array(str(store), mode="r")[3, 4, 0])  # the store is untouched


def test_cli_score_and_compare_take_a_zarr_store_as_one_image(tmp_path, capsys):
    # a .zarr folder is one image for score (and its mask for compare), not a folder of images
    from segcut_cli.main import main

    image, truth = _scene(6, shape=(120, 110))
    store = _ome(tmp_path / "one.zarr", image)
    assert main(["split", str(store), "-o", str(tmp_path / "run"), "--quiet"]) == 0
    mask_path = tmp_path / "run/masks/one.png"
    capsys.readouterr()
    assert main(["score", str(store), str(mask_path), "--json"]) == 0
    scored = json.loads(capsys.readouterr().out)
    assert "one" in json.dumps(scored) and '"error"' not in json.dumps(scored)
    mask_store = tmp_path / "truth.zarr"
    zarr.open_array(str(mask_store), mode="w", shape=truth.shape, chunks=(32, 32),
                    dtype="u1")[...] = truth.astype(np.uint8) * 255
    assert main(["compare", "-r", str(mask_store), str(mask_path), "--json"]) == 0
    compared = json.loads(capsys.readouterr().out)
    assert "iou" in json.dumps(compared)
