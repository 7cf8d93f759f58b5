"""Reading images, masks and seed markers; writing results atomically.

This module (with :mod:`segcut.batch`) is the only part of the engine that touches the
file system. Every reader turns a bad file into one :class:`~segcut.errors.InputError`
whose message is one line naming the file and the problem; every writer writes to a
temporary file in the target's folder and moves it into place with :func:`os.replace`,
so a target is either the old file or the complete new one, never half written.

Reading
-------
:func:`read_image` reads PNG, JPEG, TIFF and BMP files (the format is recognised by
the file's content, not its name) and returns an :class:`ImageData`:

===================  ================================================================
stored as            returned array
===================  ================================================================
gray (L, 1-bit)      ``(M, N)`` uint8 (1-bit pixels become 0 / 255)
gray 16-bit          ``(M, N)`` uint16 (PNG ``I;16`` and TIFF)
gray + alpha         ``(M, N)``; the alpha channel is dropped (see below)
RGB, YCbCr, ...      ``(M, N, 3)`` uint8 (or uint16 from TIFF)
RGBA                 ``(M, N, 3)``; the alpha channel is dropped
palette (P)          ``(M, N, 3)`` uint8, the palette applied
CMYK                 ``(M, N, 3)`` uint8, converted by Pillow's plain formula
float TIFF           ``(M, N[, 3])`` float32 or float64 (float16 becomes float32)
multi-page TIFF      ``(P, M, N[, 3])``: a 3-D stack, one page per plane
===================  ================================================================

Rules, in one place:

- **Orientation**: the EXIF orientation tag (JPEG, and any other file that carries
  one) is applied, so the array is the picture as a person sees it.
- **Alpha** is dropped, not composited: each pixel keeps its stored colour. When some
  pixels are not fully opaque a note is added to :attr:`ImageData.warnings`; the
  alpha values themselves stay available as :attr:`ImageData.alpha`.
- **Pixel limit**: images decoded whole into memory (PNG, JPEG, BMP, TIFF and Zarr
  stacks) with more than :data:`MAX_PIXELS` pixels (all pages of a stack together) are
  refused before they are decoded, as a guard against decompression bombs. Pass
  ``max_pixels=`` to change it.
- **Large TIFF and Zarr**: 2-D images above :data:`LAZY_PIXELS` pixels (or above
  ``max_pixels``) are mapped from the file (uncompressed, contiguous TIFF data: nothing
  is read until used) or decoded tile by tile into a temporary file mapping (tiled or
  compressed TIFF, BigTIFF, Zarr), so they do not take anonymous memory;
  :func:`segcut.split` then streams over them (:mod:`segcut.large`). Such images are
  read up to :data:`MAX_MAPPED_PIXELS` pixels (``max_mapped_pixels=``); the mapping
  needs that much room in the temporary folder (``TMPDIR``) when the data is compressed.
- **Zarr and OME-Zarr** (a folder): see :mod:`segcut.io_zarr` for the layouts read.
- **Non-finite values** (float images): an image with no finite value is refused; when
  only some values are NaN or infinite they are replaced by the median of the finite
  values of the same channel, and a note is added to the warnings.
- **Integer TIFF** of other widths: signed or 32-bit integers that fit in 0..65535
  become uint16, others float64; booleans become uint8 0 / 255.
- **16-bit colour PNG** is read at 8 bits per channel (a Pillow limitation); a note
  says so.
- **TIFF** is read with tifffile; compressions it decodes only with the optional
  ``imagecodecs`` package (LZW, JPEG, CCITT...) are read with Pillow instead. What
  tifffile logs about a damaged file goes into the warnings, not to the terminal.
- An image with no contrast at all is *not* an error here (the pipeline decides).

Notes collected while reading are returned in :attr:`ImageData.warnings`; nothing is
emitted through :mod:`warnings`, so the caller decides how to report them.

:func:`read_mask` reads a two-region mask (ours, or a reference) as a boolean array,
and :func:`read_seeds` reads a marker image (a trimap: white foreground, mid-gray
unknown, black background) into the labels 0 unknown, 1 foreground, 2 background.

Writing
-------
:func:`write_mask` and :func:`write_image` replace their target atomically, through
:func:`segcut.files.atomic_path` (the file-writing helpers live in :mod:`segcut.files`
and are importable from here too; overlays are drawn by :mod:`segcut.drawing`).
PNG files are written with fixed options and no metadata, TIFF files without dates,
so the same array always gives the same bytes.
"""

from __future__ import annotations

import contextlib
import math
import os
import stat
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import InputError, SegcutWarning
from .files import (_cannot_write, append_json_line, append_line, atomic_path,  # noqa: F401
                    read_json_lines, write_bytes_atomic, write_text_atomic)

__all__ = [
    "IMAGE_SUFFIXES",
    "MAX_PIXELS",
    "MAX_MAPPED_PIXELS",
    "LAZY_PIXELS",
    "SEED_UNKNOWN",
    "SEED_FOREGROUND",
    "SEED_BACKGROUND",
    "ImageData",
    "read_image",
    "read_mask",
    "read_seeds",
    "is_image_path",
    "atomic_path",
    "write_bytes_atomic",
    "write_text_atomic",
    "write_image",
    "write_mask",
    "append_line",
    "append_json_line",
    "read_json_lines",
]

