"""numba kernels of the SLIC over-segmentation: k-means sweeps and connectivity.

Only numpy and numba are imported here. Images of shape (D, H, W) (D = 1 for
a 2-D image) come as colour planes, a (C, D * H * W) float64 array already
divided by the compactness, with their flat int64 labels. The plain Python
wrapper :func:`segcut.superpixels.slic_labels` prepares the inputs.

Distance of pixel ``p`` to cluster centre ``k`` (SLIC, Achanta et al. 2012):
``|pos_p - pos_k|^2 / step^2 + |colour_p - colour_k|^2``, searched in a window of
``2 step`` around each centre.
"""

import numpy as np
from numba import njit


@njit(cache=True)
def _window(centres, k, steps, shape):
    """Index bounds ``z0, z1, y0, y1, x0, x1`` of the search window of centre ``k``."""
    z0 = int(max(centres[k, 0] - 2 * steps[0], 0.0))
    z1 = int(min(centres[k, 0] + 2 * steps[0] + 1, float(shape[0])))
    y0 = int(max(centres[k, 1] - 2 * steps[1], 0.0))
    y1 = int(min(centres[k, 1] + 2 * steps[1] + 1, float(shape[1])))
    x0 = int(max(centres[k, 2] - 2 * steps[2], 0.0))
    x1 = int(min(centres[k, 2] + 2 * steps[2] + 1, float(shape[2])))
    return z0, z1, y0, y1, x0, x1


