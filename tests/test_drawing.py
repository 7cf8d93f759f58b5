"""Overlays (segcut.drawing): shaded foreground, outline, legend, named planes of stacks.

Blending is checked against the textbook formula for alpha compositing
(out = (1 - a) * image + a * colour, rounded; common knowledge); boundaries against
scipy.ndimage erosion and dilation.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from segcut.drawing import (FILL_COLOR, FILL_OPACITY, HALO_COLOR, LINE_COLOR, overlay_image,
                            write_overlay)
from segcut.io import read_image

RNG = np.random.default_rng(1234)
RGB = RNG.integers(0, 256, size=(12, 17, 3), dtype=np.uint8)
GRAY = RNG.integers(0, 256, size=(12, 17), dtype=np.uint8)


def blended(value) -> list:
    """Alpha compositing of FILL_COLOR over a pixel (common knowledge)."""
    value = np.asarray(value, np.float64)
    return np.rint(value * (1 - FILL_OPACITY) + np.asarray(FILL_COLOR) * FILL_OPACITY).astype(
        int).tolist()


def test_overlay_colours_fill_and_untouched_pixels(tmp_path):
    image = np.full((40, 40), 200, np.uint8)  # light image
    mask = np.zeros((40, 40), bool)
    mask[10:30, 12:28] = True
    out = overlay_image(image, mask)
    assert out.shape == (40, 40, 3) and out.dtype == np.uint8
    assert out[10, 20].tolist() == list(LINE_COLOR)  # inner edge
    assert out[9, 20].tolist() == list(HALO_COLOR)  # just outside
    assert out[20, 20].tolist() == blended([200, 200, 200])  # inside: shaded, not bare
    assert out[0, 0].tolist() == [200, 200, 200]  # background is left as it was
    # the line stays visible on a dark image: high contrast against black
    dark = overlay_image(np.zeros((40, 40), np.uint8), mask)
    assert dark[10, 20].tolist() == list(LINE_COLOR)
    # the file holds the same picture, with a legend strip below it
    write_overlay(image, mask, tmp_path / "o.png")
    written = read_image(tmp_path / "o.png").array
    assert written.shape[0] > 40
    np.testing.assert_array_equal(written[:40, :40], out)
    write_overlay(image, mask, tmp_path / "bare.png", legend=False)
    np.testing.assert_array_equal(read_image(tmp_path / "bare.png").array, out)


def test_legend_shows_both_swatches():
    mask = np.zeros((60, 200), bool)
    mask[:, :100] = True
    out = overlay_image(np.full((60, 200), 90, np.uint8), mask, legend=True)
    strip = out[60:]
    colours = {tuple(p) for p in strip.reshape(-1, 3).tolist()}
    assert tuple(LINE_COLOR) in colours  # the foreground swatch's border
    # the foreground swatch is the fill blended over the swatch ground
    assert tuple(blended([150, 150, 150])) in colours


def test_overlay_normalises_16bit_and_float():
    ramp16 = np.tile(np.linspace(1000, 3000, 50).astype(np.uint16), (20, 1))
    ramp = ramp16.astype(np.float64) / 1e4
    mask = np.zeros((20, 50), bool)
    a = overlay_image(ramp16, mask)
    b = overlay_image(ramp, mask)
    np.testing.assert_array_equal(a, b)
    assert a[..., 0].min() == 0 and a[..., 0].max() == 255  # stretched to the full range


def test_overlay_colour_and_stack_with_named_planes(tmp_path):
    mask = np.zeros((12, 17), bool)
    mask[3:8, 4:9] = True
    out = overlay_image(RGB, mask)
    assert out[0, 0].tolist() == RGB[0, 0].tolist()
    stack = RNG.integers(0, 256, (8, 40, 60), dtype=np.uint8)
    stack_mask = np.repeat(np.pad(mask, ((14, 14), (20, 23)))[None], 8, axis=0)
    montage = overlay_image(stack, stack_mask)
    assert montage.shape == (40, 3 * 60 + 2 * 4, 3)  # three planes, 4-pixel gaps
    # planes at 1/4, 1/2 and 3/4 of the depth (2, 4, 6 counted from 0)
    for k, plane in enumerate((2, 4, 6)):
        tile = montage[:, k * 64:k * 64 + 60]
        np.testing.assert_array_equal(tile, overlay_image(stack[plane], stack_mask[plane]))
    labelled = overlay_image(stack, stack_mask, legend=True)
    # two strips below: plane names, then the legend
    assert labelled.shape[0] > 40 + 20
    np.testing.assert_array_equal(labelled[:40, :188], montage)
    with pytest.raises(ValueError, match=r"mask shape \(12, 16\) does not match image shape"):
        overlay_image(RGB, mask[:, :16])
    with pytest.raises(ValueError, match="overlays are written as PNG"):
        write_overlay(RGB, mask, tmp_path / "o.tif")


def test_plane_names_are_drawn_and_differ():
    from segcut.drawing import _plane_name

    assert _plane_name(2, 8, 1000, 16) == "plane 3 of 8"
    assert _plane_name(2, 8, 1, 16) == "3/8"  # no room: the shortest form
    stack = np.zeros((8, 30, 90), np.uint8)
    masks = np.zeros((8, 30, 90), bool)
    labelled = overlay_image(stack, masks, legend=True)
    caption = labelled[30:30 + 16]
    tiles = [caption[:, k * 94:k * 94 + 90] for k in range(3)]
    assert all((t != t[0, 0]).any() for t in tiles)  # text is drawn under each plane
    assert not np.array_equal(tiles[0], tiles[1])  # and the names differ


@given(
    mask=hnp.arrays(np.bool_, st.tuples(st.integers(3, 12), st.integers(3, 12))),
    value=st.integers(0, 255),
)
def test_overlay_only_shades_the_foreground_and_draws_near_the_boundary(mask, value):
    from scipy import ndimage as ndi

    image = np.full(mask.shape + (3,), value, np.uint8)
    out = overlay_image(image, mask)
    near = (ndi.binary_dilation(mask) & ~mask) | (mask & ~ndi.binary_erosion(mask, border_value=1))
    outside = ~near & ~mask
    np.testing.assert_array_equal(out[outside], image[outside])
    inside = ~near & mask
    if inside.any():
        assert {tuple(p) for p in out[inside].tolist()} == {tuple(blended([value] * 3))}
    colours = {LINE_COLOR, HALO_COLOR}
    assert all(tuple(pixel) in colours for pixel in out[near].tolist())


def test_overlay_bytes_are_reproducible(tmp_path):
    mask = GRAY > 120
    write_overlay(RGB, mask, tmp_path / "a.png")
    write_overlay(RGB.copy(), mask.copy(), tmp_path / "b.png")
    assert (tmp_path / "a.png").read_bytes() == (tmp_path / "b.png").read_bytes()
