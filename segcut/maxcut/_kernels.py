"""numba kernels of the local searches: gains, flips, descents.

Only numpy and numba are imported here. Kernels take raw CSR arrays
(``indptr``, ``indices``, ``weights``), an int8 ``sides`` array of +-1 and
scalars; they validate nothing and allocate no Python objects. The plain Python
wrappers in :mod:`segcut.maxcut.local` do the checks and the allocations.

Gain of flipping vertex ``i`` (the change of the cut value):
``gain_i = x_i * sum_j w_ij x_j``.
"""

import numpy as np
from numba import njit


@njit(cache=True)
def compute_gains(indptr, indices, weights, sides, gains):
    """Fill ``gains[i] = x_i * sum_j w_ij x_j`` for every vertex."""
    n = indptr.shape[0] - 1
    for i in range(n):
        acc = 0.0
        for k in range(indptr[i], indptr[i + 1]):
            acc += weights[k] * sides[indices[k]]
        gains[i] = sides[i] * acc


@njit(cache=True)
def flip_vertex(indptr, indices, weights, sides, gains, i):
    """Flip vertex ``i`` and update the gains of ``i`` and its neighbours in O(deg i)."""
    xi = sides[i]
    for k in range(indptr[i], indptr[i + 1]):
        j = indices[k]
        # the term w_ij x_i x_j in gain_j changes sign
        gains[j] -= 2.0 * weights[k] * xi * sides[j]
    sides[i] = -xi
    gains[i] = -gains[i]


@njit(cache=True)
def descend_1flip(indptr, indices, weights, sides, gains, order, tol, max_moves):
    """First-improvement 1-flip descent driven by a work queue.

    Vertices are examined in ``order``; a vertex whose gain exceeds ``tol`` is
    flipped and each neighbour whose gain becomes positive is queued again. No
    O(n) scan per move. Stops at a 1-flip local optimum (every gain <= ``tol``) or
    after ``max_moves`` flips. ``sides`` and ``gains`` are updated in place;
    ``gains`` must hold the gains of ``sides`` on entry.

    Returns the number of flips made.
    """
    n = sides.shape[0]
    queue = np.empty(n, dtype=np.int64)
    queued = np.zeros(n, dtype=np.bool_)
    head = 0
    size = 0
    for t in range(n):
        v = order[t]
        queue[(head + size) % n] = v
        queued[v] = True
        size += 1
    moves = 0
    while size > 0 and moves < max_moves:
        i = queue[head]
        head = (head + 1) % n
        size -= 1
        queued[i] = False
        if gains[i] > tol:
            flip_vertex(indptr, indices, weights, sides, gains, i)
            moves += 1
            for k in range(indptr[i], indptr[i + 1]):
                j = indices[k]
                if not queued[j] and gains[j] > tol:
                    queue[(head + size) % n] = j
                    queued[j] = True
                    size += 1
    return moves
