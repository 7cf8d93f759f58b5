"""numba kernel of the confidence stage: forced flips and their cascades.

Only numpy, numba and the 1-flip update and work queue of the max-cut kernels are
imported here. The kernel takes raw CSR arrays, an int8 ``sides`` array of +-1 and
scalars; :mod:`segcut.confidence` checks and allocates.
"""

import numpy as np
from numba import njit

from .maxcut._kernels import flip_vertex as _flip, queue_neighbours


@njit(cache=True)
def _cascade(indptr, indices, weights, sides, gains, locked, queue, queued, moved, original,
             i, tol, max_moves, max_changed):
    """Flip ``i``, then let unlocked vertices with a positive gain follow (first in, first out).

    At most ``max_changed`` vertices may be off their original side at once.
    Returns (change of the cut value, number of flips recorded in ``moved``).
    """
    n = sides.shape[0]
    n_changed = 1
    total = gains[i]
    _flip(indptr, indices, weights, sides, gains, i)
    moved[0] = i
    n_moved = 1
    head = 0
    tail = 0
    tail = queue_neighbours(indptr, indices, i, queue, queued, tail, gains, -np.inf, locked)
    while head < tail and n_moved < max_moves:
        v = queue[head % n]
        head += 1
        queued[v] = False
        if gains[v] <= tol:
            continue
        step = 1 if sides[v] == original[v] else -1
        if n_changed + step > max_changed:
            continue
        n_changed += step
        total += gains[v]
        _flip(indptr, indices, weights, sides, gains, v)
        moved[n_moved] = v
        n_moved += 1
        tail = queue_neighbours(indptr, indices, v, queue, queued, tail, gains, -np.inf, locked)
    while head < tail:  # budget spent: empty the queue
        queued[queue[head % n]] = False
        head += 1
    return total, n_moved


@njit(cache=True)
def forced_flip_values(indptr, indices, weights, sides, gains, terminal, tol, max_moves,
                       best_other):
    """For every vertex, the best change of the cut value seen with it on the other side.

    For each free vertex ``i`` in order: flip it, lock it, let the cascade of
    improving 1-flips follow, then undo everything. Every vertex that the cascade
    leaves on the other side gets ``best_other[j] = max(best_other[j], change)``.
    Without a terminal (``terminal < 0``) at most half the vertices may be off
    their side at once (moving more is moving the rest: the cascade could walk to
    the global flip, which is the reference cut again). ``sides`` and ``gains``
    come back unchanged.
    """
    n = sides.shape[0]
    locked = np.zeros(n, dtype=np.bool_)
    queued = np.zeros(n, dtype=np.bool_)
    queue = np.empty(n, dtype=np.int64)
    moved = np.empty(max_moves + 1, dtype=np.int64)
    original = sides.copy()
    max_changed = n
    if terminal >= 0:
        locked[terminal] = True
    else:
        max_changed = n // 2
    for i in range(n):
        if i == terminal:
            continue
        locked[i] = True
        total, n_moved = _cascade(indptr, indices, weights, sides, gains, locked, queue,
                                  queued, moved, original, i, tol, max_moves, max_changed)
        locked[i] = False
        for m in range(n_moved):
            v = moved[m]
            if sides[v] != original[v] and total > best_other[v]:
                best_other[v] = total
        for m in range(n_moved - 1, -1, -1):
            _flip(indptr, indices, weights, sides, gains, moved[m])
