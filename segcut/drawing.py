"""Pictures of a split: the foreground shaded over the image, its outline and a legend.

:func:`overlay_image` draws in memory; :func:`write_overlay` writes the picture a run
keeps in ``overlays/`` (with a legend strip, and the plane numbers of a 3-D stack).

The foreground is shaded with :data:`FILL_COLOR` at :data:`FILL_OPACITY`, so which side
is foreground shows at a glance even where the outline is thin; the boundary is a line
of :data:`LINE_COLOR` just inside the foreground with a halo of :data:`HALO_COLOR` just
outside it, so it reads on dark and on light images alike.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .prepare import block_average

__all__ = [
    "FILL_COLOR",
    "FILL_OPACITY",
    "LINE_COLOR",
    "HALO_COLOR",
    "overlay_image",
    "write_overlay",
]

#: Shade laid over foreground pixels (RGB), blended at :data:`FILL_OPACITY`.
FILL_COLOR = (0, 196, 180)
#: Weight of :data:`FILL_COLOR` in a foreground pixel (the image keeps the rest).
FILL_OPACITY = 0.35
#: Boundary line, just inside the foreground (RGB).
LINE_COLOR = (255, 176, 0)
#: Halo just outside the boundary (RGB).
HALO_COLOR = (24, 16, 48)
#: Background of the legend strip and of the gaps between planes.
_STRIP_COLOR = (24, 16, 48)
_TEXT_COLOR = (236, 236, 240)
_GAP = 4  # pixels between the planes of a stack


def _display_uint8(image: np.ndarray) -> np.ndarray:
    """Any image to uint8 for display: uint8 as is, others stretched between the
    0.5th and 99.5th percentiles of their finite values (flat images become mid-gray)."""
    if image.dtype == np.uint8:
        return image
    if image.dtype == np.bool_:
        return image.astype(np.uint8) * np.uint8(255)
    values = image.astype(np.float64)
    finite = np.isfinite(values)
    if not finite.any():
        return np.full(image.shape, 128, np.uint8)
    low, high = np.percentile(values[finite], [0.5, 99.5])
    if not high > low:
        low, high = float(values[finite].min()), float(values[finite].max())
    if not high > low:
        return np.full(image.shape, 128, np.uint8)
    scaled = (np.where(finite, values, low) - low) * (255.0 / (high - low))
    return np.rint(np.clip(scaled, 0.0, 255.0)).astype(np.uint8)


def _as_rgb_and_mask(image, mask, channel_axis):
    image = np.asarray(image)
    mask = np.asarray(mask)
    if mask.dtype != np.bool_:
        mask = mask != 0
    if channel_axis is not None:
        image = np.moveaxis(image, channel_axis, -1)
    elif image.ndim == mask.ndim + 1:
        channel_axis = -1
    if channel_axis is None:
        if image.shape != mask.shape:
            raise ValueError(f"mask shape {mask.shape} does not match image shape {image.shape}")
        gray = _display_uint8(image)
        rgb = np.repeat(gray[..., None], 3, axis=-1)
    else:
        if image.shape[:-1] != mask.shape:
            raise ValueError(
                f"mask shape {mask.shape} does not match image shape {image.shape[:-1]} "
                "(channels last)"
            )
        n_channels = image.shape[-1]
        if n_channels in (1, 2):
            image = np.repeat(image[..., :1], 3, axis=-1)
        elif n_channels in (3, 4):
            image = image[..., :3]
        else:
            raise ValueError(f"overlay takes 1 to 4 channels, got {n_channels}")
        rgb = _display_uint8(image)
    if mask.ndim not in (2, 3):
        raise ValueError(f"mask must be 2-D or 3-D, got shape {mask.shape}")
    return np.array(rgb, dtype=np.uint8), mask


def _shade_plane(rgb: np.ndarray, mask: np.ndarray) -> np.ndarray:
    from scipy import ndimage as ndi

    width = max(1, int(round(min(mask.shape) / 256)))
    structure = ndi.generate_binary_structure(2, 1)
    inner = mask & ~ndi.binary_erosion(mask, structure, iterations=width, border_value=1)
    outer = ndi.binary_dilation(mask, structure, iterations=width) & ~mask
    fill = np.asarray(FILL_COLOR, np.float64)
    shaded = rgb[mask].astype(np.float64) * (1.0 - FILL_OPACITY) + fill * FILL_OPACITY
    rgb[mask] = np.rint(shaded).astype(np.uint8)
    rgb[outer] = HALO_COLOR
    rgb[inner] = LINE_COLOR
    return rgb


def _stack_planes(depth: int) -> list:
    """The planes shown of a stack: at 1/4, 1/2 and 3/4 of its depth."""
    return sorted({min(depth - 1, (depth * k) // 4) for k in (1, 2, 3)})


def _font(size: int):
    from PIL import ImageFont

    return ImageFont.load_default(size=size)


def _text_strip(width: int, labels, *, height: int) -> np.ndarray:
    """A strip ``height`` px tall holding ``labels``: (x, text) or (x, swatch) items."""
    from PIL import Image, ImageDraw

    strip = Image.new("RGB", (width, height), _STRIP_COLOR)
    draw = ImageDraw.Draw(strip)
    font = _font(max(9, height - 6))
    for x, item in labels:
        if isinstance(item, str):
            draw.text((x, height // 2), item, fill=_TEXT_COLOR, font=font, anchor="lm")
        else:  # a swatch: (fill RGB, border RGB)
            fill, border = item
            side = height - 6
            box = (x, 3, x + side, 3 + side)
            draw.rectangle(box, fill=fill, outline=border, width=2)
    return np.asarray(strip, dtype=np.uint8).copy()


_PLAIN = (150, 150, 150)  # the unshaded ground of the legend's swatches
#: The legend, left to right: swatches (fill, border) and words.
_LEGEND = ((tuple(int(round(c * FILL_OPACITY + g * (1 - FILL_OPACITY)))
                  for c, g in zip(FILL_COLOR, _PLAIN)), LINE_COLOR), "foreground",
           (_PLAIN, _PLAIN), "background")


def _legend(width: int, height: int) -> np.ndarray:
    font = _font(max(9, height - 6))
    x, labels = 4, []
    for item in _LEGEND:
        labels.append((x, item))
        x += (height - 6 + 4) if not isinstance(item, str) else int(font.getlength(item)) + 12
    return _text_strip(max(width, x), labels, height=height)


def _plane_name(plane: int, depth: int, room: int, height: int) -> str:
    """The longest of "plane 3 of 8", "plane 3/8", "3/8" that fits in ``room`` pixels."""
    font = _font(max(9, height - 6))
    names = [f"plane {plane + 1} of {depth}", f"plane {plane + 1}/{depth}", f"{plane + 1}/{depth}"]
    return next((n for n in names if font.getlength(n) <= room), names[-1])


def _legend_height(width: int) -> int:
    return 16 if width < 512 else 22


def _place(rows: list) -> np.ndarray:
    """Stack RGB arrays vertically, padding narrower ones on the right with the strip colour."""
    width = max(r.shape[1] for r in rows)
    padded = []
    for r in rows:
        if r.shape[1] < width:
            pad = np.empty((r.shape[0], width - r.shape[1], 3), np.uint8)
            pad[...] = _STRIP_COLOR
            r = np.concatenate([r, pad], axis=1)
        padded.append(r)
    return np.concatenate(padded, axis=0)


def overlay_image(image, mask, *, channel_axis: int | None = None,
                  legend: bool = False) -> np.ndarray:
    """The mask drawn over the image, as an RGB uint8 array.

    Foreground pixels are blended with :data:`FILL_COLOR` (weight :data:`FILL_OPACITY`);
    the boundary is a line of :data:`LINE_COLOR` just inside the foreground with a
    halo of :data:`HALO_COLOR` just outside it. Lines are
    ``max(1, round(min(M, N) / 256))`` pixels wide. Images that are not uint8 (16-bit,
    float, boolean) are stretched for display between the 0.5th and 99.5th percentiles
    of their values. For a 3-D stack, the planes at 1/4, 1/2 and 3/4 of its depth are
    shown side by side, 4 pixels apart on a dark ground.

    Parameters
    ----------
    image : (M, N[, C]) or (P, M, N[, C]) array_like
        Gray or colour (1-4 channels; alpha ignored).
    mask : (M, N) or (P, M, N) array_like
        Foreground where True (or not 0).
    channel_axis : int or None, optional
        Colour axis of ``image``; by default inferred (an extra last axis).
    legend : bool, optional
        Add strips below the picture: for a stack, the number of each plane shown
        (``plane 3 of 8``, counted from 1); then the legend of the fill and the
        outline. The picture may then be wider than the image (padded on the right).

    Returns
    -------
    (H, W, 3) uint8 ndarray
        ``H, W`` are the image's size without ``legend`` (for a stack: its height, and
        the planes' widths plus the gaps).

    Examples
    --------
    >>> image = np.zeros((6, 6), np.uint8)
    >>> mask = np.zeros((6, 6), bool); mask[1:5, 1:5] = True
    >>> out = overlay_image(image, mask)
    >>> out.shape, out[1, 2].tolist(), out[0, 2].tolist(), out[2, 2].tolist()
    ((6, 6, 3), [255, 176, 0], [24, 16, 48], [0, 69, 63])
    >>> overlay_image(image, mask, legend=True).shape[0] > 6
    True
    """
    rgb, mask = _as_rgb_and_mask(image, mask, channel_axis)
    if mask.ndim == 3:
        planes = _stack_planes(mask.shape[0])
        tiles = [_shade_plane(rgb[p].copy(), mask[p]) for p in planes]
        gap = np.empty((tiles[0].shape[0], _GAP, 3), np.uint8)
        gap[...] = _STRIP_COLOR
        parts = []
        for tile in tiles:
            parts.extend([tile, gap])
        picture = np.concatenate(parts[:-1], axis=1)
        if not legend:
            return picture
        height = _legend_height(picture.shape[1])
        step = tiles[0].shape[1] + _GAP
        names = [(k * step + 2, _plane_name(p, mask.shape[0], tiles[0].shape[1] - 4, height))
                 for k, p in enumerate(planes)]
        captions = _text_strip(picture.shape[1], names, height=height)
        return _place([picture, captions, _legend(picture.shape[1], height)])
    picture = _shade_plane(rgb, mask)
    if not legend:
        return picture
    return _place([picture, _legend(picture.shape[1], _legend_height(picture.shape[1]))])


#: 2-D overlays of images with more pixels are drawn from a reduced copy.
OVERLAY_MAX_PIXELS = 4 * 2**20


def reduced_for_display(image, mask, max_pixels: int, *, channel_axis: int | None = None):
    """A 2-D image and its mask reduced by the smallest integer factor that brings them
    to at most ``max_pixels`` pixels: the image area-averaged (rounded back to its
    integer dtype), the mask by majority of each block (ties: foreground). Computed
    in row chunks; images that already fit come back as they are.

    Examples
    --------
    >>> image = np.arange(16, dtype=np.uint8).reshape(4, 4)
    >>> small, small_mask = reduced_for_display(image, image > 9, 4)
    >>> small.tolist(), small_mask.tolist()
    ([[2, 4], [10, 12]], [[False, False], [True, True]])
    """
    from .large import reduction_factor

    image, mask = np.asarray(image), np.asarray(mask) != 0
    if channel_axis is not None:
        image = np.moveaxis(image, channel_axis, -1)
    rows, cols = mask.shape[-2:] if mask.ndim == 2 else (0, 0)
    if mask.ndim != 2 or rows * cols <= max_pixels:
        return image, mask
    f = reduction_factor((rows, cols), max_pixels)
    return block_average(image, f), block_average(mask, f)


def write_display_overlay(image_data, mask, path, *, legend: bool = True,
                          max_pixels: int = OVERLAY_MAX_PIXELS) -> None:
    """:func:`write_overlay` of an :class:`~segcut.io.ImageData` and its mask.

    A 2-D image of more than ``max_pixels`` pixels that has stored lower resolutions
    (OME-Zarr multiscales, :attr:`~segcut.io.ImageData.levels`) is drawn from the
    largest level that fits in ``max_pixels`` and has an integer factor (the mask
    reduced to it by majority of each block), so the full-resolution pixels are not
    read again; otherwise from :func:`reduced_for_display`.

    Examples
    --------
    >>> import tempfile, os
    >>> from segcut.io import ImageData, read_image
    >>> full = np.zeros((8, 8), np.uint8)
    >>> level = (2.0, 2.0, lambda: np.full((4, 4), 200, np.uint8))
    >>> data = ImageData(full, None, None, "ZARR", "yx uint8", (), None, (level,))
    >>> path = os.path.join(tempfile.mkdtemp(), "o.png")
    >>> write_display_overlay(data, np.zeros((8, 8), bool), path, legend=False, max_pixels=16)
    >>> int(read_image(path).array[0, 0, 0])  # drawn from the stored level
    200
    """
    rows, cols = mask.shape if mask.ndim == 2 else (0, 0)
    levels = image_data.levels if rows * cols > max_pixels else ()
    for fy, fx, read in sorted(levels, key=lambda level: level[0]):
        f = int(round(fy))
        if fy != fx or abs(fy - f) > 1e-9 or f < 2:
            continue
        m, n = -(-rows // f), -(-cols // f)
        if m * n > max_pixels:
            continue
        picture = read()
        if picture.ndim != mask.ndim + (image_data.channel_axis is not None) \
                or abs(picture.shape[0] - m) > 1 or abs(picture.shape[1] - n) > 1:
            continue  # not the shape a reduction by f gives: use the full image
        small = block_average(np.asarray(mask, dtype=bool), f)
        small = np.pad(small, [(0, max(0, picture.shape[0] - m)),
                               (0, max(0, picture.shape[1] - n))],
                       mode="edge")[:picture.shape[0], :picture.shape[1]]
        write_overlay(picture, small, path, channel_axis=image_data.channel_axis,
                      legend=legend, max_pixels=None)
        return
    write_overlay(image_data.array, mask, path, channel_axis=image_data.channel_axis,
                  legend=legend, max_pixels=max_pixels)


def write_overlay(image, mask, path, *, channel_axis: int | None = None,
                  legend: bool = True, max_pixels: int | None = OVERLAY_MAX_PIXELS) -> None:
    """Write :func:`overlay_image` (with its legend by default) as an RGB PNG, atomically.

    Overlays are for looking at, so they use fast compression (zlib level 1): on a
    512x512 photograph-like picture that took about 0.7 times as long as level 6, for a
    file about 13% larger (``tests/benchmarks/bench_io.py``). A 2-D image of more than
    ``max_pixels`` pixels is drawn from :func:`reduced_for_display` (None: always at
    full size).

    Parameters
    ----------
    image, mask, channel_axis, legend
        As in :func:`overlay_image`.
    path : str or os.PathLike
        The ``.png`` file.
    max_pixels : int or None
        Largest overlay drawn at full size.

    Examples
    --------
    >>> import tempfile, os
    >>> from segcut.io import read_image
    >>> path = os.path.join(tempfile.mkdtemp(), "o.png")
    >>> write_overlay(np.zeros((4, 4), np.uint8), np.eye(4, dtype=bool), path, legend=False)
    >>> read_image(path).array.shape
    (4, 4, 3)
    """
    from .io import write_image

    if Path(path).suffix.lower() != ".png":
        raise ValueError(f"overlays are written as PNG; got {Path(path).name!r}")
    if max_pixels is not None:
        moved = channel_axis is not None
        image, mask = reduced_for_display(image, mask, max_pixels, channel_axis=channel_axis)
        channel_axis = -1 if moved else None
    picture = overlay_image(image, mask, channel_axis=channel_axis, legend=legend)
    write_image(picture, path, channel_axis=-1, compress_level=1)