@njit(cache=True)
def _bucket_centres(centres, alive, cell, n_cells):
    """Live centres sorted by the grid cell holding them: ``(first, order)`` as in CSR."""
    n = centres.shape[0]
    key = np.full(n, -1, dtype=np.int64)
    first = np.zeros(n_cells[0] * n_cells[1] * n_cells[2] + 1, dtype=np.int64)
    for k in range(n):
        if alive[k]:
            cz = min(max(int(centres[k, 0] // cell[0]), 0), n_cells[0] - 1)
            cy = min(max(int(centres[k, 1] // cell[1]), 0), n_cells[1] - 1)
            cx = min(max(int(centres[k, 2] // cell[2]), 0), n_cells[2] - 1)
            key[k] = (cz * n_cells[1] + cy) * n_cells[2] + cx
            first[key[k] + 1] += 1
    for i in range(first.shape[0] - 1):
        first[i + 1] += first[i]
    fill = first[:-1].copy()
    order = np.empty(n, dtype=np.int64)
    for k in range(n):
        if key[k] >= 0:
            order[fill[key[k]]] = k
            fill[key[k]] += 1
    return first, order


@njit(cache=True)
def _tile_candidates(centres, steps, shape, lo, hi, cell, n_cells, first, order, found):
    """Centres whose window meets the tile ``lo..hi`` (exclusive), in increasing order.

    Writes their indices to ``found``; returns how many.
    """
    count = 0
    t = np.empty(3, dtype=np.int64)
    reach = np.empty(3, dtype=np.int64)
    for a in range(3):
        t[a] = lo[a] // cell[a]
        reach[a] = int(2 * steps[a] + 1) // cell[a] + 2
    for cz in range(max(t[0] - reach[0], 0), min(t[0] + reach[0] + 1, n_cells[0])):
        for cy in range(max(t[1] - reach[1], 0), min(t[1] + reach[1] + 1, n_cells[1])):
            for cx in range(max(t[2] - reach[2], 0), min(t[2] + reach[2] + 1, n_cells[2])):
                c = (cz * n_cells[1] + cy) * n_cells[2] + cx
                for i in range(first[c], first[c + 1]):
                    k = order[i]
                    z0, z1, y0, y1, x0, x1 = _window(centres, k, steps, shape)
                    if (z0 >= hi[0] or z1 <= lo[0] or y0 >= hi[1] or y1 <= lo[1]
                            or x0 >= hi[2] or x1 <= lo[2]):
                        continue
                    j = count
                    while j > 0 and found[j - 1] > k:
                        found[j] = found[j - 1]
                        j -= 1
                    found[j] = k
                    count += 1
    return count


@njit(cache=True)
def _gather_tile(planes, labels, shape, lo, hi, tile):
    """Copy a tile's pixels to the contiguous buffers of ``tile``; returns their number."""
    colour, zs, ys, xs, own, flat = tile
    n = 0
    for z in range(lo[0], hi[0]):
        for y in range(lo[1], hi[1]):
            base = (z * shape[1] + y) * shape[2]
            for x in range(lo[2], hi[2]):
                for c in range(planes.shape[0]):
                    colour[c, n] = planes[c, base + x]
                zs[n], ys[n], xs[n] = z, y, x
                own[n] = labels[base + x]
                flat[n] = base + x
                n += 1
    return n


@njit(cache=True)
def _assign_tile(centres, k, steps, spatial_weight, tile, n, best):
    """Compare centre ``k`` with the ``n`` pixels of a gathered tile (branch-free loop)."""
    colour, zs, ys, xs, own, _ = tile
    n_channels = colour.shape[0]
    cz, cy, cx = centres[k, 0], centres[k, 1], centres[k, 2]
    z0 = int(max(cz - 2 * steps[0], 0.0))
    z1 = int(cz + 2 * steps[0] + 1)
    y0 = int(max(cy - 2 * steps[1], 0.0))
    y1 = int(cy + 2 * steps[1] + 1)
    x0 = int(max(cx - 2 * steps[2], 0.0))
    x1 = int(cx + 2 * steps[2] + 1)
    c1, c2 = min(1, n_channels - 1), min(2, n_channels - 1)
    m0, m1, m2 = centres[k, 3], centres[k, 3 + c1], centres[k, 3 + c2]
    for i in range(n):
        z, y, x = zs[i], ys[i], xs[i]
        d = ((cz - z) * (cz - z) + (cy - y) * (cy - y) + (cx - x) * (cx - x)) * spatial_weight
        t = colour[0, i] - m0
        tone = t * t
        if n_channels == 3:
            t = colour[c1, i] - m1
            tone += t * t
            t = colour[c2, i] - m2
            tone += t * t
        else:
            for c in range(1, n_channels):
                t = colour[c, i] - centres[k, 3 + c]
                tone += t * t
        d += tone
        inside = (z0 <= z) & (z < z1) & (y0 <= y) & (y < y1) & (x0 <= x) & (x < x1)
        better = inside & (d < best[i])
        best[i] = d if better else best[i]
        own[i] = k if better else own[i]


@njit(cache=True)
def slic_assign(planes, centres, alive, steps, spatial_weight, shape, labels):
    """One assignment sweep: each pixel to its nearest centre among those in reach.

    ``planes`` (C, n) holds the colour channels (C = 1 or 3), ``labels`` (n,)
    the flat pixels of a (D, H, W) image. A pixel takes the
    centre at the smallest distance, the lowest index among equal distances (a
    sweep over the centres in index order with a strict comparison). The image
    is visited in tiles of one grid step, copied to contiguous buffers and
    compared with the centres whose window meets it in one long loop each. ``labels`` of pixels out of
    every window keep their value. Returns the number of (tile, centre) pairs.
    """
    cell = np.empty(3, dtype=np.int64)
    n_cells = np.empty(3, dtype=np.int64)
    for a in range(3):
        cell[a] = max(int(steps[a]), 1)
        n_cells[a] = (shape[a] + cell[a] - 1) // cell[a]
    first, order = _bucket_centres(centres, alive, cell, n_cells)
    found = np.empty(centres.shape[0], dtype=np.int64)
    lo = np.empty(3, dtype=np.int64)
    hi = np.empty(3, dtype=np.int64)
    size = cell[0] * cell[1] * cell[2]
    tile = (np.empty((planes.shape[0], size), dtype=np.float64), np.empty(size, dtype=np.float64),
            np.empty(size, dtype=np.float64), np.empty(size, dtype=np.float64),
            np.empty(size, dtype=np.int64), np.empty(size, dtype=np.int64))
    best = np.empty(size, dtype=np.float64)
    pairs = 0
    for tz in range(n_cells[0]):
        for ty in range(n_cells[1]):
            for tx in range(n_cells[2]):
                lo[0], lo[1], lo[2] = tz * cell[0], ty * cell[1], tx * cell[2]
                for a in range(3):
                    hi[a] = min(lo[a] + cell[a], shape[a])
                m = _tile_candidates(centres, steps, shape, lo, hi, cell, n_cells, first, order,
                                     found)
                n = _gather_tile(planes, labels, shape, lo, hi, tile)
                best[:n] = np.inf
                for j in range(m):
                    _assign_tile(centres, found[j], steps, spatial_weight, tile, n, best)
                for i in range(n):
                    labels[tile[5][i]] = tile[4][i]
                pairs += m
    return pairs


@njit(cache=True)
def slic_update(planes, shape, labels, centres, alive, counts):
    """Move every centre to the mean position and colour of its pixels.

    A centre left without pixels is marked dead (``alive[k] = False``) and never
    attracts a pixel again.
    """
    counts[:] = 0
    centres[:] = 0.0
    i = 0
    for z in range(shape[0]):
        for y in range(shape[1]):
            for x in range(shape[2]):
                k = labels[i]
                if k >= 0:
                    counts[k] += 1
                    centres[k, 0] += z
                    centres[k, 1] += y
                    centres[k, 2] += x
                    for c in range(planes.shape[0]):
                        centres[k, 3 + c] += planes[c, i]
                i += 1
    for k in range(centres.shape[0]):
        if counts[k] == 0:
            alive[k] = False
            continue
        for j in range(centres.shape[1]):
            centres[k, j] /= counts[k]


@njit(cache=True)
def slic_iterate(planes, shape, centres, steps, spatial_weight, n_iterations, labels):
    """``n_iterations`` assignment and update sweeps (fewer when no centre reaches a pixel)."""
    alive = np.ones(centres.shape[0], dtype=np.bool_)
    counts = np.zeros(centres.shape[0], dtype=np.int64)
    for _ in range(n_iterations):
        if slic_assign(planes, centres, alive, steps, spatial_weight, shape, labels) == 0:
            break
        slic_update(planes, shape, labels, centres, alive, counts)


@njit(cache=True)
def connect_labels(labels, min_size, max_size):
    """Relabel so every label is one 6- (4- in 2-D) connected piece.

    Pixels are scanned in C order; each unlabelled pixel grows its piece by
    breadth-first search over equal input labels, up to ``max_size`` pixels
    (the rest of a larger piece starts a new one). A piece smaller than
    ``min_size`` takes the label of the last labelled piece its search touched.
    Returns the new labels, consecutive from 0 (except that a small first piece
    with no labelled neighbour keeps the next free label).
    """
    depth, height, width = labels.shape
    out = np.full(labels.shape, -1, dtype=np.int64)
    queue = np.empty((max(max_size, 1), 3), dtype=np.int64)
    moves = np.array([[0, 0, 1], [0, 0, -1], [0, 1, 0], [0, -1, 0], [1, 0, 0], [-1, 0, 0]])
    next_label = 0
    for z in range(depth):
        for y in range(height):
            for x in range(width):
                if out[z, y, x] >= 0:
                    continue
                own = labels[z, y, x]
                touched = next_label
                out[z, y, x] = next_label
                queue[0, 0], queue[0, 1], queue[0, 2] = z, y, x
                size = 1
                head = 0
                while head < size < max_size:
                    for m in range(6):
                        zz = queue[head, 0] + moves[m, 0]
                        yy = queue[head, 1] + moves[m, 1]
                        xx = queue[head, 2] + moves[m, 2]
                        if not (0 <= zz < depth and 0 <= yy < height and 0 <= xx < width):
                            continue
                        if labels[zz, yy, xx] == own and out[zz, yy, xx] < 0:
                            out[zz, yy, xx] = next_label
                            queue[size, 0], queue[size, 1], queue[size, 2] = zz, yy, xx
                            size += 1
                            if size >= max_size:
                                break
                        elif out[zz, yy, xx] >= 0 and out[zz, yy, xx] != next_label:
                            touched = out[zz, yy, xx]
                    head += 1
                if size < min_size:
                    for i in range(size):
                        out[queue[i, 0], queue[i, 1], queue[i, 2]] = touched
                else:
                    next_label += 1
    return out
