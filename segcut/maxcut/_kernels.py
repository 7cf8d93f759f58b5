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
def queue_neighbours(indptr, indices, v, queue, queued, tail, gains, threshold, blocked):
    """Append to the ring ``queue`` every neighbour of ``v`` worth examining again.

    A neighbour ``j`` is appended at position ``tail`` (modulo the queue's length)
    when it is not queued yet, not ``blocked[j]`` and ``gains[j] > threshold``; it
    is then marked in ``queued``. Neighbours go in CSR order. Returns the new tail.
    """
    n = queue.shape[0]
    for k in range(indptr[v], indptr[v + 1]):
        j = indices[k]
        if not queued[j] and not blocked[j] and gains[j] > threshold:
            queue[tail % n] = j
            queued[j] = True
            tail += 1
    return tail


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
    blocked = np.zeros(n, dtype=np.bool_)
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
            size = queue_neighbours(indptr, indices, i, queue, queued, head + size, gains, tol,
                                    blocked) - head
    return moves


# --- random numbers --------------------------------------------------------------------
# A tiny xorshift64* generator whose whole state is one uint64 in a 1-element array, so a
# search can stop after any move and resume with exactly the same stream.

@njit(cache=True)
def rand_u64(state):
    """Next 64-bit pseudo-random integer; advances ``state[0]``."""
    x = state[0]
    x ^= x >> np.uint64(12)
    x ^= x << np.uint64(25)
    x ^= x >> np.uint64(27)
    state[0] = x
    return x * np.uint64(2685821657736338717)


@njit(cache=True)
def rand_below(state, bound):
    """Pseudo-random integer in ``0 .. bound - 1`` (``bound >= 1``)."""
    return np.int64((rand_u64(state) >> np.uint64(11)) % np.uint64(bound))


# --- tournament trees over vertex gains ------------------------------------------------
# ``win`` has 2 * size entries (size = power of two >= n). Leaf ``size + v`` holds vertex v
# (or -1 for padding); an inner node holds the better of its children. A vertex's key is
# its gain when ``member[v] == want`` and minus infinity otherwise; ties go to the larger
# ``tie`` value, a random number refreshed whenever the vertex's gain changes.

@njit(cache=True)
def _better(a, b, gains, tie, member, want):
    if a < 0:
        return b
    if b < 0:
        return a
    ka = gains[a] if member[a] == want else -np.inf
    kb = gains[b] if member[b] == want else -np.inf
    if ka > kb:
        return a
    if kb > ka:
        return b
    return a if tie[a] >= tie[b] else b


@njit(cache=True)
def tree_build(win, size, n, gains, tie, member, want):
    """Fill a tournament tree from scratch in O(size)."""
    for v in range(size):
        win[size + v] = v if v < n else -1
    for node in range(size - 1, 0, -1):
        win[node] = _better(win[2 * node], win[2 * node + 1], gains, tie, member, want)


@njit(cache=True)
def tree_update(win, size, v, gains, tie, member, want):
    """Re-play the matches on the path from leaf ``v`` to the root: O(log n)."""
    node = (size + v) >> 1
    while node >= 1:
        win[node] = _better(win[2 * node], win[2 * node + 1], gains, tie, member, want)
        node >>= 1


@njit(cache=True)
def tree_best(win, gains, member, want):
    """Vertex with the largest key, or -1 when no vertex has ``member == want``."""
    v = win[1]
    if v < 0 or member[v] != want:
        return -1
    return v


# --- binary min-heap of tabu expiry times -------------------------------------------------

@njit(cache=True)
def _heap_push(heap_t, heap_v, size, t, v):
    k = size
    heap_t[k] = t
    heap_v[k] = v
    while k > 0:
        parent = (k - 1) >> 1
        if heap_t[parent] <= heap_t[k]:
            break
        heap_t[parent], heap_t[k] = heap_t[k], heap_t[parent]
        heap_v[parent], heap_v[k] = heap_v[k], heap_v[parent]
        k = parent
    return size + 1


@njit(cache=True)
def _heap_pop(heap_t, heap_v, size):
    size -= 1
    heap_t[0] = heap_t[size]
    heap_v[0] = heap_v[size]
    k = 0
    while True:
        left = 2 * k + 1
        if left >= size:
            break
        child = left
        if left + 1 < size and heap_t[left + 1] < heap_t[left]:
            child = left + 1
        if heap_t[k] <= heap_t[child]:
            break
        heap_t[child], heap_t[k] = heap_t[k], heap_t[child]
        heap_v[child], heap_v[k] = heap_v[k], heap_v[child]
        k = child
    return size


# --- tabu search with perturbations ---------------------------------------------------------

# Integer state slots of ``tabu_search`` (the ``istate`` array).
TS_MOVE = 0          # moves made so far
TS_LAST_BEST = 1     # move count at the last new best
TS_HEAP_SIZE = 2     # entries in the expiry heap
TS_PENDING = 3       # 1 when the current sides are a best not yet copied
TS_STRENGTH = 4      # vertices flipped by the next perturbation
TS_N_PERTURB = 5     # perturbations made
TS_BEST_AT_PERTURB = 6  # 1 when the best improved since the last perturbation
TS_TOP = 7           # highest bucket that may be non-empty (bucket variant)
TS_N_ISTATE = 8

