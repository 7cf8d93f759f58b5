"""Reading Zarr arrays and OME-Zarr images (part of :mod:`segcut.io`).

:func:`segcut.io.read_image` hands a folder that is a Zarr store here. What is read:

- a **Zarr array** (format 2 or 3): 2-D ``(Y, X)``; 3-D ``(Y, X, C)`` when the last
  axis has 1 to 4 entries, else a stack ``(Z, Y, X)``; 4-D ``(Z, Y, X, C)``;
- an **OME-Zarr image** (a group whose attributes hold ``multiscales``: version 0.4
  at the top level, 0.5 under ``"ome"``; 0.1-0.3 too): the first multiscale's first
  dataset (the full resolution) is read, laid out by the multiscale's ``axes``
  (names ``t``, ``c``, ``z``, ``y``, ``x`` or their ``type`` ``time``, ``channel``,
  ``space``; 0.1/0.2, which have no ``axes``, are ``tczyx``). Time and depth axes of
  length one are dropped; a time series is refused; a ``bioformats2raw.layout`` group
  opens its first image ``0``;
- a group without ``multiscales`` that holds exactly one array: that array.

Channels: 1 gray, 2 gray + alpha, 3 RGB, 4 RGB + alpha (the alpha dropped, as for
the other formats); more are refused. Pixel types: unsigned and signed integers,
booleans and floats, under the same rules as TIFF (:func:`segcut.io._normalise_dtype`).

Large 2-D images (more than :data:`segcut.io.LAZY_PIXELS` pixels, or more than the
caller's ``max_pixels``) are decoded band of chunk rows by band into a temporary file
mapping (:func:`mapped_array`), channels last: the pixels take page cache the system
can reclaim, not anonymous memory, and :mod:`segcut.large` streams over them. Such
images are read up to ``max_mapped_pixels`` pixels.

OME-Zarr's lower-resolution datasets are listed in :attr:`ImageData.levels` (scale
factors from their ``scale`` transforms, relative to the full resolution), and an
overlay of a large image is drawn from the largest level that fits in the overlay's
pixels (:func:`segcut.drawing.write_display_overlay`). The superpixel graph is not
built on such a level: the large-image path's reduced copy is an area average of the
normalised pixels in their canonical orientation, which keeps results the same as
for the same pixels in a TIFF and exactly equivariant; a level made by another
program may be filtered differently.
"""

from __future__ import annotations

import math
import os
import tempfile
from pathlib import Path

import numpy as np

from .errors import InputError

__all__ = ["is_zarr_store", "zarr_spatial_shape", "read_zarr", "mapped_array",
           "ZARR_MARKERS"]

#: Files that make a folder a Zarr store (format 2 array, group, attributes; format 3).
ZARR_MARKERS = (".zarray", ".zgroup", ".zattrs", "zarr.json")

#: Bytes of decoded pixels per band when a large array is copied into its mapping.
_BAND_BYTES = 64 * 2**20


def is_zarr_store(path) -> bool:
    """True when ``path`` is a folder holding Zarr metadata (or a folder named ``*.zarr``).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> is_zarr_store(folder)
    False
    >>> _ = (folder / "zarr.json").write_text("{}")
    >>> is_zarr_store(folder)
    True
    """
    p = Path(path)
    if not p.is_dir():
        return False
    return p.suffix.lower() == ".zarr" or any((p / name).is_file() for name in ZARR_MARKERS)


def mapped_array(shape, dtype) -> np.ndarray:
    """A writable array backed by an unnamed temporary file (removed when unmapped).

    Examples
    --------
    >>> a = mapped_array((2, 3), np.uint8)
    >>> a[:] = 7
    >>> int(a.sum()), isinstance(a, np.memmap)
    (42, True)
    """
    with tempfile.TemporaryFile(prefix="segcut-") as fh:
        # the mapping keeps the (already unlinked) file alive after the handle closes
        return np.memmap(fh, dtype=np.dtype(dtype), mode="w+", shape=tuple(shape))


