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
def _cell_span(lo, hi, steps, cell, n_cells, a):
    """Grid cells (first, last + 1) along axis ``a`` that may hold a centre reaching the tile."""
    first = max(int(np.floor((lo[a] - 2 * steps[a] - 1) / cell[a])), 0)
    last = min(int(np.floor((hi[a] + 2 * steps[a]) / cell[a])), n_cells[a] - 1)
    return first, last + 1


@njit(cache=True)
def _tile_candidates(windows, steps, lo, hi, cell, n_cells, first, order, found):
    """Centres whose window (rows of ``windows``: z0, z1, y0, y1, x0, x1) meets the tile
    ``lo..hi`` (exclusive), in increasing order. Writes their indices to ``found``;
    returns how many.

    A centre at ``c`` reaches the tile only when ``lo - 2 step - 1 < c < hi + 2 step``,
    so only the grid cells holding such positions are searched.
    """
    count = 0
    z0, z1 = _cell_span(lo, hi, steps, cell, n_cells, 0)
    y0, y1 = _cell_span(lo, hi, steps, cell, n_cells, 1)
    x0, x1 = _cell_span(lo, hi, steps, cell, n_cells, 2)
    for cz in range(z0, z1):
        for cy in range(y0, y1):
            for cx in range(x0, x1):
                c = (cz * n_cells[1] + cy) * n_cells[2] + cx
                for i in range(first[c], first[c + 1]):
                    k = order[i]
                    if (windows[k, 0] >= hi[0] or windows[k, 1] <= lo[0]
                            or windows[k, 2] >= hi[1] or windows[k, 3] <= lo[1]
                            or windows[k, 4] >= hi[2] or windows[k, 5] <= lo[2]):
                        continue
                    j = count
                    while j > 0 and found[j - 1] > k:
                        found[j] = found[j - 1]
                        j -= 1
                    found[j] = k
                    count += 1
    return count


@njit(cache=True)
def tile_order(planes, shape, cell, n_cells):
    """The pixels regrouped tile by tile (tiles and the pixels in them in C order).

    Returns ``(colour, zs, ys, xs, own, flat)``: colour planes, coordinates (as
    floats), a label buffer and the flat index of every pixel in tile order, and
    ``start`` (where each tile begins).
    """
    n = planes.shape[1]
    colour = np.empty((planes.shape[0], n), dtype=np.float64)
    zs, ys, xs = np.empty(n), np.empty(n), np.empty(n)
    flat = np.empty(n, dtype=np.int64)
    start = np.zeros(n_cells[0] * n_cells[1] * n_cells[2] + 1, dtype=np.int64)
    i = 0
    t = 0
    for tz in range(n_cells[0]):
        for ty in range(n_cells[1]):
            for tx in range(n_cells[2]):
                for z in range(tz * cell[0], min((tz + 1) * cell[0], shape[0])):
                    for y in range(ty * cell[1], min((ty + 1) * cell[1], shape[1])):
                        base = (z * shape[1] + y) * shape[2]
                        for x in range(tx * cell[2], min((tx + 1) * cell[2], shape[2])):
                            for c in range(planes.shape[0]):
                                colour[c, i] = planes[c, base + x]
                            zs[i], ys[i], xs[i] = z, y, x
                            flat[i] = base + x
                            i += 1
                t += 1
                start[t] = i
    return (colour, zs, ys, xs, np.empty(n, dtype=np.int64), flat), start