# Float state slots (the ``fstate`` array).
TS_CURRENT = 0       # cut value of the current sides (kept incrementally)
TS_BEST = 1          # best cut value seen
TS_N_FSTATE = 2


@njit(cache=True)
def cut_of(indptr, indices, weights, sides):
    """Cut value ``sum_{i<j} w_ij [x_i != x_j]`` from the CSR arrays."""
    n = indptr.shape[0] - 1
    total = 0.0
    for i in range(n):
        for k in range(indptr[i], indptr[i + 1]):
            j = indices[k]
            if i < j and sides[i] != sides[j]:
                total += weights[k]
    return total


@njit(cache=True)
def _tabu_reset(indptr, indices, weights, sides, gains, tie, tabu, win_free, win_tabu,
                size, istate, rng_state):
    n = sides.shape[0]
    compute_gains(indptr, indices, weights, sides, gains)
    for v in range(n):
        tabu[v] = 0
        tie[v] = rand_u64(rng_state)
    istate[TS_HEAP_SIZE] = 0
    tree_build(win_free, size, n, gains, tie, tabu, 0)
    tree_build(win_tabu, size, n, gains, tie, tabu, 1)


@njit(cache=True)
def tabu_init(indptr, indices, weights, sides, gains, tie, tabu, tabu_until, win_free,
              win_tabu, size, best_sides, istate, fstate, rng_state, strength):
    """Set up the search state for the start ``sides``."""
    n = sides.shape[0]
    for v in range(n):
        tabu_until[v] = 0
        best_sides[v] = sides[v]
    for k in range(istate.shape[0]):
        istate[k] = 0
    istate[TS_STRENGTH] = strength
    value = cut_of(indptr, indices, weights, sides)
    fstate[TS_CURRENT] = value
    fstate[TS_BEST] = value
    _tabu_reset(indptr, indices, weights, sides, gains, tie, tabu, win_free, win_tabu,
                size, istate, rng_state)


@njit(cache=True)
def _keep_pending_best(istate, sides, best_sides):
    """Copy ``sides`` into ``best_sides`` when a new best is pending."""
    if istate[TS_PENDING] == 1:
        for k in range(sides.shape[0]):
            best_sides[k] = sides[k]
        istate[TS_PENDING] = 0


@njit(cache=True)
def _make_tabu(v, t, tabu, tabu_until, tenure_base, tenure_spread, rng_state):
    """Forbid flipping ``v`` back for a tenure drawn in base..base+spread; returns it."""
    tenure = tenure_base
    if tenure_spread > 0:
        tenure += rand_below(rng_state, tenure_spread + 1)
    tabu[v] = 1
    tabu_until[v] = t + 1 + tenure
    return tenure


@njit(cache=True)
def _record_move(istate, fstate, current, t, improvement):
    """Book the move made at step ``t``; a value above the best by ``improvement`` is a new best."""
    fstate[TS_CURRENT] = current
    istate[TS_MOVE] = t + 1
    if current > fstate[TS_BEST] + improvement:
        fstate[TS_BEST] = current
        istate[TS_LAST_BEST] = t + 1
        istate[TS_PENDING] = 1
        istate[TS_BEST_AT_PERTURB] = 1


@njit(cache=True)
def _perturb(indptr, indices, weights, sides, gains, best_sides, istate, fstate, rng_state,
             min_strength, max_strength, flipped):
    """Return to the best sides and flip ``istate[TS_STRENGTH]`` random vertices.

    The strength falls back to ``min_strength`` when the best improved since the last
    perturbation and otherwise grows by ``min_strength`` up to ``max_strength``.
    Leaves the gains of the new sides in ``gains`` and their cut in ``fstate``, and
    the flipped vertices in ``flipped`` (at least ``max_strength`` long); returns
    how many were flipped.
    """
    n = sides.shape[0]
    _keep_pending_best(istate, sides, best_sides)
    if istate[TS_BEST_AT_PERTURB] == 1 or istate[TS_N_PERTURB] == 0:
        istate[TS_STRENGTH] = min_strength
    else:
        istate[TS_STRENGTH] = min(max_strength, istate[TS_STRENGTH] + min_strength)
    istate[TS_BEST_AT_PERTURB] = 0
    istate[TS_N_PERTURB] += 1
    for k in range(n):
        sides[k] = best_sides[k]
    compute_gains(indptr, indices, weights, sides, gains)
    current = fstate[TS_BEST]
    count = istate[TS_STRENGTH]
    for k in range(count):
        v = rand_below(rng_state, n)
        current += gains[v]
        flip_vertex(indptr, indices, weights, sides, gains, v)
        flipped[k] = v
    fstate[TS_CURRENT] = current
    return count


