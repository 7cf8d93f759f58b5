"""numba kernels of the maximum flow behind the method ``flow``.

Only numpy and numba are imported here. The network is a symmetric CSR graph
(``indptr``, ``indices``) whose arcs carry integer residual capacities
(``residual``, one per arc, the two arcs of an edge tied by ``sister``) plus,
for every node, a net terminal capacity ``terminal``: positive from the source
to the node, negative from the node to the sink. Integer capacities keep every
sum exact.

The maximum flow is found by the augmenting-path algorithm of Boykov and
Kolmogorov (search trees grown from both terminals and reused between
augmentations): Y. Boykov, V. Kolmogorov, "An experimental comparison of
min-cut/max-flow algorithms for energy minimization in vision", IEEE TPAMI
26(9), 2004. doi:10.1109/TPAMI.2004.60
"""

import numpy as np
from numba import njit

FREE, SOURCE_TREE, SINK_TREE = 0, 1, 2
TERMINAL, ORPHAN, NO_PARENT = -1, -2, -3
_FAR = 1 << 60


@njit(cache=True)
def sister_arcs(indptr, indices):
    """Index of the reverse arc of every arc of a symmetric CSR graph with sorted rows."""
    n = indptr.shape[0] - 1
    cursor = indptr[:-1].copy()
    sister = np.empty(indices.shape[0], dtype=np.int64)
    for i in range(n):
        for a in range(indptr[i], indptr[i + 1]):
            j = indices[a]
            sister[a] = cursor[j]
            cursor[j] += 1
    return sister


@njit(cache=True, inline="always")
def _push(queue, state, node):
    """Append ``node`` to the ring buffer ``queue`` (state: head, size) unless queued."""
    if state[2 + node] == 0:
        n = queue.shape[0]
        queue[(state[0] + state[1]) % n] = node
        state[1] += 1
        state[2 + node] = 1


@njit(cache=True, inline="always")
def _pop(queue, state):
    node = queue[state[0]]
    state[0] = (state[0] + 1) % queue.shape[0]
    state[1] -= 1
    state[2 + node] = 0
    return node


@njit(cache=True, inline="always")
def _grow(i, indptr, indices, sister, residual, tree, parent, stamp, dist, queue, active):
    """Grow the tree of active node ``i``; return an arc from the source tree to the
    sink tree when the trees touch, else -1."""
    own = tree[i]
    for a in range(indptr[i], indptr[i + 1]):
        back = sister[a]
        if (residual[a] if own == SOURCE_TREE else residual[back]) <= 0:
            continue
        j = indices[a]
        if tree[j] == FREE:
            tree[j] = own
            parent[j] = back
            stamp[j] = stamp[i]
            dist[j] = dist[i] + 1
            _push(queue, active, j)
        elif tree[j] != own:
            return a if own == SOURCE_TREE else back
        elif stamp[j] <= stamp[i] and dist[j] > dist[i]:
            parent[j] = back
            stamp[j] = stamp[i]
            dist[j] = dist[i] + 1
    return -1


@njit(cache=True, inline="always")
def _augment(middle, indices, sister, residual, terminal, parent, orphans, orphan_state):
    """Push the bottleneck along the path through arc ``middle``; return the amount."""
    start, end = indices[sister[middle]], indices[middle]
    amount = residual[middle]
    i = start
    while parent[i] != TERMINAL:
        amount = min(amount, residual[sister[parent[i]]])
        i = indices[parent[i]]
    amount = min(amount, terminal[i])
    i = end
    while parent[i] != TERMINAL:
        amount = min(amount, residual[parent[i]])
        i = indices[parent[i]]
    amount = min(amount, -terminal[i])
    residual[sister[middle]] += amount
    residual[middle] -= amount
    for side in range(2):
        i = start if side == 0 else end
        while parent[i] != TERMINAL:
            a = parent[i]
            toward, away = (sister[a], a) if side == 0 else (a, sister[a])
            residual[away] += amount
            residual[toward] -= amount
            nxt = indices[a]
            if residual[toward] == 0:
                parent[i] = ORPHAN
                _push(orphans, orphan_state, i)
            i = nxt
        terminal[i] += -amount if side == 0 else amount
        if terminal[i] == 0:
            parent[i] = ORPHAN
            _push(orphans, orphan_state, i)
    return amount


