"""numba kernels of the SDP relaxation: mixing sweeps, duals, rounded cut values.

Only numpy and numba are imported here. Kernels take raw CSR arrays
(``indptr``, ``indices``, ``weights``) of a symmetric graph, a C-contiguous
float64 factor ``V`` of shape (n, k) with one unit row per vertex, and scalars;
they validate nothing. The wrappers in :mod:`segcut.maxcut.sdp` check and
allocate.

With ``g_i = sum_j w_ij v_j`` the factor objective is
``f(V) = sum_i <v_i, g_i> = sum_{i,j} w_ij <v_i, v_j>`` (ordered pairs), and the
relaxation value is ``<L, V V^T> / 4 = (2 * total_weight - f) / 4``.
"""

import numpy as np
from numba import njit


@njit(cache=True)
def mixing_sweep(indptr, indices, weights, V, g):
    """One cyclic sweep of the coordinate update ``v_i <- -g_i / ||g_i||``.

    Each update is the exact minimiser of ``f`` over the unit row ``v_i`` with the
    other rows fixed. A row whose ``g_i`` is zero (no neighbours, or neighbours
    that cancel) is left as it is. ``g`` is a scratch array of length k.

    Returns the change of ``f`` over the sweep (never positive up to round-off).
    """
    n, k = V.shape
    change = 0.0
    for i in range(n):
        for c in range(k):
            g[c] = 0.0
        for p in range(indptr[i], indptr[i + 1]):
            j = indices[p]
            w = weights[p]
            for c in range(k):
                g[c] += w * V[j, c]
        norm2 = 0.0
        for c in range(k):
            norm2 += g[c] * g[c]
        if norm2 <= 0.0:
            continue
        norm = np.sqrt(norm2)
        old = 0.0
        for c in range(k):
            old += g[c] * V[i, c]
        for c in range(k):
            V[i, c] = -g[c] / norm
        # f counts the pair (i, j) twice: once from each end
        change += 2.0 * (-norm - old)
    return change


@njit(cache=True)
def factor_objective(indptr, indices, weights, V):
    """``f(V) = sum_{i,j} w_ij <v_i, v_j>`` over ordered pairs, recomputed from scratch."""
    n, k = V.shape
    total = 0.0
    for i in range(n):
        acc = 0.0
        for p in range(indptr[i], indptr[i + 1]):
            j = indices[p]
            dot = 0.0
            for c in range(k):
                dot += V[i, c] * V[j, c]
            acc += weights[p] * dot
        total += acc
    return total


@njit(cache=True)
def dual_estimate(indptr, indices, weights, V, degrees, y):
    """Fill ``y_i = (d_i - <v_i, g_i>) / 4``, the diagonal of ``(L/4) V V^T``.

    ``sum(y)`` equals the relaxation value of ``V``; at a stationary point
    ``Diag(y) - L/4`` annihilates every column of ``V``.
    """
    n, k = V.shape
    for i in range(n):
        acc = 0.0
        for p in range(indptr[i], indptr[i + 1]):
            j = indices[p]
            dot = 0.0
            for c in range(k):
                dot += V[i, c] * V[j, c]
            acc += weights[p] * dot
        y[i] = (degrees[i] - acc) / 4.0


@njit(cache=True)
def cut_values_of_columns(indptr, indices, weights, S, values):
    """Cut value of every column of the sign matrix ``S`` (n, H), int8 +-1.

    ``values[h] = sum_{i<j, S[i,h] != S[j,h]} w_ij``.
    """
    n, h_count = S.shape
    for h in range(h_count):
        values[h] = 0.0
    for i in range(n):
        for p in range(indptr[i], indptr[i + 1]):
            j = indices[p]
            if j <= i:
                continue
            w = weights[p]
            for h in range(h_count):
                if S[i, h] != S[j, h]:
                    values[h] += w
