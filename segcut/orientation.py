"""Canonical orientation: process every image in an orientation chosen from its content.

Superpixels and the search follow the pixel order, so :func:`segcut.split` turns each
image into the orientation of :func:`canonical_transform` first and moves the mask back
afterwards; results are then exactly equivariant under flips and quarter turns.
"""

from __future__ import annotations

import numpy as np

__all__ = ["CANONICAL_TRANSFORMS", "apply_transform", "canonical_transform"]


#: The eight flips and quarter turns of the image plane, in tie-break order. Entry
#: ``(flip, k)`` maps an array ``a`` to ``np.rot90(np.flip(a, axis=col) if flip else a,
#: k, axes=(row, col))`` (numpy's ``rot90`` turns counter-clockwise).
CANONICAL_TRANSFORMS = {
    "identity": (False, 0),
    "rot90": (False, 1),
    "rot180": (False, 2),
    "rot270": (False, 3),
    "flip_columns": (True, 0),
    "transpose": (True, 1),
    "flip_rows": (True, 2),
    "anti_transpose": (True, 3),
}

# Blocks per side of the content signature (odd), and the levels values are rounded to.
_KEY_BLOCKS = 9
_KEY_LEVELS = 65535


def apply_transform(array, name: str, *, axes=(-2, -1), inverse: bool = False) -> np.ndarray:
    """Apply one of :data:`CANONICAL_TRANSFORMS` (or its inverse) to the plane ``axes``.

    Parameters
    ----------
    array : ndarray
    name : str
        A key of :data:`CANONICAL_TRANSFORMS`.
    axes : (int, int)
        The row and column axes of the image plane.
    inverse : bool
        Apply the inverse transform instead.

    Returns
    -------
    ndarray
        A view of ``array`` (not a copy).

    Examples
    --------
    >>> a = np.arange(6).reshape(2, 3)
    >>> apply_transform(a, "transpose")
    array([[0, 3],
           [1, 4],
           [2, 5]])
    >>> np.array_equal(apply_transform(apply_transform(a, "rot90"), "rot90", inverse=True), a)
    True
    """
    if name not in CANONICAL_TRANSFORMS:
        raise ValueError(f"unknown transform {name!r}; choose one of "
                         f"{', '.join(CANONICAL_TRANSFORMS)}")
    flip, k = CANONICAL_TRANSFORMS[name]
    row, col = axes
    if inverse:
        out = np.rot90(array, -k, axes=(row, col))
        return np.flip(out, axis=col) if flip else out
    out = np.flip(array, axis=col) if flip else array
    return np.rot90(out, k, axes=(row, col))


def _symmetric_edges(length, blocks):
    """Block edges along one side, mirror-symmetric: ``edge[b - i] = length - edge[i]``.

    ``blocks`` is odd, so the middle block is centred for odd and even lengths.
    """
    half = [(i * length) // blocks for i in range((blocks + 1) // 2)]
    return np.array(half + [length - e for e in reversed(half)], dtype=np.int64)


def _block_sums(values):
    """Exact integer sums of rounded values over a mirror-symmetric grid of blocks.

    ``values``: (M, N, C) or (P, M, N, C) in [0, 1]; returns (blocks, blocks, C) int64.
    Integer sums have no round-off, and the grid is mirror-symmetric, so the sums of
    a flipped or rotated image are the correspondingly moved sums, exactly.
    """
    q = (values * float(_KEY_LEVELS) + 0.5).astype(np.int64)  # round half up (values >= 0)
    if q.ndim == 4:
        q = q.sum(axis=0)
    for axis in (0, 1):
        edges = _symmetric_edges(q.shape[axis], _KEY_BLOCKS)
        starts = np.minimum(edges[:-1], q.shape[axis] - 1)
        q = np.add.reduceat(q, starts, axis=axis)
        empty = edges[:-1] == edges[1:]
        if empty.any():  # reduceat gives the start element for an empty block
            index = [slice(None)] * q.ndim
            index[axis] = empty
            q[tuple(index)] = 0
    return q


def _lexicographic_less(a, b):
    """True when array ``a`` comes before ``b`` in C order (first differing element)."""
    a, b = a.ravel(), b.ravel()
    differ = np.flatnonzero(a != b)
    return bool(differ.size) and bool(a[differ[0]] < b[differ[0]])


def canonical_transform(values) -> str:
    """The transform that takes ``values`` to its canonical orientation.

    Parameters
    ----------
    values : (M, N, C) or (P, M, N, C) ndarray
        Image values in [0, 1], channels last (stacks: flips and turns of the
        (M, N) plane only).

    Returns
    -------
    str
        A key of :data:`CANONICAL_TRANSFORMS`.

    Notes
    -----
    Each of the eight views gets the key (spatial shape of the view, then the
    integer sums of the values rounded to 65535 levels over a 9 x 9 grid of
    mirror-symmetric blocks, channel by channel, in C order). The view with the
    smallest key wins. Views whose keys tie are compared pixel by pixel (C order,
    first differing value decides); views that are equal pixel for pixel (the
    image has that symmetry) give the same canonical image, and the first of them
    in :data:`CANONICAL_TRANSFORMS` order is named. Every step is exact, so
    ``canonical_transform`` of a moved image names the view that leads to the same
    canonical image.

    Examples
    --------
    >>> a = np.zeros((4, 6, 1)); a[0, 0] = 1.0
    >>> name = canonical_transform(a)
    >>> moved = apply_transform(a, "rot90", axes=(0, 1))
    >>> c1 = apply_transform(a, name, axes=(0, 1))
    >>> c2 = apply_transform(moved, canonical_transform(moved), axes=(0, 1))
    >>> np.array_equal(c1, c2)
    True
    """
    values = np.asarray(values)
    axes = (values.ndim - 3, values.ndim - 2)

    def less(a, b):
        return _lexicographic_less(apply_transform(values, a, axes=axes),
                                   apply_transform(values, b, axes=axes))

    return pick_canonical(values[..., :1], _block_sums(values), axes, less)


def pick_canonical(first_channel, sums, axes, less):
    """The transform with the smallest key: view shape, block sums, then ``less(a, b)``.

    ``first_channel`` gives the view shapes, ``sums`` (blocks x blocks) the block
    sums of the values, ``less(a, b)`` says whether the values seen through
    transform ``a`` come before those seen through ``b`` pixel by pixel (called
    only between transforms whose shapes and block sums tie).
    """
    keys = {}
    for name in CANONICAL_TRANSFORMS:
        view_shape = apply_transform(first_channel, name, axes=axes).shape[:-1]
        block_view = apply_transform(sums, name, axes=(0, 1))
        keys[name] = tuple(int(v) for v in view_shape) + tuple(block_view.ravel().tolist())
    smallest = min(keys.values())
    best = None
    for name in CANONICAL_TRANSFORMS:
        if keys[name] == smallest and (best is None or less(name, best)):
            best = name
    return best


def _canonical_box(box, spatial, transform):
    """A box ``(x0, y0, x1, y1)`` of the caller's frame, in the canonical frame."""
    from .priors import box_map

    inside = box_map(tuple(spatial[-2:]), box) == 0
    inside = apply_transform(inside, transform)
    rows = np.flatnonzero(inside.any(axis=1))
    cols = np.flatnonzero(inside.any(axis=0))
    return (int(cols[0]), int(rows[0]), int(cols[-1]) + 1, int(rows[-1]) + 1)