#: File name endings of the image types :func:`read_image` reads (lower case), for
#: folder scans. Reading itself recognises the format by content.
IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp")

#: Largest number of pixels (all pages together) :func:`read_image` accepts by default:
#: 64 megapixels, a guard against decompression bombs.
MAX_PIXELS = 64 * 2**20
#: TIFF images with more pixels are mapped from the file (or a temporary file), and
#: TIFF files with more pixels are written in 256 x 256 tiles.
LAZY_PIXELS = 16 * 2**20
#: Largest 2-D TIFF or Zarr image read through a file mapping by default (1 Gi pixels).
MAX_MAPPED_PIXELS = 2**30

#: Labels of a seed array (:func:`read_seeds`).
SEED_UNKNOWN, SEED_FOREGROUND, SEED_BACKGROUND = 0, 1, 2

# Pillow format names we read (MPO is Pillow's name for JPEGs with several pictures).
_PIL_FORMATS = {"PNG": "PNG", "JPEG": "JPEG", "MPO": "JPEG", "BMP": "BMP", "DIB": "BMP"}
_TIFF_MAGIC = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")


@dataclass(frozen=True, eq=False)
class ImageData:
    """An image as read from a file.

    Attributes
    ----------
    array : (M, N[, C]) or (P, M, N[, C]) ndarray
        The pixels: uint8, uint16, float32 or float64. ``C`` is 3 (RGB) when present;
        a leading ``P`` axis holds the pages of a multi-page TIFF.
    channel_axis : int or None
        ``-1`` for colour images, None for gray ones (scikit-image's convention).
    path : str or None
        The file, as given to the reader.
    format : str
        ``"PNG"``, ``"JPEG"``, ``"TIFF"``, ``"BMP"`` or ``"ZARR"``.
    mode : str
        How the pixels were stored: a Pillow mode (``"L"``, ``"RGB"``, ``"RGBA"``,
        ``"P"``, ``"CMYK"``, ``"I;16"``...) or, for TIFF, ``"<photometric> <dtype>"``
        such as ``"minisblack uint16"``.
    warnings : tuple of str
        Notes on what reading changed or could not keep (alpha dropped, values
        replaced...). Empty for a plain image.
    alpha : ndarray or None
        The dropped alpha channel (spatial shape of :attr:`array`, in the file's own
        range: 0 is fully transparent), or None when the file has none. It is not
        applied to :attr:`array`; :func:`read_seeds` uses it.
    levels : tuple of (float, float, callable)
        Lower resolutions stored beside the image (OME-Zarr multiscales):
        ``(factor_y, factor_x, read)``, where ``read()`` returns that level's pixels laid
        out as :attr:`array`. Empty for other formats.

    Examples
    --------
    >>> data = ImageData(np.zeros((2, 3), np.uint8), None, None, "PNG", "L", ())
    >>> data
    ImageData(shape=(2, 3), dtype=uint8, channel_axis=None, format='PNG', mode='L', path=None)
    >>> data.is_stack, data.spatial_shape
    (False, (2, 3))
    """

    array: np.ndarray
    channel_axis: int | None
    path: str | None
    format: str
    mode: str
    warnings: tuple = ()
    alpha: np.ndarray | None = None
    levels: tuple = ()

    @property
    def dtype(self) -> np.dtype:
        """The dtype of :attr:`array`."""
        return self.array.dtype

    @property
    def spatial_shape(self) -> tuple:
        """The shape without the channel axis: ``(M, N)`` or ``(P, M, N)``."""
        shape = self.array.shape
        return tuple(shape[:-1]) if self.channel_axis is not None else tuple(shape)

    @property
    def is_stack(self) -> bool:
        """True for a 3-D stack (multi-page TIFF)."""
        return len(self.spatial_shape) == 3

    def __repr__(self) -> str:
        return (
            f"ImageData(shape={self.array.shape}, dtype={self.array.dtype}, "
            f"channel_axis={self.channel_axis}, format={self.format!r}, mode={self.mode!r}, "
            f"path={self.path!r})"
        )


# ----------------------------------------------------------------------------- reading


def is_image_path(path) -> bool:
    """True when the file name ends in one of :data:`IMAGE_SUFFIXES` (any case).

    Examples
    --------
    >>> is_image_path("scan_01.TIF"), is_image_path("notes.txt")
    (True, False)
    """
    return Path(path).suffix.lower() in IMAGE_SUFFIXES