# -- metadata ---------------------------------------------------------------------------

def _open(path):
    import zarr

    try:
        return zarr.open(store=os.fspath(path), mode="r")
    except Exception as err:  # noqa: BLE001 - missing or damaged metadata fails in many ways
        raise InputError(f"not a readable Zarr array or group ({_one_line(err)})",
                         path=path) from None


def _one_line(err) -> str:
    text = " ".join(str(err).split())
    return (text or type(err).__name__)[:300]


def _multiscales(attrs):
    """The ``multiscales`` list of OME-Zarr attributes (0.5 under ``"ome"``), or None."""
    ome = attrs.get("ome")
    if isinstance(ome, dict) and "multiscales" in ome:
        return ome["multiscales"], str(ome.get("version", "0.5"))
    if "multiscales" in attrs:
        found = attrs["multiscales"]
        version = found[0].get("version", "") if isinstance(found, list) and found \
            and isinstance(found[0], dict) else ""
        return found, str(version)
    return None, ""


def _axis_names(multiscale, ndim, path):
    """One letter per axis: t, c, z, y, x (from names, else types)."""
    axes = multiscale.get("axes")
    if axes is None:
        if ndim != 5:
            raise InputError(f"OME-Zarr multiscale without 'axes' must be 5-D (tczyx); "
                             f"its array has {ndim} dimensions", path=path)
        return "tczyx"
    if not isinstance(axes, list) or len(axes) != ndim:
        raise InputError(f"OME-Zarr 'axes' ({axes!r:.80}) do not match the array's {ndim} "
                         "dimensions", path=path)
    letters = []
    spaces = [i for i, a in enumerate(axes)
              if (a.get("type") if isinstance(a, dict) else None) == "space"
              or _name(a) in ("x", "y", "z")]
    for i, axis in enumerate(axes):
        name, kind = _name(axis), axis.get("type") if isinstance(axis, dict) else None
        if name in ("t", "c", "z", "y", "x") and not (kind == "space" and name in "tc"):
            letters.append(name)
        elif kind == "time":
            letters.append("t")
        elif kind == "channel":
            letters.append("c")
        elif i in spaces:
            letters.append("zyx"[3 - len(spaces) + spaces.index(i)] if len(spaces) <= 3
                           else "?")
        else:
            letters.append("?")
    text = "".join(letters)
    if sorted(text.replace("?", "")) != sorted(set(text.replace("?", ""))) \
            or "y" not in text or "x" not in text:
        raise InputError(f"OME-Zarr axes {[_name(a) for a in axes]} are not ones segcut "
                         "reads (t, c, z, y, x, each at most once)", path=path)
    return text


def _name(axis) -> str:
    return str(axis.get("name", "") if isinstance(axis, dict) else axis).lower()


def _scale(dataset, ndim):
    """The dataset's ``scale`` transform (ones when it has none)."""
    for transform in dataset.get("coordinateTransformations") or []:
        if isinstance(transform, dict) and transform.get("type") == "scale":
            scale = transform.get("scale")
            if isinstance(scale, list) and len(scale) == ndim:
                return [float(s) for s in scale]
    return [1.0] * ndim