@njit(cache=True)
def _tabu_after_jump(flipped, count, tabu, tabu_until, heap_t, heap_v, t, tenure_base,
                     tenure_spread, rng_state, keep):
    """Clear the tabu list; with ``keep``, make the vertices of the jump tabu so the
    search cannot undo the jump at once. Returns the new heap size."""
    for v in range(tabu.shape[0]):
        tabu[v] = 0
    hs = 0
    if not keep:
        return hs
    for k in range(count):
        v = flipped[k]
        if tabu[v] == 1 or hs >= heap_t.shape[0]:
            continue
        tenure = _make_tabu(v, t, tabu, tabu_until, tenure_base, tenure_spread, rng_state)
        hs = _heap_push(heap_t, heap_v, hs, t + 1 + tenure, v)
    return hs


_LOWEST_KEY = np.int64(-(2 ** 63))
_MAGNITUDE_BITS = np.int64(2 ** 63 - 1)


@njit(cache=True, inline="always")
def _order_key(bits):
    """Integer with the order of the float64 whose bits are ``bits`` (-0.0 equal to 0.0)."""
    key = bits ^ ((bits >> 63) & _MAGNITUDE_BITS)
    return 0 if key == -1 else key


@njit(cache=True)
def _top_keys(bits, tabu):
    """Largest gain key among free and among tabu vertices (branch-free, vectorised)."""
    top_free = _LOWEST_KEY
    top_tabu = _LOWEST_KEY
    for v in range(bits.shape[0]):
        key = _order_key(bits[v])
        free = tabu[v] == 0
        top_free = max(top_free, key if free else _LOWEST_KEY)
        top_tabu = max(top_tabu, _LOWEST_KEY if free else key)
    return top_free, top_tabu


@njit(cache=True)
def _count_tops(bits, tabu, top_free, top_tabu):
    """How many free and tabu vertices reach their top key, and the sum of their indices."""
    n_free = 0
    n_tabu = 0
    sum_free = 0
    sum_tabu = 0
    for v in range(bits.shape[0]):
        key = _order_key(bits[v])
        free = tabu[v] == 0
        hit_free = free & (key == top_free)
        hit_tabu = (not free) & (key == top_tabu)
        n_free += hit_free
        n_tabu += hit_tabu
        sum_free += v if hit_free else 0
        sum_tabu += v if hit_tabu else 0
    return n_free, sum_free, n_tabu, sum_tabu


@njit(cache=True)
def _largest_tie(bits, tie, tabu, top, free):
    """Among the free (or tabu) vertices with key ``top``: the largest tie key, first index."""
    best = -1
    for v in range(bits.shape[0]):
        if (tabu[v] == 0) == free and _order_key(bits[v]) == top:
            if best < 0 or tie[v] > tie[best]:
                best = v
    return best


@njit(cache=True)
def _scan_best(gains, tie, tabu):
    """Best free and best tabu vertex (largest gain, then largest tie key, then lowest
    index; -1 when there is none), the same keys as the trees.

    Two branch-free passes over integer keys that order like the gains: the top key
    of each kind, then how many vertices reach it (and, when one does, which); only
    ties of equal gains take a third pass.
    """
    bits = gains.view(np.int64)
    top_free, top_tabu = _top_keys(bits, tabu)
    n_free, sum_free, n_tabu, sum_tabu = _count_tops(bits, tabu, top_free, top_tabu)
    a = sum_free if n_free == 1 else -1
    if n_free > 1:
        a = _largest_tie(bits, tie, tabu, top_free, True)
    b = sum_tabu if n_tabu == 1 else -1
    if n_tabu > 1:
        b = _largest_tie(bits, tie, tabu, top_tabu, False)
    return a, b