def read_image(path, *, max_pixels: int = MAX_PIXELS,
               max_mapped_pixels: int = MAX_MAPPED_PIXELS) -> ImageData:
    """Read an image file (PNG, JPEG, TIFF, BMP) or a Zarr store into an array.

    Parameters
    ----------
    path : str or os.PathLike
        The file (its format is recognised by content, not by its name), or a Zarr
        store's folder (a Zarr array or an OME-Zarr image, :mod:`segcut.io_zarr`).
    max_pixels : int, optional
        Refuse images decoded whole into memory with more pixels than this (all pages
        together) before decoding them. Default :data:`MAX_PIXELS`.
    max_mapped_pixels : int, optional
        Refuse 2-D TIFF and Zarr images read through a file mapping (those above
        :data:`LAZY_PIXELS` or ``max_pixels`` pixels) with more pixels than this.
        Default :data:`MAX_MAPPED_PIXELS`.

    Returns
    -------
    ImageData
        The pixels and how they were stored; see the module notes for the rules
        (orientation applied, alpha dropped, palette and CMYK turned into RGB...).

    Raises
    ------
    InputError
        One line naming the file and the problem: missing or unreadable file, empty
        file, not an image, unsupported format or dimensions, truncated or corrupt
        data, too many pixels, or no finite value.

    Examples
    --------
    >>> import tempfile, os
    >>> folder = tempfile.mkdtemp()
    >>> write_image(np.array([[0, 128], [255, 64]], np.uint8), os.path.join(folder, "tiny.png"))
    >>> data = read_image(os.path.join(folder, "tiny.png"))
    >>> data.array
    array([[  0, 128],
           [255,  64]], dtype=uint8)
    >>> data.format, data.mode, data.channel_axis
    ('PNG', 'L', None)
    """
    for name, value in (("max_pixels", max_pixels), ("max_mapped_pixels", max_mapped_pixels)):
        if not isinstance(value, (int, np.integer)) or value < 1:
            raise ValueError(f"{name} must be a positive integer, got {value!r}")
    limits = (int(max_pixels), int(max_mapped_pixels))
    from .io_zarr import is_zarr_store

    if is_zarr_store(path):
        return _read_zarr(path, *limits)
    head = _open_check(path)
    if head[:4] in _TIFF_MAGIC:
        return _read_tiff(path, *limits)
    return _read_with_pillow(path, limits[0], head)


def _open_check(path) -> bytes:
    """The first bytes of ``path``; one-line errors for missing, empty or unreadable files."""
    p = Path(path)
    try:
        info = p.stat()
        if stat.S_ISDIR(info.st_mode):
            raise IsADirectoryError
        if not stat.S_ISREG(info.st_mode):  # a pipe or device would block or never end
            raise InputError("not a regular file", path=path)
        with open(p, "rb") as f:
            head = f.read(32)
    except FileNotFoundError:
        raise InputError("no such file", path=path) from None
    except IsADirectoryError:
        raise InputError("is a folder, not an image file", path=path) from None
    except PermissionError:
        raise InputError("permission denied", path=path) from None
    except OSError as err:
        raise InputError(f"cannot read the file ({err.strerror or err})", path=path) from None
    if not head:
        raise InputError("empty file (0 bytes)", path=path)
    return head


def _too_many(n_pixels: int, max_pixels: int, path, shape, *, fmt: str | None = None,
              mapped: bool = False) -> None:
    """One-line refusal of an image above a pixel limit: which limit, and what to do."""
    if n_pixels <= max_pixels:
        return
    if mapped:
        raise InputError(
            f"image of {n_pixels} pixels (shape {tuple(shape)}) exceeds the limit of "
            f"{max_pixels} pixels for images read through a file mapping (raise "
            "max_mapped_pixels to read it)", path=path)
    whole = f"{fmt} image" if fmt else "image"
    raise InputError(
        f"{whole} of {n_pixels} pixels (shape {tuple(shape)}) exceeds the limit of "
        f"{max_pixels} pixels for images decoded whole into memory (a guard against "
        f"decompression bombs); save it as a 2-D TIFF (uncompressed, zlib or tiled) or a Zarr "
        f"array, read through a file mapping up to {MAX_MAPPED_PIXELS} pixels, or raise "
        "max_pixels", path=path)


def _read_with_pillow(path, max_pixels: int, head: bytes, *, tiff_fallback=False) -> ImageData:
    from PIL import Image, ImageOps, UnidentifiedImageError

    notes: list[str] = []
    extras: dict = {}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            img = Image.open(path)
        except Image.DecompressionBombError as err:
            raise InputError(
                f"image exceeds the pixel limit ({_one_line(err)}); refused as a possible "
                "decompression bomb",
                path=path,
            ) from None
        except UnidentifiedImageError:
            raise InputError(
                "not an image file, or a format segcut does not read "
                "(PNG, JPEG, TIFF and BMP are read)",
                path=path,
            ) from None
        except MemoryError:
            raise InputError("image too large to hold in memory", path=path) from None
        except Exception as err:  # noqa: BLE001 - damaged headers can fail in many ways
            raise InputError(
                f"truncated or corrupt image data ({_one_line(err)})", path=path
            ) from None
        with img:
            fmt = _PIL_FORMATS.get(img.format or "")
            if img.format == "TIFF" and tiff_fallback:
                fmt = "TIFF"
            if fmt is None:
                raise InputError(
                    f"unsupported image format {img.format} (PNG, JPEG, TIFF and BMP are read)",
                    path=path,
                )
            width, height = img.size
            if width < 1 or height < 1:
                raise InputError(f"image has no pixels (size {width}x{height})", path=path)
            _too_many(width * height, max_pixels, path, (height, width),
                      fmt="TIFF (its compression decoded whole, by Pillow)" if tiff_fallback
                      else fmt)
            n_frames = getattr(img, "n_frames", 1)
            if fmt == "TIFF" and n_frames > 1:
                _too_many(width * height * n_frames, max_pixels, path, (n_frames, height, width),
                          fmt="3-D TIFF")
            elif n_frames > 1:
                notes.append(f"file holds {n_frames} pictures; the first was read")
            mode = img.mode
            if fmt == "PNG" and len(head) >= 26 and head[12:16] == b"IHDR":
                if head[24] == 16 and head[25] in (2, 6):
                    notes.append("16-bit colour PNG read at 8 bits per channel")
            try:
                if fmt == "TIFF" and n_frames > 1:
                    array, channel_axis = _pillow_stack(img, n_frames, notes, path)
                else:
                    img.load()  # force the full decode: truncated data fails here
                    img = ImageOps.exif_transpose(img)
                    array, channel_axis = _pillow_to_array(img, notes, extras)
                if array.dtype.kind == "f":
                    array = _normalise_dtype(array, path, notes, colour=channel_axis is not None)
            except InputError:
                raise
            except MemoryError:
                raise InputError("image too large to hold in memory", path=path) from None
            except Exception as err:  # noqa: BLE001 - damaged data can break a decoder anywhere
                raise InputError(
                    f"truncated or corrupt image data ({_one_line(err)})", path=path
                ) from None
    for w in caught:
        if issubclass(w.category, Image.DecompressionBombWarning):
            continue
        notes.append(_one_line(w.message))
    return ImageData(array, channel_axis, _as_str(path), fmt, mode, tuple(notes),
                     extras.get("alpha"))