@njit(cache=True)
def _assign_tile(centres, k, windows, spatial_weight, pixels, s0, n, best):
    """Compare centre ``k`` (search window ``windows[k]``, :func:`_window`) with the ``n``
    pixels of a tile starting at ``s0`` in the tile-ordered ``pixels`` (one branch-free
    loop)."""
    colour, zs_all, ys_all, xs_all, own_all, _ = pixels
    zs, ys, xs, own = zs_all[s0:s0 + n], ys_all[s0:s0 + n], xs_all[s0:s0 + n], own_all[s0:s0 + n]
    n_channels = colour.shape[0]
    q0 = colour[0, s0:s0 + n]
    q1 = colour[min(1, n_channels - 1), s0:s0 + n]
    q2 = colour[min(2, n_channels - 1), s0:s0 + n]
    cz, cy, cx = centres[k, 0], centres[k, 1], centres[k, 2]
    z0, z1, y0, y1, x0, x1 = windows[k, 0], windows[k, 1], windows[k, 2], windows[k, 3], \
        windows[k, 4], windows[k, 5]
    c1, c2 = min(1, n_channels - 1), min(2, n_channels - 1)
    m0, m1, m2 = centres[k, 3], centres[k, 3 + c1], centres[k, 3 + c2]
    for i in range(n):
        z, y, x = zs[i], ys[i], xs[i]
        d = ((cz - z) * (cz - z) + (cy - y) * (cy - y) + (cx - x) * (cx - x)) * spatial_weight
        t = q0[i] - m0
        tone = t * t
        if n_channels == 3:
            t = q1[i] - m1
            tone += t * t
            t = q2[i] - m2
            tone += t * t
        else:
            for c in range(1, n_channels):
                t = colour[c, s0 + i] - centres[k, 3 + c]
                tone += t * t
        d += tone
        inside = (z0 <= z) & (z < z1) & (y0 <= y) & (y < y1) & (x0 <= x) & (x < x1)
        better = inside & (d < best[i])
        best[i] = d if better else best[i]
        own[i] = k if better else own[i]


@njit(cache=True)
def _tile_upper_bound(centres, alive, windows, spatial_weight, pixels, s0, n):
    """Largest distance of a tile's pixels to the centres they had (inf when one of
    those centres is gone or no longer reaches its pixel): no pixel of the tile
    ends farther than this from its nearest centre."""
    colour, zs, ys, xs, own, _ = pixels
    worst = 0.0
    for i in range(s0, s0 + n):
        k = own[i]
        if k < 0 or not alive[k]:
            return np.inf
        z, y, x = zs[i], ys[i], xs[i]
        cz, cy, cx = centres[k, 0], centres[k, 1], centres[k, 2]
        if not (windows[k, 0] <= z < windows[k, 1] and windows[k, 2] <= y < windows[k, 3]
                and windows[k, 4] <= x < windows[k, 5]):
            return np.inf
        d = ((cz - z) * (cz - z) + (cy - y) * (cy - y) + (cx - x) * (cx - x)) * spatial_weight
        tone = 0.0
        for c in range(colour.shape[0]):
            t = colour[c, i] - centres[k, 3 + c]
            tone += t * t
        worst = max(worst, d + tone)
    return worst


@njit(cache=True)
def _box_distance(centres, k, lo, hi, spatial_weight):
    """Spatial part of the distance from centre ``k`` to the nearest pixel of the box
    ``lo..hi``, computed so that it never exceeds the computed distance to any pixel
    of it (the same operations on smaller or equal gaps)."""
    gz = max(lo[0] - centres[k, 0], 0.0, centres[k, 0] - (hi[0] - 1))
    gy = max(lo[1] - centres[k, 1], 0.0, centres[k, 1] - (hi[1] - 1))
    gx = max(lo[2] - centres[k, 2], 0.0, centres[k, 2] - (hi[2] - 1))
    return (gz * gz + gy * gy + gx * gx) * spatial_weight


@njit(cache=True)
def _tile_grid(steps, shape):
    """Tile side (one grid step, at least 1) and number of tiles along each axis."""
    cell = np.empty(3, dtype=np.int64)
    n_cells = np.empty(3, dtype=np.int64)
    for a in range(3):
        cell[a] = max(int(steps[a]), 1)
        n_cells[a] = (shape[a] + cell[a] - 1) // cell[a]
    return cell, n_cells