@njit(cache=True)
def tabu_search(indptr, indices, weights, sides, gains, tie, tabu, tabu_until, win_free,
                win_tabu, size, heap_t, heap_v, best_sides, istate, fstate, rng_state,
                tenure_base, tenure_spread, stall_moves, min_strength, max_strength,
                tol, target, n_moves, use_scan, flipped, keep_jump):
    """Run ``n_moves`` moves of tabu search; all state lives in the arrays passed in.

    Each move flips the vertex with the largest gain among those not tabu (ties broken
    at random), or a tabu vertex whose flip would beat the best cut seen (aspiration).
    A flipped vertex stays tabu for ``tenure_base + U(0, tenure_spread)`` moves. After
    ``stall_moves`` moves without a new best, the search returns to the best sides and
    flips ``istate[TS_STRENGTH]`` random vertices; the strength grows by
    ``min_strength`` after each perturbation that did not lead to a new best (up to
    ``max_strength``) and falls back to ``min_strength`` after one that did.

    With ``use_scan`` False, selection uses two tournament trees (free and tabu
    vertices), so a move costs O(deg log n), not O(n); with ``use_scan`` True it scans
    all vertices, which is faster on small dense graphs. Stops early when the best
    reaches ``target``. The best sides are in ``best_sides`` on return. Returns the number of moves made.
    """
    n = sides.shape[0]
    done = 0
    while done < n_moves:
        if fstate[TS_BEST] >= target:
            break
        t = istate[TS_MOVE]
        # free the vertices whose tenure ends now
        hs = istate[TS_HEAP_SIZE]
        while hs > 0 and heap_t[0] <= t:
            v = heap_v[0]
            expiry = heap_t[0]
            hs = _heap_pop(heap_t, heap_v, hs)
            if tabu[v] == 1 and tabu_until[v] == expiry:
                tabu[v] = 0
                if not use_scan:
                    tree_update(win_free, size, v, gains, tie, tabu, 0)
                    tree_update(win_tabu, size, v, gains, tie, tabu, 1)
        istate[TS_HEAP_SIZE] = hs

        # perturbation: back to the best, then a random jump
        if t - istate[TS_LAST_BEST] > stall_moves:
            count = _perturb(indptr, indices, weights, sides, gains, best_sides, istate,
                             fstate, rng_state, min_strength, max_strength, flipped)
            hs = _tabu_after_jump(flipped, count, tabu, tabu_until, heap_t, heap_v, t,
                                  tenure_base, tenure_spread, rng_state, keep_jump)
            istate[TS_HEAP_SIZE] = hs
            for v in range(n):
                tie[v] = rand_u64(rng_state)
            tree_build(win_free, size, n, gains, tie, tabu, 0)
            tree_build(win_tabu, size, n, gains, tie, tabu, 1)
            istate[TS_LAST_BEST] = t

        # choose the move
        if use_scan:
            a, b = _scan_best(gains, tie, tabu)
        else:
            a = tree_best(win_free, gains, tabu, 0)
            b = tree_best(win_tabu, gains, tabu, 1)
        current = fstate[TS_CURRENT]
        if b >= 0 and current + gains[b] > fstate[TS_BEST] + tol and (a < 0 or gains[b] > gains[a]):
            v = b
        elif a >= 0:
            v = a
        else:
            v = b
        if gains[v] <= tol:
            # the current sides are the best seen and are about to get worse: keep them
            _keep_pending_best(istate, sides, best_sides)

        # make the move
        current += gains[v]
        xi = sides[v]
        for k in range(indptr[v], indptr[v + 1]):
            j = indices[k]
            gains[j] -= 2.0 * weights[k] * xi * sides[j]
            tie[j] = rand_u64(rng_state)
            if use_scan:
                continue
            if tabu[j] == 1:
                tree_update(win_tabu, size, j, gains, tie, tabu, 1)
            else:
                tree_update(win_free, size, j, gains, tie, tabu, 0)
        sides[v] = -xi
        gains[v] = -gains[v]
        tie[v] = rand_u64(rng_state)
        tenure = _make_tabu(v, t, tabu, tabu_until, tenure_base, tenure_spread, rng_state)
        if hs >= heap_t.shape[0]:
            # cannot happen when the heap holds tenure_base + tenure_spread + 3 entries;
            # kept as a guard: end the oldest tenure early
            u = heap_v[0]
            expiry = heap_t[0]
            hs = _heap_pop(heap_t, heap_v, hs)
            if tabu[u] == 1 and tabu_until[u] == expiry and u != v:
                tabu[u] = 0
                if not use_scan:
                    tree_update(win_free, size, u, gains, tie, tabu, 0)
                    tree_update(win_tabu, size, u, gains, tie, tabu, 1)
        hs = _heap_push(heap_t, heap_v, hs, t + 1 + tenure, v)
        istate[TS_HEAP_SIZE] = hs
        if not use_scan:
            tree_update(win_free, size, v, gains, tie, tabu, 0)
            tree_update(win_tabu, size, v, gains, tie, tabu, 1)

        _record_move(istate, fstate, current, t, tol)
        done += 1
    _keep_pending_best(istate, sides, best_sides)
    return done


# --- branch and bound for small graphs -----------------------------------------------------

@njit(cache=True)
def _bb_assign(w, d, side, x, s_plus, s_minus, state_f):
    n = x.shape[0]
    x[d] = side
    if side == 1:
        state_f[0] += s_plus[d]
        for v in range(d + 1, n):
            s_minus[v] += w[v, d]
    else:
        state_f[0] += s_minus[d]
        for v in range(d + 1, n):
            s_plus[v] += w[v, d]


@njit(cache=True)
def _bb_unassign(w, d, x, s_plus, s_minus, state_f):
    n = x.shape[0]
    if x[d] == 1:
        state_f[0] -= s_plus[d]
        for v in range(d + 1, n):
            s_minus[v] -= w[v, d]
    else:
        state_f[0] -= s_minus[d]
        for v in range(d + 1, n):
            s_plus[v] -= w[v, d]
    x[d] = 0