def _pillow_stack(img, n_frames: int, notes: list, path) -> tuple[np.ndarray, int | None]:
    """All pages of a multi-page TIFF read by Pillow, as a stack (same size and kind)."""
    planes, kinds = [], set()
    for index in range(n_frames):
        img.seek(index)
        img.load()
        plane, channel_axis = _pillow_to_array(img, notes)
        planes.append(plane)
        kinds.add((plane.shape, plane.dtype.str, channel_axis))
    if len(kinds) > 1:
        raise InputError("TIFF pages differ in size or pixel type; cannot stack them", path=path)
    return np.stack(planes), channel_axis


def _pillow_to_array(img, notes: list, extras: dict | None = None
                     ) -> tuple[np.ndarray, int | None]:
    mode = img.mode
    if mode == "1":
        return np.asarray(img, dtype=np.uint8) * np.uint8(255), None
    if mode == "L":
        return np.array(img, dtype=np.uint8), None
    if mode.startswith("I;16"):
        return np.asarray(img).astype(np.uint16), None
    if mode == "I":
        return _integer_to_supported(np.asarray(img)), None
    if mode == "F":
        return np.array(img, dtype=np.float32), None
    if mode in ("LA", "La", "PA", "RGBA", "RGBa") or (mode == "P" and "transparency" in img.info):
        rgba = img.convert("LA" if mode in ("LA", "La") else "RGBA")
        values = np.asarray(rgba)
        alpha = values[..., -1]
        if extras is not None:
            extras["alpha"] = np.ascontiguousarray(alpha)
        if (alpha < 255).any():
            share = float((alpha < 255).mean())
            notes.append(f"alpha channel dropped ({100 * share:.1f}% of pixels not fully opaque)")
        if mode in ("LA", "La"):
            return np.ascontiguousarray(values[..., 0]), None
        return np.ascontiguousarray(values[..., :3]), -1
    if mode == "RGB":
        return np.array(img, dtype=np.uint8), -1
    # P, CMYK, YCbCr, LAB, HSV, RGBX...: Pillow's own conversion to RGB
    return np.array(img.convert("RGB"), dtype=np.uint8), -1


def _integer_to_supported(values: np.ndarray) -> np.ndarray:
    """Other integer dtypes: uint16 when the values fit in 0..65535, else float64."""
    if values.dtype == np.uint8 or values.dtype == np.uint16:
        return np.ascontiguousarray(values.astype(values.dtype.newbyteorder("="), copy=False))
    if values.dtype == np.bool_:
        return values.astype(np.uint8) * np.uint8(255)
    if values.size and values.min() >= 0 and values.max() <= 65535:
        return values.astype(np.uint16)
    return values.astype(np.float64)


def _read_tiff(path, max_pixels: int, max_mapped_pixels: int) -> ImageData:
    notes: list[str] = []
    decoded = _decode_tiff(path, max_pixels, max_mapped_pixels, notes)
    if isinstance(decoded, ImageData):
        return decoded  # read by Pillow instead
    array, axes, shape, photometric, colormap = decoded
    array = np.asarray(array)
    mode = f"{photometric} {array.dtype.name}"
    array, has_samples = _tiff_layout(array, axes, shape, path)
    if photometric == "palette" and colormap is not None and not has_samples:
        cmap = np.asarray(colormap)
        if cmap.ndim == 2 and cmap.shape[0] == 3:
            index = np.clip(array.astype(np.int64), 0, cmap.shape[1] - 1)
            array = np.moveaxis(cmap[:, index], 0, -1)
            if array.dtype == np.uint16 and cmap.max() <= 255:
                array = array.astype(np.uint8)
            has_samples = True
    if photometric == "miniswhite" and not has_samples:
        array = _invert(array)
    channel_axis, alpha = None, None
    if has_samples:
        array, channel_axis, alpha = _tiff_channels(array, photometric, path, notes)
    array = _normalise_dtype(array, path, notes, colour=channel_axis is not None)
    return ImageData(np.ascontiguousarray(array), channel_axis, _as_str(path), "TIFF", mode,
                     tuple(notes), alpha)