@njit(cache=True)
def slic_assign(pixels, start, centres, alive, steps, spatial_weight, shape, labels):
    """One assignment sweep: each pixel to its nearest centre among those in reach.

    ``pixels, start`` are the image in tile order (:func:`tile_order`, tiles of
    one grid step); ``labels`` (n,) the flat labels of a (D, H, W) image. A pixel
    takes the centre at the smallest distance, the lowest index among equal
    distances (a sweep over the centres in index order with a strict
    comparison). Each tile is compared with the centres whose window meets it,
    one long branch-free loop per centre; a centre farther from the whole tile
    than any of its pixels is from the centre it had is skipped (it cannot be
    nearest). ``labels`` of pixels out of every window keep their value.
    Returns the number of (tile, centre) pairs.
    """
    cell, n_cells = _tile_grid(steps, shape)
    first, order = _bucket_centres(centres, alive, cell, n_cells)
    windows = np.empty((centres.shape[0], 6), dtype=np.int64)
    for k in range(centres.shape[0]):
        windows[k, 0], windows[k, 1], windows[k, 2], windows[k, 3], windows[k, 4], \
            windows[k, 5] = _window(centres, k, steps, shape)
    found = np.empty(centres.shape[0], dtype=np.int64)
    lo = np.empty(3, dtype=np.int64)
    hi = np.empty(3, dtype=np.int64)
    best = np.empty(cell[0] * cell[1] * cell[2], dtype=np.float64)
    colour, zs, ys, xs, own, flat = pixels
    for i in range(flat.shape[0]):
        own[i] = labels[flat[i]]
    pairs = 0
    t = 0
    for tz in range(n_cells[0]):
        for ty in range(n_cells[1]):
            for tx in range(n_cells[2]):
                lo[0], lo[1], lo[2] = tz * cell[0], ty * cell[1], tx * cell[2]
                for a in range(3):
                    hi[a] = min(lo[a] + cell[a], shape[a])
                m = _tile_candidates(windows, steps, lo, hi, cell, n_cells, first, order, found)
                s0, s1 = start[t], start[t + 1]
                n = s1 - s0
                best[:n] = np.inf
                reach = _tile_upper_bound(centres, alive, windows, spatial_weight, pixels, s0, n)
                for j in range(m):
                    if _box_distance(centres, found[j], lo, hi, spatial_weight) > reach:
                        continue  # farther from every pixel of the tile than its own centre
                    _assign_tile(centres, found[j], windows, spatial_weight, pixels, s0, n, best)
                pairs += m
                t += 1
    for i in range(flat.shape[0]):
        labels[flat[i]] = own[i]
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
    cell, n_cells = _tile_grid(steps, shape)
    pixels, start = tile_order(planes, shape, cell, n_cells)
    for _ in range(n_iterations):
        if slic_assign(pixels, start, centres, alive, steps, spatial_weight, shape,
                       labels) == 0:
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


@njit(cache=True)
def _reflected(i, n):
    """Index ``i`` folded into ``0 .. n - 1`` by mirror reflection about the edges
    (``d c b a | a b c d | d c b a``)."""
    period = 2 * n
    i = i % period
    return i if i < n else period - 1 - i


@njit(cache=True)
def correlate_symmetric(image, n_after, weights, out):
    """Correlate lines of a symmetric odd kernel along the middle axis of an (A, L, B)
    array given as ``image`` (A, L * B) with ``n_after = B``.

    ``out[a, l, b] = w_r x_l + sum_{j = r .. 1} (x_{l-j} + x_{l+j}) w_{r-j}`` with the
    line extended by mirror reflection, the terms added in that order. Away from
    the ends each term is one long loop over the contiguous ``(L, B)`` block.
    """
    n_before = image.shape[0]
    length = image.shape[1] // n_after
    r = weights.shape[0] // 2
    inner_lo, inner_hi = min(r, length), max(length - r, min(r, length))
    for a in range(n_before):
        src = image[a]
        row = out[a]
        for i in range(length * n_after):
            row[i] = src[i] * weights[r]
        for j in range(r, 0, -1):
            w = weights[r - j]
            shift = j * n_after
            for i in range(inner_lo * n_after, inner_hi * n_after):
                row[i] += (src[i - shift] + src[i + shift]) * w
            for l in range(length):
                if inner_lo <= l < inner_hi:
                    continue
                first = _reflected(l - j, length) * n_after
                second = _reflected(l + j, length) * n_after
                for b in range(n_after):
                    row[l * n_after + b] += (src[first + b] + src[second + b]) * w