@njit(cache=True)
def branch_and_bound(w, rest, x, best_x, s_plus, s_minus, choice, state_i, state_f, eps, max_nodes):
    """Depth-first branch and bound for max-cut on a small dense weight matrix ``w``.

    Vertices are assigned in index order (vertex 0 is fixed on side +1). For the
    unassigned vertices ``s_plus[v]`` / ``s_minus[v]`` hold the weight v would cut on
    side +1 / -1 against the assigned ones, so
    ``bound = cut so far + sum_v max(s_plus[v], s_minus[v]) + rest[d]`` with ``rest[d]``
    the positive weight among the vertices from ``d`` on. Subtrees whose bound does
    not beat the incumbent ``state_f[1]`` by more than ``eps`` are pruned.

    All state lives in the arrays (``state_i = [depth, nodes]``,
    ``state_f = [cut so far, best]``), so the search can stop after ``max_nodes``
    nodes and resume. Returns True when the search is complete.
    """
    n = x.shape[0]
    d = state_i[0]
    nodes = 0
    while d >= 1:
        if nodes >= max_nodes:
            state_i[0] = d
            state_i[1] += nodes
            return False
        if d == n:
            if state_f[0] > state_f[1]:
                state_f[1] = state_f[0]
                for k in range(n):
                    best_x[k] = x[k]
            d -= 1
            _bb_unassign(w, d, x, s_plus, s_minus, state_f)
            continue
        if choice[d] >= 2:
            choice[d] = 0
            d -= 1
            if d >= 1:
                _bb_unassign(w, d, x, s_plus, s_minus, state_f)
            continue
        first = 1 if s_plus[d] >= s_minus[d] else -1
        side = first if choice[d] == 0 else -first
        choice[d] += 1
        nodes += 1
        _bb_assign(w, d, side, x, s_plus, s_minus, state_f)
        bound = state_f[0] + rest[d + 1]
        for v in range(d + 1, n):
            bound += max(s_plus[v], s_minus[v])
        if bound > state_f[1] + eps:
            d += 1
            if d < n:
                choice[d] = 0
        else:
            _bb_unassign(w, d, x, s_plus, s_minus, state_f)
    state_i[0] = 0
    state_i[1] += nodes
    return True


# --- tabu search with gain buckets (integer weights) -------------------------------------
# Free vertices sit in ``order`` sorted by gain: bucket ``b = gain + offset`` (offset =
# max weighted degree + 1) occupies ``order[start[b]:start[b + 1]]`` and ``pos[v]`` is the
# place of v. Tabu vertices sit in bucket 0 whatever their gain. Moving a vertex one
# bucket up or down is one swap, so a gain change of ``2 |w|`` costs ``2 |w|`` swaps, and
# the best free move is a random member of the highest non-empty bucket: O(1).

@njit(cache=True)
def _bucket_up(order, pos, start, v, b):
    """Move v from bucket b to b + 1 (it becomes the first of b + 1)."""
    last = start[b + 1] - 1
    u = order[last]
    p = pos[v]
    order[p] = u
    pos[u] = p
    order[last] = v
    pos[v] = last
    start[b + 1] = last


@njit(cache=True)
def _bucket_down(order, pos, start, v, b):
    """Move v from bucket b to b - 1 (it becomes the last of b - 1)."""
    first = start[b]
    u = order[first]
    p = pos[v]
    order[p] = u
    pos[u] = p
    order[first] = v
    pos[v] = first
    start[b] = first + 1


@njit(cache=True)
def _bucket_move(order, pos, start, v, b_from, b_to):
    b = b_from
    while b < b_to:
        _bucket_up(order, pos, start, v, b)
        b += 1
    while b > b_to:
        _bucket_down(order, pos, start, v, b)
        b -= 1


@njit(cache=True)
def bucket_build(order, pos, start, gains, tabu, offset):
    """Counting sort of the vertices into their buckets; returns the top bucket."""
    n = gains.shape[0]
    n_buckets = start.shape[0] - 1
    for b in range(n_buckets + 1):
        start[b] = 0
    for v in range(n):
        b = 0 if tabu[v] == 1 else np.int64(gains[v]) + offset
        start[b + 1] += 1
    for b in range(n_buckets):
        start[b + 1] += start[b]
    fill = start[:n_buckets].copy()
    for v in range(n):
        b = 0 if tabu[v] == 1 else np.int64(gains[v]) + offset
        order[fill[b]] = v
        pos[v] = fill[b]
        fill[b] += 1
    top = n_buckets - 1
    while top >= 1 and start[top] == start[top + 1]:
        top -= 1
    return top