def _read_zarr(path, max_pixels: int, max_mapped_pixels: int) -> ImageData:
    from .io_zarr import read_zarr

    notes: list[str] = []
    array, channels, mode, levels = read_zarr(path, max_pixels=max_pixels,
                                              lazy_pixels=LAZY_PIXELS,
                                              max_mapped_pixels=max_mapped_pixels)
    channel_axis, alpha = None, None
    if channels:
        array, channel_axis, alpha = _tiff_channels(array, "rgb", path, notes)
    mapped = isinstance(array, np.memmap) or isinstance(getattr(array, "base", None), np.memmap)
    array = _normalise_dtype(array, path, notes, colour=channel_axis is not None,
                             in_place=mapped)
    readers = tuple((fy, fx, _level_pixels(read, path, channels)) for fy, fx, read in levels)
    return ImageData(np.ascontiguousarray(array), channel_axis, _as_str(path), "ZARR", mode,
                     tuple(notes), alpha, readers)


def _level_pixels(read, path, channels):
    """A reader of a lower-resolution level giving pixels as :attr:`ImageData.array`."""
    def level():
        values = read()
        if channels:
            values = _tiff_channels(values, "rgb", path, [])[0]
        return _normalise_dtype(values, path, [], colour=bool(channels) and channels > 2)
    return level


def _decode_tiff(path, max_pixels: int, max_mapped_pixels: int, notes: list):
    """The first series' pixels and header facts ``(array, axes, shape, photometric,
    colormap)``, or the :class:`ImageData` Pillow read when tifffile lacks the codec."""
    import tifffile

    try:
        with _tifffile_log(notes), tifffile.TiffFile(path) as tif:
            if not tif.series:
                raise InputError("TIFF file holds no image", path=path)
            series = tif.series[0]
            if len(tif.series) > 1:
                notes.append(f"TIFF holds {len(tif.series)} image series; the first was read")
            axes, shape = series.axes, tuple(series.shape)
            page = series.pages[0] if series.pages else tif.pages[0]
            spatial = [n for a, n in zip(axes, shape) if a != "S"]
            if 0 in shape:
                raise InputError(f"image has no pixels (shape {shape})", path=path)
            pixels = math.prod(spatial)
            # large 2-D images: mapped from the file when stored contiguously, else
            # decoded into a temporary file mapping (reclaimable, not anonymous memory)
            one_plane = math.prod(spatial[:-2]) == 1
            mapped = one_plane and (pixels > LAZY_PIXELS or pixels > max_pixels)
            if mapped:
                _too_many(pixels, max_mapped_pixels, path, shape, mapped=True)
            else:
                _too_many(pixels, max_pixels, path, shape,
                          fmt="TIFF" if one_plane else "3-D TIFF")
            out = "memmap" if mapped else None
            return (series.asarray(out=out), axes, shape, _photometric_name(page),
                    getattr(page, "colormap", None))
    except InputError:
        raise
    except MemoryError:
        raise InputError("TIFF too large to hold in memory", path=path) from None
    except Exception as err:  # noqa: BLE001 - a damaged file can break the decoder anywhere
        if "imagecodecs" in str(err):
            # a compression tifffile decodes only with the optional imagecodecs package
            # (LZW, JPEG, CCITT...): Pillow reads most of those
            try:
                return _read_with_pillow(path, max_pixels, b"", tiff_fallback=True)
            except InputError as fallback:  # (Pillow decodes whole: max_pixels applies)
                if "decoded whole" in fallback.message:
                    raise InputError(f"{fallback.message}; with the imagecodecs package "
                                     "installed this TIFF is read through a file mapping",
                                     path=path) from None
                raise InputError(
                    f"TIFF compression not supported ({_one_line(err)}; Pillow: "
                    f"{fallback.message})", path=path) from None
        raise InputError(f"truncated or corrupt TIFF data ({_one_line(err)})", path=path) from None


def _tiff_layout(array, axes: str, shape, path):
    """Samples axis last, unit axes squeezed, at most one stack axis; returns
    ``(array, has_samples)``."""
    if array.size == 0 or array.ndim != len(axes):
        raise InputError(
            f"corrupt TIFF: its data (shape {array.shape}) does not match its header "
            f"(axes {axes}, shape {shape})", path=path)
    if array.dtype.kind == "c":
        raise InputError(f"complex-valued TIFF ({array.dtype}) is not an image segcut reads",
                         path=path)
    header_axes = axes
    if "S" in axes:
        array = np.moveaxis(array, axes.index("S"), -1)
        axes = axes.replace("S", "") + "S"
    keep = [i for i, a in enumerate(axes) if a in "YXS" or array.shape[i] > 1]
    array = array.reshape([array.shape[i] for i in keep])
    axes = "".join(axes[i] for i in keep)
    core = axes.replace("S", "")
    if not core.endswith("YX") or len(core) > 3:
        raise InputError(
            f"unsupported TIFF dimensions (axes {header_axes}, shape {shape}); segcut reads "
            "2-D images and 3-D stacks, gray or colour",
            path=path,
        )
    return array, axes.endswith("S")


def _tiff_channels(array, photometric: str, path, notes: list):
    """Gray, gray + alpha, RGB(A) or CMYK samples to ``(array, channel_axis, alpha)``."""
    n_channels = array.shape[-1]
    if n_channels == 1:
        return array[..., 0], None, None
    if n_channels == 2:
        notes.append("alpha channel dropped (gray + alpha)")
        return array[..., 0], None, np.ascontiguousarray(array[..., 1])
    if photometric == "separated" and n_channels == 4:
        return _cmyk_to_rgb(array), -1, None
    if n_channels in (3, 4):
        alpha = None
        if n_channels == 4:
            notes.append("fourth channel (alpha) dropped")
            alpha = np.ascontiguousarray(array[..., 3])
        return array[..., :3], -1, alpha
    raise InputError(
        f"unsupported TIFF with {n_channels} channels per pixel (1 to 4 are read)", path=path)