def _image_node(node, path):
    """``(array, axes, levels, kind)``: the full-resolution array, its axis letters, the
    lower-resolution arrays ``[(factor_y, factor_x, array)]`` and a description."""
    import zarr

    if isinstance(node, zarr.Array):
        return node, _plain_axes(node.shape, path), [], "zarr"
    attrs = dict(node.attrs)
    multiscales, version = _multiscales(attrs)
    if multiscales is None and "bioformats2raw.layout" in attrs and "0" in node:
        return _image_node(node["0"], path)
    if multiscales is None:
        arrays = sorted(name for name, _ in node.arrays())
        if len(arrays) != 1:
            listed = ", ".join(arrays[:5]) or "none"
            raise InputError(f"Zarr group has no OME-Zarr 'multiscales' metadata and holds "
                             f"{len(arrays)} arrays ({listed}); give the path of one array",
                             path=path)
        array = node[arrays[0]]
        return array, _plain_axes(array.shape, path), [], "zarr"
    if not isinstance(multiscales, list) or not multiscales \
            or not isinstance(multiscales[0], dict):
        raise InputError("OME-Zarr 'multiscales' is empty or malformed", path=path)
    datasets = multiscales[0].get("datasets")
    if not isinstance(datasets, list) or not datasets or not all(
            isinstance(d, dict) and isinstance(d.get("path"), str) for d in datasets):
        raise InputError("OME-Zarr multiscale has no 'datasets' with a 'path'", path=path)
    try:
        arrays = [node[d["path"]] for d in datasets]
    except KeyError as err:
        raise InputError(f"OME-Zarr dataset {_one_line(err)} is missing", path=path) from None
    if not all(isinstance(a, zarr.Array) for a in arrays):
        raise InputError("an OME-Zarr dataset path names a group, not an array", path=path)
    full = arrays[0]
    axes = _axis_names(multiscales[0], full.ndim, path)
    base = _scale(datasets[0], full.ndim)
    levels = []
    for dataset, array in zip(datasets[1:], arrays[1:]):
        if array.ndim != full.ndim:
            continue
        scale = _scale(dataset, full.ndim)
        fy = scale[axes.index("y")] / base[axes.index("y")] if base[axes.index("y")] else 0
        fx = scale[axes.index("x")] / base[axes.index("x")] if base[axes.index("x")] else 0
        if fy >= 1 and fx >= 1:
            levels.append((fy, fx, array))
    return full, axes, levels, f"ome-zarr {version}".strip()


def _plain_axes(shape, path) -> str:
    ndim = len(shape)
    if ndim == 2:
        return "yx"
    if ndim == 3:
        return "yxc" if shape[-1] <= 4 else "zyx"
    if ndim == 4 and shape[-1] <= 4:
        return "zyxc"
    raise InputError(f"unsupported Zarr array shape {tuple(shape)}; segcut reads (Y, X), "
                     "(Y, X, C) with C <= 4, (Z, Y, X) and (Z, Y, X, C), or OME-Zarr images",
                     path=path)


def _layout(shape, axes, path):
    """``(index, order, kept)``: what to take of each axis and how to move the kept axes
    to (z, y, x, c) order; ``kept`` are their letters in that order."""
    index = []
    for letter, n in zip(axes, shape):
        if letter == "t" and n > 1:
            raise InputError(f"Zarr image is a time series of {n} time points (shape "
                             f"{tuple(shape)}, axes {axes}); segcut splits one 2-D image or "
                             "one 3-D stack", path=path)
        if letter == "?" and n > 1:
            raise InputError(f"Zarr image has an axis segcut does not know (shape "
                             f"{tuple(shape)}, axes {axes})", path=path)
        if letter == "c" and n > 4:
            raise InputError(f"Zarr image has {n} channels (1 to 4 are read: gray, gray + "
                             "alpha, RGB, RGB + alpha)", path=path)
        index.append(0 if letter in "t?" or (letter in "zc" and n == 1) else slice(None))
    kept = [a for a, i in zip(axes, index) if isinstance(i, slice)]
    order = sorted(range(len(kept)), key=lambda k: "zyxc".index(kept[k]))
    return index, order, "".join(kept[k] for k in order)


# -- pixels --------------------------------------------------------------------------

def zarr_spatial_shape(path) -> tuple | None:
    """The spatial shape ``(M, N)`` or ``(P, M, N)`` of a Zarr image from its metadata
    (nothing decoded); None when it cannot be read.

    Examples
    --------
    >>> import tempfile, os, zarr
    >>> store = os.path.join(tempfile.mkdtemp(), "a.zarr")
    >>> zarr.open_array(store, mode="w", shape=(40, 30, 3), dtype="u1").shape
    (40, 30, 3)
    >>> zarr_spatial_shape(store)
    (40, 30)
    """
    try:
        array, axes, _, _ = _image_node(_open(path), path)
        _, _, kept = _layout(array.shape, axes, path)
    except InputError:
        return None
    index = [i for i, a in enumerate(axes) if a in kept and a != "c"]
    return tuple(int(array.shape[i]) for i in index)