@njit(cache=True)
def tabu_search_buckets(indptr, indices, weights, sides, gains, tie, tabu, tabu_until, order,
                        pos, start, offset, heap_t, heap_v, best_sides, istate, fstate,
                        rng_state, tenure_base, tenure_spread, stall_moves, min_strength,
                        max_strength, target, n_moves, flipped, keep_jump):
    """The search of :func:`tabu_search` with O(1) move selection; integer weights only.

    Same moves, tenure, aspiration and perturbations as :func:`tabu_search` (ties
    among free vertices go to a uniformly random member of the best bucket; among
    tabu vertices to the larger ``tie`` key). ``gains`` must be whole numbers and
    ``offset - 1`` at least the largest weighted degree, and the buckets must have
    been filled by :func:`bucket_build` (its result stored in ``istate[TS_TOP]``).
    All state lives in the arrays, so chunked calls make the same moves as one call.
    Returns the moves made.
    """
    n = sides.shape[0]
    max_gain = offset - 1
    top = istate[TS_TOP]
    done = 0
    while done < n_moves:
        if fstate[TS_BEST] >= target:
            break
        t = istate[TS_MOVE]
        hs = istate[TS_HEAP_SIZE]
        while hs > 0 and heap_t[0] <= t:
            v = heap_v[0]
            expiry = heap_t[0]
            hs = _heap_pop(heap_t, heap_v, hs)
            if tabu[v] == 1 and tabu_until[v] == expiry:
                tabu[v] = 0
                b = np.int64(gains[v]) + offset
                _bucket_move(order, pos, start, v, 0, b)
                if b > top:
                    top = b
        istate[TS_HEAP_SIZE] = hs

        if t - istate[TS_LAST_BEST] > stall_moves:
            count = _perturb(indptr, indices, weights, sides, gains, best_sides, istate,
                             fstate, rng_state, min_strength, max_strength, flipped)
            hs = _tabu_after_jump(flipped, count, tabu, tabu_until, heap_t, heap_v, t,
                                  tenure_base, tenure_spread, rng_state, keep_jump)
            istate[TS_HEAP_SIZE] = hs
            top = bucket_build(order, pos, start, gains, tabu, offset)
            istate[TS_LAST_BEST] = t

        current = fstate[TS_CURRENT]
        while top >= 1 and start[top] == start[top + 1]:
            top -= 1
        a = -1
        if top >= 1:
            a = order[start[top] + rand_below(rng_state, start[top + 1] - start[top])]
        b = -1
        if current + max_gain > fstate[TS_BEST] + 0.5:
            for k in range(start[0], start[1]):
                u = order[k]
                if b < 0 or gains[u] > gains[b] or (gains[u] == gains[b] and tie[u] > tie[b]):
                    b = u
        if b >= 0 and current + gains[b] > fstate[TS_BEST] + 0.5 and (a < 0 or gains[b] > gains[a]):
            v = b
        elif a >= 0:
            v = a
        else:
            v = b
        if gains[v] <= 0.5:
            _keep_pending_best(istate, sides, best_sides)

        current += gains[v]
        xi = sides[v]
        for k in range(indptr[v], indptr[v + 1]):
            j = indices[k]
            old = gains[j]
            gains[j] = old - 2.0 * weights[k] * xi * sides[j]
            if tabu[j] == 1:
                tie[j] = rand_u64(rng_state)
            else:
                b_old = np.int64(old) + offset
                b_new = np.int64(gains[j]) + offset
                _bucket_move(order, pos, start, j, b_old, b_new)
                if b_new > top:
                    top = b_new
        # v leaves its bucket for the tabu bucket 0
        if tabu[v] == 0:
            _bucket_move(order, pos, start, v, np.int64(gains[v]) + offset, 0)
        sides[v] = -xi
        gains[v] = -gains[v]
        tie[v] = rand_u64(rng_state)
        tenure = _make_tabu(v, t, tabu, tabu_until, tenure_base, tenure_spread, rng_state)
        if hs >= heap_t.shape[0]:
            u = heap_v[0]
            expiry = heap_t[0]
            hs = _heap_pop(heap_t, heap_v, hs)
            if tabu[u] == 1 and tabu_until[u] == expiry and u != v:
                tabu[u] = 0
                bu = np.int64(gains[u]) + offset
                _bucket_move(order, pos, start, u, 0, bu)
                if bu > top:
                    top = bu
        hs = _heap_push(heap_t, heap_v, hs, t + 1 + tenure, v)
        istate[TS_HEAP_SIZE] = hs

        _record_move(istate, fstate, current, t, 0.5)
        done += 1
    istate[TS_TOP] = top
    _keep_pending_best(istate, sides, best_sides)
    return done


# --- steepest ascent: always flip a vertex of largest gain -------------------------------
# Whole-number weights: the bucket layout of the tabu search above, with every vertex of
# gain <= 0 in bucket 0 and bucket ``b >= 1`` holding the vertices of gain ``b``; the
# best move is a random member of the highest non-empty bucket. Any weights: an indexed
# max-heap, or one tournament tree over all vertices (``member`` all 0); both order by
# gain, ties to the larger ``tie`` key, so they make the same moves.

@njit(cache=True)
def _ascent_bucket(gain, top_bucket):
    b = np.int64(gain)
    if b < 0:
        return 0
    if b > top_bucket:
        return top_bucket
    return b


@njit(cache=True)
def ascent_bucket_build(order, pos, start, gains):
    """Counting sort of the vertices by clamped gain; returns the top non-empty bucket."""
    n = gains.shape[0]
    n_buckets = start.shape[0] - 1
    for b in range(n_buckets + 1):
        start[b] = 0
    for v in range(n):
        start[_ascent_bucket(gains[v], n_buckets - 1) + 1] += 1
    for b in range(n_buckets):
        start[b + 1] += start[b]
    fill = start[:n_buckets].copy()
    for v in range(n):
        b = _ascent_bucket(gains[v], n_buckets - 1)
        order[fill[b]] = v
        pos[v] = fill[b]
        fill[b] += 1
    top = n_buckets - 1
    while top >= 1 and start[top] == start[top + 1]:
        top -= 1
    return top