@contextlib.contextmanager
def _tifffile_log(notes: list):
    """Collect what tifffile logs (damaged tags, odd metadata) into ``notes`` instead of
    letting it reach the terminal."""
    import logging

    class _Collect(logging.Handler):
        def emit(self, record):
            notes.append("TIFF reader: " + _one_line(record.getMessage()))

    logger = logging.getLogger("tifffile")
    handler = _Collect(logging.WARNING)
    saved = logger.propagate
    logger.addHandler(handler)
    logger.propagate = False
    try:
        yield
    finally:
        logger.removeHandler(handler)
        logger.propagate = saved


def _photometric_name(page) -> str:
    value = getattr(page, "photometric", None)
    name = getattr(value, "name", None)
    return name.lower() if name else str(value).lower()


def _invert(array: np.ndarray) -> np.ndarray:
    if array.dtype.kind in "ui":
        return np.iinfo(array.dtype).max - array
    finite = array[np.isfinite(array)]
    return (finite.max() if finite.size else 0) - array


def _cmyk_to_rgb(array: np.ndarray) -> np.ndarray:
    """Plain CMYK -> RGB: ``R = (1 - C)(1 - K)`` and so on, in the input's range."""
    if array.dtype.kind in "ui":
        top = float(np.iinfo(array.dtype).max)
    else:
        top = 1.0
    cmyk = array.astype(np.float64) / top
    rgb = (1.0 - cmyk[..., :3]) * (1.0 - cmyk[..., 3:4])
    if array.dtype.kind in "ui":
        return np.rint(rgb * top).astype(array.dtype if array.dtype.itemsize <= 2 else np.uint16)
    return rgb


def _normalise_dtype(array: np.ndarray, path, notes: list, *, colour: bool,
                     in_place: bool = False) -> np.ndarray:
    """Integers to uint8/uint16 (or float64), floats to float32/64, non-finite values handled
    (``in_place``: replaced in ``array`` itself, a mapping of our own, not in a copy)."""
    if array.dtype.kind in "uib":
        return _integer_to_supported(array)
    if array.dtype.kind != "f":
        raise InputError(f"unsupported pixel type {array.dtype}", path=path)
    if array.dtype.itemsize < 4:
        array = array.astype(np.float32)
    elif array.dtype.itemsize > 8:
        array = array.astype(np.float64)
    array = array.astype(array.dtype.newbyteorder("="), copy=False)
    finite = np.isfinite(array)
    if finite.all():
        return array
    if not finite.any():
        raise InputError("image has no finite value (all NaN or infinite)", path=path)
    if not (in_place and array.flags.writeable):
        array = array.copy()
    bad = ~finite
    if colour:
        for c in range(array.shape[-1]):
            plane, ok = array[..., c], finite[..., c]
            fill = np.median(plane[ok]) if ok.any() else np.median(array[finite])
            plane[~ok] = fill
    else:
        array[bad] = np.median(array[finite])
    notes.append(
        f"{int(bad.sum())} NaN or infinite values ({100 * float(bad.mean()):.2f}%) replaced by "
        "the median of the finite values"
    )
    return array


def _gray_levels(data: ImageData) -> np.ndarray:
    """One value per pixel: gray as is, colour reduced by the channel maximum."""
    array = data.array
    if data.channel_axis is not None:
        array = array.max(axis=-1)
    return array


def read_mask(path, *, threshold: float | None = None, max_pixels: int = MAX_PIXELS) -> np.ndarray:
    """Read a two-region mask as a boolean array (True = foreground).

    Parameters
    ----------
    path : str or os.PathLike
        A mask image (any format :func:`read_image` reads; multi-page TIFF gives a
        3-D mask). Colour masks are reduced to their largest channel per pixel.
    threshold : float, optional
        Foreground is ``value > threshold``. By default: a mask with a single value,
        or with two values the smaller of which is 0 (segcut's own 0 / 255 masks,
        0 / 1 label images), has foreground wherever it is not 0; any other mask (a JPEG reference with
        compression noise, a soft mask) is cut at half its type's full range: 127.5
        for 8-bit, 32767.5 for 16-bit, and half of ``max(1, largest value)`` for
        float masks.
    max_pixels : int, optional
        As in :func:`read_image`.

    Returns
    -------
    (M, N) or (P, M, N) bool ndarray

    Raises
    ------
    InputError
        The file cannot be read as an image (see :func:`read_image`).

    Examples
    --------
    >>> import tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "mask.png")
    >>> write_mask(np.array([[0, 1], [1, 0]], bool), path)
    >>> read_mask(path)
    array([[False,  True],
           [ True, False]])
    """
    values = _gray_levels(read_image(path, max_pixels=max_pixels))
    if threshold is not None:
        threshold = float(threshold)
        if not math.isfinite(threshold):
            raise ValueError(f"threshold must be a finite number, got {threshold!r}")
        return np.ascontiguousarray(values > threshold)
    levels = np.unique(values)
    if levels.size == 1 or (levels.size == 2 and levels[0] == 0):
        return np.ascontiguousarray(values != 0)
    if values.dtype.kind in "ui":
        cut = np.iinfo(values.dtype).max / 2.0
    else:
        cut = max(1.0, float(levels[-1])) / 2.0
    return np.ascontiguousarray(values > cut)


