"""Open a segcut run folder in napari, and save a Labels layer as a segcut mask.

A run folder (see :mod:`segcut.batch`) holds ``records.jsonl``, ``run.toml`` and
``masks/``. Opening it gives, for every finished input, its image and its mask as a
Labels layer (0 background, 1 foreground) whose metadata holds the input's record
(cut value, upper bound, gap, ...), the run's configuration and the folder.

The run folder does not store where its inputs were, only their names relative to
the folder they were found in and a SHA-256 of their bytes. The image is looked for
under that name beside the run folder, in the run folder's parent and in the current
folder, and used only when its hash matches the record; otherwise the run's overlay
(the image with the mask shaded and outlined) stands in for it, cut to the mask's size
(overlays carry a legend strip below the picture). The overlay of a 3-D stack shows
three of its planes side by side, which cannot line up with the mask: such a stack is
opened with its mask only.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

import segcut
from segcut.batch import hash_file, load_records

from ._inputs import one_line

__all__ = ["find_input_image", "get_run_reader", "overlay_picture", "read_run_folder",
           "write_mask_layer"]

RECORDS_NAME = "records.jsonl"
RUN_CONFIG_NAME = "run.toml"
METADATA_KEY = "segcut"


def get_run_reader(path):
    """The reader of ``path`` when it is a segcut run folder, else None (npe2 reader hook)."""
    if isinstance(path, (list, tuple)):
        if len(path) != 1:
            return None
        path = path[0]
    folder = Path(path)
    if not folder.is_dir() or not (folder / RECORDS_NAME).is_file():
        return None
    return read_run_folder


def find_input_image(run_folder, record) -> Path | None:
    """The input image of ``record`` if it can be found with the recorded content hash."""
    name = record.get("input")
    wanted = record.get("input_hash")
    if not isinstance(name, str) or not isinstance(wanted, str):
        return None
    run_folder = Path(run_folder).resolve()
    candidates = [record.get(key) for key in ("path", "input_path") if record.get(key)]
    for root in (run_folder.parent, run_folder.parent / "images", Path.cwd()):
        candidates.append(root / name)
    for candidate in candidates:
        candidate = Path(candidate)
        try:
            if candidate.is_file() and hash_file(candidate) == wanted:
                return candidate
        except OSError:
            continue
    return None


def _stem(name: str) -> str:
    head, _, base = name.rpartition("/")
    base = base.rsplit(".", 1)[0] if "." in base.lstrip(".") else base
    return f"{head}/{base}" if head else base


def overlay_picture(overlay, mask_shape) -> np.ndarray | None:
    """The picture part of an overlay, cut to the mask's ``(M, N)`` (None when it cannot be).

    :func:`segcut.drawing.write_overlay` puts a legend strip below the picture and may
    pad it on the right, so the picture is the top left ``M x N`` block.

    Examples
    --------
    >>> overlay = np.zeros((6 + 16, 40, 3), np.uint8)  # a 6 x 4 picture with its legend
    >>> overlay_picture(overlay, (6, 4)).shape
    (6, 4, 3)
    >>> overlay_picture(overlay, (3, 6, 4)) is None  # a stack's overlay shows three planes
    True
    """
    if len(mask_shape) != 2:
        return None
    height, width = mask_shape
    if overlay.shape[0] < height or overlay.shape[1] < width:
        return None
    return np.ascontiguousarray(overlay[:height, :width])


def _image_layer(run_folder: Path, record: dict, stem: str, metadata: dict, visible: bool,
                 mask_shape: tuple):
    source = find_input_image(run_folder, record)
    name, found = stem, {"source": str(source)}
    if source is not None:
        image = segcut.read_image(source)
        data, rgb = image.array, image.channel_axis is not None
    else:
        overlay = record.get("overlay")
        if not overlay:
            return None
        data = overlay_picture(segcut.read_image(run_folder / overlay).array, mask_shape)
        if data is None:
            return None
        name, found, rgb = f"{stem} overlay", {"source": str(run_folder / overlay)}, True
    kwargs = {"name": name, "rgb": rgb, "visible": visible,
              "metadata": {METADATA_KEY: {**metadata, "kind": "run image", **found}}}
    return (data, kwargs, "image")


def _record_layers(run_folder: Path, record: dict, config_text, visible: bool) -> list:
    stem = _stem(record["input"])
    metadata = {"record": record, "run_folder": str(run_folder), "config": config_text}
    mask = segcut.read_mask(run_folder / record["mask"])
    layers = []
    image = _image_layer(run_folder, record, stem, metadata, visible, mask.shape)
    if image is not None:
        layers.append(image)
    layers.append((mask.astype(np.uint8),
                   {"name": f"{stem} mask", "visible": visible,
                    "metadata": {METADATA_KEY: {**metadata, "kind": "run mask"}}},
                   "labels"))
    return layers


def read_run_folder(path) -> list:
    """Layers of a run folder: each finished input's image and its mask.

    Inputs are taken in name order; only the first pair is visible. An input whose
    files cannot be read is left out with a one-line notification.

    Returns
    -------
    list of (data, kwargs, layer type) tuples
    """
    from napari.utils.notifications import show_warning

    if isinstance(path, (list, tuple)):
        path = path[0]
    run_folder = Path(path)
    records = load_records(run_folder)
    try:
        config_text = (run_folder / RUN_CONFIG_NAME).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        config_text = None
    layers: list = []
    for name in sorted(records):
        record = records[name]
        if record.get("status") != "ok" or not record.get("mask"):
            continue
        try:
            layers.extend(_record_layers(run_folder, record, config_text, visible=not layers))
        except (segcut.SegcutError, OSError, ValueError) as exc:
            show_warning(f"segcut: {run_folder}: {name}: {one_line(exc)}")
    if not layers:
        show_warning(f"segcut: {run_folder}: no finished inputs with a mask")
    return layers


def write_mask_layer(path: str, data, attributes: dict) -> list:
    """Write a Labels layer as a segcut mask: 0 background, 255 foreground (npe2 writer hook).

    Every non-zero label is foreground. 2-D masks go to PNG or TIFF, 3-D masks to TIFF.
    A mask that cannot be written gives a one-line notification and no file.

    Returns
    -------
    list of str
        The file written (empty when nothing was written).
    """
    from napari.utils.notifications import show_error

    try:
        segcut.write_mask(np.asarray(data) != 0, os.fspath(path))
    except (ValueError, OSError, segcut.SegcutError) as exc:
        show_error(f"segcut: {os.fspath(path)}: {one_line(exc)}")
        return []
    return [os.fspath(path)]