@njit(cache=True)
def ascend_buckets(indptr, indices, weights, sides, gains, order, pos, start, rng_state,
                   max_moves):
    """Steepest 1-flip ascent for whole-number weights, moves chosen from gain buckets.

    Each move flips a uniformly random vertex among those of largest positive gain.
    ``start`` has ``max weighted degree + 2`` entries and the buckets must have been
    filled by :func:`ascent_bucket_build`. A gain change of ``2 |w|`` moves a vertex
    ``2 |w|`` buckets at one swap each, so a move costs O(sum of ``|w|`` around the
    flipped vertex) plus the fall of the top bucket. Returns the number of flips.
    """
    top_bucket = start.shape[0] - 2
    top = top_bucket
    moves = 0
    while moves < max_moves:
        while top >= 1 and start[top] == start[top + 1]:
            top -= 1
        if top < 1:
            break
        v = order[start[top] + rand_below(rng_state, start[top + 1] - start[top])]
        b_v = top
        xi = sides[v]
        for k in range(indptr[v], indptr[v + 1]):
            j = indices[k]
            old = gains[j]
            new = old - 2.0 * weights[k] * xi * sides[j]
            gains[j] = new
            b_old = _ascent_bucket(old, top_bucket)
            b_new = _ascent_bucket(new, top_bucket)
            if b_old != b_new:
                _bucket_move(order, pos, start, j, b_old, b_new)
                if b_new > top:
                    top = b_new
        _bucket_move(order, pos, start, v, b_v, _ascent_bucket(-gains[v], top_bucket))
        sides[v] = -xi
        gains[v] = -gains[v]
        moves += 1
    return moves


@njit(cache=True)
def ascend_tree(indptr, indices, weights, sides, gains, tie, win, size, tol, max_moves):
    """Steepest 1-flip ascent for any weights, moves chosen by a tournament tree.

    Each move flips the vertex of largest gain (ties to the larger ``tie`` key) while
    that gain exceeds ``tol``; a move costs O(deg log n). ``win`` (``2 size`` entries,
    ``size`` a power of two >= n) is filled here. Returns the number of flips.
    """
    n = sides.shape[0]
    member = np.zeros(n, dtype=np.int8)
    tree_build(win, size, n, gains, tie, member, 0)
    moves = 0
    while moves < max_moves:
        v = win[1]
        if v < 0 or gains[v] <= tol:
            break
        flip_vertex(indptr, indices, weights, sides, gains, v)
        tree_update(win, size, v, gains, tie, member, 0)
        for k in range(indptr[v], indptr[v + 1]):
            tree_update(win, size, indices[k], gains, tie, member, 0)
        moves += 1
    return moves


# Indexed binary max-heap of vertices: ``heap[k]`` is a vertex, ``hpos[v]`` its place. The
# order is the tournament tree's (larger gain first, ties to the larger ``tie`` key), so
# both pick the same moves; a gain change costs a sift over the places it actually moves.

@njit(cache=True)
def _heap_above(a, b, gains, tie):
    return gains[a] > gains[b] or (gains[a] == gains[b] and tie[a] > tie[b])


@njit(cache=True)
def max_heap_sift(heap, hpos, k, gains, tie, up=True):
    """Restore the heap order around place ``k`` after its vertex's gain changed (only
    downwards with ``up=False``, as building the heap bottom-up needs)."""
    n = heap.shape[0]
    v = heap[k]
    while up and k > 0:
        parent = (k - 1) >> 1
        u = heap[parent]
        if not _heap_above(v, u, gains, tie):
            break
        heap[k] = u
        hpos[u] = k
        k = parent
    while True:
        child = 2 * k + 1
        if child >= n:
            break
        if child + 1 < n and _heap_above(heap[child + 1], heap[child], gains, tie):
            child += 1
        u = heap[child]
        if not _heap_above(u, v, gains, tie):
            break
        heap[k] = u
        hpos[u] = k
        k = child
    heap[k] = v
    hpos[v] = k