def read_seeds(path, *, max_pixels: int = MAX_PIXELS) -> np.ndarray:
    """Read a seed marker image into labels 0 unknown, 1 foreground, 2 background.

    Two kinds of file are understood:

    - **Label images**: every value is 0, 1 or 2 (gray, any integer type). The values
      are the labels: 0 unknown, 1 foreground, 2 background.
    - **Trimaps and drawn markers**: anything else, read as the common trimap of
      matting tools: each pixel's brightness (the largest colour channel, scaled to
      0..1 by the type's range) decides: light (above 3/4) is foreground, mid-tones
      (1/4 to 3/4) unknown, dark (below 1/4) background. Draw foreground in white and
      background in black on a mid-gray canvas, or on a transparent layer: fully
      transparent pixels are unknown, whatever colour they store.

    A marker that looks drawn in the other convention (black unknown canvas,
    mid-gray background strokes: mid-gray present, black the commonest value, and
    white touching black more often than mid-gray) gives a
    :class:`~segcut.errors.SegcutWarning` naming the file.

    Parameters
    ----------
    path : str or os.PathLike
        The marker image; it must have the same height and width as the image it
        belongs to (checked by the pipeline).
    max_pixels : int, optional
        As in :func:`read_image`.

    Returns
    -------
    (M, N) or (P, M, N) uint8 ndarray
        :data:`SEED_UNKNOWN` (0), :data:`SEED_FOREGROUND` (1) or
        :data:`SEED_BACKGROUND` (2) per pixel.

    Raises
    ------
    InputError
        The file cannot be read as an image (see :func:`read_image`).

    Examples
    --------
    >>> import tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "trimap.png")
    >>> write_image(np.array([[0, 128, 255]], np.uint8), path)
    >>> read_seeds(path)
    array([[2, 0, 1]], dtype=uint8)
    """
    data = read_image(path, max_pixels=max_pixels)
    values = _gray_levels(data)
    if data.channel_axis is None and values.dtype.kind in "ui" and int(values.max()) <= 2:
        labels = values.astype(np.uint8)  # a label image
    else:
        if values.dtype.kind in "ui":
            scaled = values.astype(np.float64) / np.iinfo(values.dtype).max
        else:
            top = float(values.max())
            scaled = values.astype(np.float64) / (top if top > 1.0 else 1.0)
        labels = np.full(values.shape, SEED_BACKGROUND, dtype=np.uint8)
        labels[scaled >= 0.25] = SEED_UNKNOWN
        labels[scaled > 0.75] = SEED_FOREGROUND
        visible = None if data.alpha is None else data.alpha != 0
        if _looks_like_old_markers(labels, visible):
            warnings.warn(f"{path}: this seed image looks drawn with black as unknown and "
                          "mid-gray as background; seeds are read as a trimap: white "
                          "foreground, mid-gray unknown, black background", SegcutWarning,
                          stacklevel=2)
    if data.alpha is not None and data.alpha.shape == labels.shape:
        labels[data.alpha == 0] = SEED_UNKNOWN
    return labels


def _looks_like_old_markers(labels, visible) -> bool:
    """Mid-gray present, black the commonest, white touching black more often than
    mid-gray (in a trimap the mid-gray band lies between white and black)."""
    if visible is not None and visible.shape == labels.shape:
        labels = np.where(visible, labels, 255)
    counts = [int(np.count_nonzero(labels == v)) for v in (SEED_UNKNOWN, SEED_FOREGROUND,
                                                            SEED_BACKGROUND)]
    if counts[0] == 0 or counts[2] <= max(counts[0], counts[1]):
        return False
    touch = {SEED_UNKNOWN: 0, SEED_BACKGROUND: 0}
    for axis in range(labels.ndim):
        a = np.moveaxis(labels, axis, 0)
        first, second = a[:-1], a[1:]
        for other in touch:
            touch[other] += int(np.count_nonzero((first == SEED_FOREGROUND) & (second == other))
                                + np.count_nonzero((second == SEED_FOREGROUND) & (first == other)))
    return touch[SEED_BACKGROUND] > touch[SEED_UNKNOWN]


# ----------------------------------------------------------------------------- writing


def _png_bytes(array: np.ndarray, compress_level: int = 6) -> bytes:
    """PNG with fixed options and no metadata: the same array gives the same bytes."""
    import io as _io

    from PIL import Image

    if array.dtype == np.uint16:
        if array.ndim != 2:
            raise ValueError("16-bit PNG is written for gray images only; use a .tif name")
        img = Image.fromarray(np.ascontiguousarray(array, dtype=np.uint16))
    else:
        img = Image.fromarray(np.ascontiguousarray(array, dtype=np.uint8))
    buffer = _io.BytesIO()
    img.save(buffer, format="PNG", optimize=False, compress_level=compress_level)
    return buffer.getvalue()