def read_zarr(path, *, max_pixels: int, lazy_pixels: int, max_mapped_pixels: int):
    """The pixels of a Zarr store as ``(array, channels, mode, levels)``.

    ``array`` is ``(M, N[, C])`` or ``(P, M, N[, C])`` in the stored dtype (native byte
    order), ``channels`` the number of stored channels (0: none), ``levels`` the lower
    resolutions ``[(factor_y, factor_x, reader)]`` where ``reader()`` gives that
    level's pixels laid out as ``array``. See :func:`segcut.io.read_image` for the
    limits.
    """
    node = _open(path)
    array, axes, levels, kind = _image_node(node, path)
    shape = tuple(int(n) for n in array.shape)
    if 0 in shape:
        raise InputError(f"image has no pixels (shape {shape})", path=path)
    if array.dtype.kind not in "biuf":
        raise InputError(f"unsupported pixel type {array.dtype} in the Zarr array", path=path)
    index, order, kept = _layout(shape, axes, path)
    sliced = [shape[i] for i, k in enumerate(index) if isinstance(k, slice)]
    out_shape = tuple(int(sliced[k]) for k in order)
    spatial = out_shape[:-1] if kept.endswith("c") else out_shape
    pixels = math.prod(spatial)
    from .io import _too_many

    mapped = len(spatial) == 2 and (pixels > lazy_pixels or pixels > max_pixels)
    if mapped:
        _too_many(pixels, max_mapped_pixels, path, out_shape, mapped=True)
    else:
        _too_many(pixels, max_pixels, path, out_shape, fmt="3-D Zarr")
    mode = f"{kind} {axes} {array.dtype.name}".strip()
    channels = out_shape[-1] if kept.endswith("c") else 0
    try:
        values = _mapped(array, index, order, out_shape, kept) if mapped \
            else _in_memory(array, index, order)
    except MemoryError:
        raise InputError("Zarr image too large to hold in memory", path=path) from None
    except Exception as err:  # noqa: BLE001 - a damaged chunk can fail anywhere
        raise InputError(f"cannot decode the Zarr data ({_one_line(err)})", path=path) from None
    readers = [(fy, fx, _level_reader(a, index, order, path)) for fy, fx, a in levels]
    return values, channels, mode, readers


def _native(values):
    return values.astype(values.dtype.newbyteorder("="), copy=False)


def _in_memory(array, index, order):
    values = np.asarray(array[tuple(index)])
    return np.ascontiguousarray(_native(np.transpose(values, order)))


def _level_reader(array, index, order, path):
    def read():
        try:
            return _in_memory(array, index, order)
        except Exception as err:  # noqa: BLE001 - a damaged chunk can fail anywhere
            raise InputError(f"cannot decode a Zarr level ({_one_line(err)})",
                             path=path) from None
    return read


def _mapped(array, index, order, out_shape, kept):
    """The 2-D image decoded band by band (whole chunk rows) into a file mapping."""
    sliced = [i for i, k in enumerate(index) if isinstance(k, slice)]
    y_source = sliced[order[kept.index("y")]]  # the stored axis that becomes the rows
    chunk_rows = int(array.chunks[y_source]) if hasattr(array, "chunks") else 256
    row_bytes = int(np.prod(out_shape[1:])) * array.dtype.itemsize
    band = max(1, _BAND_BYTES // max(row_bytes * chunk_rows, 1)) * chunk_rows
    out = mapped_array(out_shape, array.dtype.newbyteorder("="))
    for r0 in range(0, out_shape[0], band):
        window = list(index)
        window[y_source] = slice(r0, min(out_shape[0], r0 + band))
        out[r0:r0 + band] = np.transpose(np.asarray(array[tuple(window)]), order)
    out.flush()
    return out