@njit(cache=True)
def ascend_heap(indptr, indices, weights, sides, gains, tie, heap, hpos, tol, max_moves):
    """Steepest 1-flip ascent for any weights, moves chosen by an indexed max-heap.

    Makes the same moves as :func:`ascend_tree` (largest gain, ties to the larger
    ``tie`` key, while the gain exceeds ``tol``); a move costs O(deg log n) at worst
    and usually much less, since a small gain change moves a vertex few places.
    ``heap`` and ``hpos`` (n entries each) are filled here. Returns the number of flips.
    """
    n = sides.shape[0]
    for v in range(n):
        heap[v] = v
        hpos[v] = v
    for k in range(n // 2 - 1, -1, -1):
        max_heap_sift(heap, hpos, k, gains, tie, False)
    moves = 0
    while moves < max_moves and n > 0:
        v = heap[0]
        if gains[v] <= tol:
            break
        # change one key at a time and restore the order at once (flip_vertex inlined)
        xi = sides[v]
        for k in range(indptr[v], indptr[v + 1]):
            j = indices[k]
            gains[j] -= 2.0 * weights[k] * xi * sides[j]
            max_heap_sift(heap, hpos, hpos[j], gains, tie)
        sides[v] = -xi
        gains[v] = -gains[v]
        max_heap_sift(heap, hpos, hpos[v], gains, tie)
        moves += 1
    return moves


@njit(cache=True)
def ascend_many(indptr, indices, weights, starts, n_empty, values, rng_state, max_gain, tol):
    """1-flip ascents, one per row of ``starts`` (filled and changed here).

    The first ``n_empty`` rows start from the empty cut (every side +1) and climb by
    steepest ascent, ties among largest gains at random (``rng_state``); the others
    start from random sides. With ``max_gain >= 0`` every move comes from gain
    buckets (whole-number weights, weighted degrees up to ``max_gain``) and the
    random rows climb by steepest ascent too; otherwise the empty rows use an
    indexed max-heap and the random rows first improvement in a random order.
    ``values[r]`` receives the cut value reached, from the gains:
    ``cut = (sum_{i<j} w_ij - sum_i gain_i / 2) / 2``. Returns the flips made in all.
    """
    n = starts.shape[1]
    half_total = 0.5 * weights.sum()
    gains = np.empty(n, dtype=np.float64)
    order = np.empty(n, dtype=np.int64)
    pos = np.empty(n, dtype=np.int64)
    bucket_start = np.zeros(max(max_gain, 0) + 2, dtype=np.int64)
    tie = np.empty(n, dtype=np.uint64)
    no_limit = np.iinfo(np.int64).max
    flips = 0
    for r in range(starts.shape[0]):
        sides = starts[r]
        for i in range(n):
            if r < n_empty:
                sides[i] = 1
            else:
                sides[i] = 1 if (rand_u64(rng_state) >> np.uint64(63)) == 0 else -1
        compute_gains(indptr, indices, weights, sides, gains)
        if max_gain >= 0:
            ascent_bucket_build(order, pos, bucket_start, gains)
            flips += ascend_buckets(indptr, indices, weights, sides, gains, order, pos,
                                    bucket_start, rng_state, no_limit)
        elif r < n_empty:
            for i in range(n):
                tie[i] = rand_u64(rng_state)
            flips += ascend_heap(indptr, indices, weights, sides, gains, tie, order, pos, tol,
                                 no_limit)
        else:
            for i in range(n):
                order[i] = i
            for i in range(n - 1, 0, -1):  # Fisher-Yates shuffle
                j = rand_below(rng_state, i + 1)
                order[i], order[j] = order[j], order[i]
            flips += descend_1flip(indptr, indices, weights, sides, gains, order, tol, no_limit)
        values[r] = 0.5 * (half_total - 0.5 * gains.sum())
    return flips


@njit(cache=True)
def kick_and_descend(indptr, indices, weights, sides, gains, n_kicks, strength, rng_state,
                     tol):
    """Iterated 1-flip search: kick ``strength`` random vertices, descend, keep if better.

    Each kick flips ``strength`` random vertices and runs a first-improvement descent
    from the vertices it touched (at most ``n`` flips); when the cut did not rise by
    more than ``tol`` all its flips are undone in reverse order. ``sides`` and
    ``gains`` (the gains of ``sides`` on entry) are updated in place; returns the
    number of kicks kept.
    """
    n = sides.shape[0]
    queue = np.empty(n, dtype=np.int64)
    queued = np.zeros(n, dtype=np.bool_)
    log = np.empty(strength + n, dtype=np.int64)
    blocked = np.zeros(n, dtype=np.bool_)
    kept = 0
    for _ in range(n_kicks):
        n_log = 0
        delta = 0.0
        head = 0
        size = 0
        for _s in range(strength):
            v = rand_below(rng_state, n)
            delta += gains[v]
            flip_vertex(indptr, indices, weights, sides, gains, v)
            log[n_log] = v
            n_log += 1
            size = queue_neighbours(indptr, indices, v, queue, queued, head + size, gains,
                                    -np.inf, blocked) - head
        moves = 0
        while size > 0:
            i = queue[head]
            head = (head + 1) % n
            size -= 1
            queued[i] = False
            if gains[i] > tol and moves < n:
                delta += gains[i]
                flip_vertex(indptr, indices, weights, sides, gains, i)
                log[n_log] = i
                n_log += 1
                moves += 1
                size = queue_neighbours(indptr, indices, i, queue, queued, head + size, gains,
                                        tol, blocked) - head
        if delta > tol:
            kept += 1
        else:
            for t in range(n_log - 1, -1, -1):
                flip_vertex(indptr, indices, weights, sides, gains, log[t])
    return kept