def write_image(array, path, *, channel_axis: int | None = None,
                compress_level: int = 6, tiled: bool | None = None) -> None:
    """Write an image array atomically with reproducible bytes.

    ``.png`` files take 2-D gray uint8/uint16 or ``(M, N, 3)`` RGB uint8 arrays;
    ``.tif``/``.tiff`` files also take float arrays and 3-D stacks ``(P, M, N[, 3])``.

    Parameters
    ----------
    array : ndarray
        The pixels. Boolean arrays are written as 0 / 255.
    path : str or os.PathLike
        The file; its suffix chooses the format.
    channel_axis : int or None, optional
        Axis holding RGB channels (moved last); None for gray images and stacks.
    compress_level : int, optional
        PNG zlib level, 0 (fastest, largest) to 9; 6 by default. TIFF files are
        always zlib-compressed at tifffile's default level.
    tiled : bool or None, optional
        TIFF only: write a 2-D image in 256 x 256 tiles. None (default): tiles for
        2-D images of more than :data:`LAZY_PIXELS` pixels.

    Raises
    ------
    ValueError
        Unsupported suffix, shape or dtype for the chosen format.

    Examples
    --------
    >>> import tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "gray.png")
    >>> write_image(np.array([[7, 9]], np.uint8), path)
    >>> read_image(path).array
    array([[7, 9]], dtype=uint8)
    """
    array = np.asarray(array)
    if channel_axis is not None:
        array = np.moveaxis(array, channel_axis, -1)
        if array.shape[-1] != 3:
            raise ValueError(f"expected 3 channels along channel_axis, got {array.shape[-1]}")
    if array.dtype == np.bool_:
        array = array.astype(np.uint8) * np.uint8(255)
    if not isinstance(compress_level, (int, np.integer)) or not 0 <= compress_level <= 9:
        raise ValueError(f"compress_level must be an integer from 0 to 9, got {compress_level!r}")
    suffix = Path(path).suffix.lower()
    colour = channel_axis is not None
    spatial = array.ndim - (1 if colour else 0)
    if array.size == 0:
        raise ValueError(f"cannot write an empty image (shape {array.shape})")
    if suffix == ".png":
        if spatial != 2:
            raise ValueError(
                f"PNG holds 2-D images; got shape {array.shape}; use a .tif name for stacks")
        if array.dtype not in (np.uint8, np.uint16):
            raise ValueError(
                f"PNG takes uint8 or uint16 pixels, got {array.dtype}; use a .tif name")
        if colour and array.dtype != np.uint8:
            raise ValueError("colour PNG takes uint8 pixels; use a .tif name for 16-bit colour")
        write_bytes_atomic(path, _png_bytes(array, compress_level))
    elif suffix in (".tif", ".tiff"):
        if spatial not in (2, 3):
            raise ValueError(f"expected a 2-D image or a 3-D stack, got shape {array.shape}")
        import tifffile

        if tiled is None:
            tiled = array.shape[0] * array.shape[1] > LAZY_PIXELS
        tiled = bool(tiled) and spatial == 2
        with atomic_path(path) as tmp, _cannot_write(path):
            tifffile.imwrite(tmp, np.ascontiguousarray(array),
                             photometric="rgb" if colour else "minisblack",
                             metadata=None, software=None, datetime=None, compression="zlib",
                             tile=(256, 256) if tiled else None)
    else:
        raise ValueError(f"unsupported image suffix {suffix!r} for writing (use .png or .tif)")


def _mask_uint8(mask) -> np.ndarray:
    mask = np.asarray(mask)
    if mask.dtype != np.bool_:
        if mask.dtype.kind not in "uif":
            raise ValueError(f"mask must be boolean or numeric, got dtype {mask.dtype}")
        mask = mask != 0
    values = mask.astype(np.uint8)
    values *= np.uint8(255)  # in place: one full-size copy of a large mask, not two
    return values


def write_mask(mask, path, *, tiled: bool | None = None) -> None:
    """Write a two-region mask atomically: 0 background, 255 foreground.

    A 2-D mask is written as an 8-bit gray PNG (or TIFF when ``path`` ends in
    ``.tif``/``.tiff``); a 3-D mask ``(P, M, N)`` must go to a TIFF, one page per plane.
    (:func:`read_image` drops axes of length one other than height and width, so a
    stack of a single plane reads back as a 2-D mask.)

    Parameters
    ----------
    mask : (M, N) or (P, M, N) array_like
        Boolean, or numbers where anything other than 0 is foreground.
    path : str or os.PathLike
        The file.
    tiled : bool or None, optional
        For a ``.tif`` name, as in :func:`write_image` (ignored for PNG).

    Raises
    ------
    ValueError
        Wrong number of dimensions, or a 3-D mask given a ``.png`` name.

    Examples
    --------
    >>> import tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "m.png")
    >>> write_mask([[0, 3], [0, 0]], path)
    >>> read_image(path).array
    array([[  0, 255],
           [  0,   0]], dtype=uint8)
    """
    values = _mask_uint8(mask)
    if values.ndim not in (2, 3):
        raise ValueError(f"mask must be 2-D or 3-D, got shape {values.shape}")
    suffix = Path(path).suffix.lower()
    if values.ndim == 3 and suffix == ".png":
        raise ValueError(f"a 3-D mask (shape {values.shape}) is written as TIFF; use a .tif name")
    write_image(values, path, tiled=tiled)


# ----------------------------------------------------------------------------- helpers


def _one_line(err) -> str:
    text = " ".join(str(err).split())
    return text or type(err).__name__


def _as_str(path) -> str | None:
    return None if path is None else os.fspath(path)