@njit(cache=True, inline="always")
def _origin_distance(j, now, indices, parent, stamp, dist):
    """Path length from ``j`` up to its terminal, or ``_FAR`` when it meets an orphan;
    marks the nodes passed with ``now`` and their distances."""
    d = 0
    k = j
    while True:
        if stamp[k] == now:
            d += dist[k]
            break
        a = parent[k]
        d += 1
        if a == TERMINAL:
            stamp[k] = now
            dist[k] = 1
            break
        if a == ORPHAN:
            return _FAR
        k = indices[a]
    total = d
    k = j
    while stamp[k] != now:
        stamp[k] = now
        dist[k] = d
        d -= 1
        k = indices[parent[k]]
    return total


@njit(cache=True, inline="always")
def _adopt(i, now, indptr, indices, sister, residual, tree, parent, stamp, dist, queue, active,
           orphans, orphan_state):
    """Find orphan ``i`` a new parent in its tree, or free it (its children become orphans)."""
    own = tree[i]
    best, best_arc = _FAR, -1
    for a in range(indptr[i], indptr[i + 1]):
        if (residual[sister[a]] if own == SOURCE_TREE else residual[a]) <= 0:
            continue
        j = indices[a]
        if tree[j] != own:
            continue
        d = _origin_distance(j, now, indices, parent, stamp, dist)
        if d < best:
            best, best_arc = d, a
    if best_arc >= 0:
        parent[i] = best_arc
        stamp[i] = now
        dist[i] = best + 1
        return
    for a in range(indptr[i], indptr[i + 1]):
        j = indices[a]
        if tree[j] != own:
            continue
        if (residual[sister[a]] if own == SOURCE_TREE else residual[a]) > 0:
            _push(queue, active, j)
        p = parent[j]
        if p >= 0 and indices[p] == i:
            parent[j] = ORPHAN
            _push(orphans, orphan_state, j)
    tree[i] = FREE
    parent[i] = NO_PARENT


@njit(cache=True)
def boykov_kolmogorov(indptr, indices, sister, residual, terminal, tree):
    """Maximum flow from the source to the sink; ``residual`` and ``terminal`` become the
    residual capacities and ``tree[i]`` is ``SOURCE_TREE`` exactly for the nodes the
    source reaches in the residual network (the source side of the minimum cut with
    the fewest nodes). Returns the flow value."""
    n = terminal.shape[0]
    parent = np.full(n, NO_PARENT, dtype=np.int64)
    stamp = np.zeros(n, dtype=np.int64)
    dist = np.zeros(n, dtype=np.int64)
    queue = np.empty(max(n, 1), dtype=np.int64)
    active = np.zeros(n + 2, dtype=np.int64)
    orphans = np.empty(max(n, 1), dtype=np.int64)
    orphan_state = np.zeros(n + 2, dtype=np.int64)
    tree[:] = FREE
    for i in range(n):
        if terminal[i] != 0:
            tree[i] = SOURCE_TREE if terminal[i] > 0 else SINK_TREE
            parent[i] = TERMINAL
            dist[i] = 1
            _push(queue, active, i)
    flow = 0
    now = 0
    current = -1
    while True:
        i = current
        if i < 0 or tree[i] == FREE:
            i = -1
            while active[1] > 0:
                j = _pop(queue, active)
                if tree[j] != FREE:
                    i = j
                    break
            if i < 0:
                break
        middle = _grow(i, indptr, indices, sister, residual, tree, parent, stamp, dist,
                       queue, active)
        now += 1
        if middle < 0:
            current = -1
            continue
        current = i
        flow += _augment(middle, indices, sister, residual, terminal, parent, orphans,
                         orphan_state)
        while orphan_state[1] > 0:
            _adopt(_pop(orphans, orphan_state), now, indptr, indices, sister, residual, tree,
                   parent, stamp, dist, queue, active, orphans, orphan_state)
    return flow
