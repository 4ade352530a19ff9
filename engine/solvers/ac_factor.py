"""Randomised approximate Cholesky factorisation of a grounded Laplacian (numba kernel and a
plain-Python reference that gives the same factor bit for bit).

Method: approximate Gaussian elimination (R. Kyng & S. Sachdeva, "Approximate Gaussian
elimination for Laplacians: fast, sparse, and simple", FOCS 2016) in the practical form "AC" of
Y. Gao, R. Kyng & D. A. Spielman ("Robust and practical solution of Laplacian equations by
approximate elimination", arXiv:2303.00709, 2023) with a degree-based order taken in rounds:
each round eliminates, in index order, the vertices whose current degree (multi-edges counted)
is at most the median of the live ones and that no vertex eliminated earlier in the round
touches (an independent set, as in multiple minimum degree; J. W. H. Liu, ACM TOMS 11(2),
1985), which keeps neighbouring steps near in memory. An eliminated vertex's multi-edges are
merged, its neighbours sorted by merged weight ascending, and the clique that exact elimination
would create is replaced by one sampled edge per neighbour: neighbour ``t`` is joined to one later neighbour ``k`` drawn with
probability proportional to ``w_k``, with weight ``w_t (w_{t+1} + ... ) / W``, whose expectation
is the exact clique weight ``w_t w_k / W``. The number of edges never grows.

Grounded systems are handled directly. The matrix is ``M = L + diag(e)``: ``L`` a Laplacian of
positive weights ``-M_ij`` and ``e >= 0`` the diagonal excess (conductance to ground). Eliminating
``v`` of degree ``W = sum_u w_u + e_v`` gives the factor column ``w_u / W`` and pivot ``W``; the
excess it leaves on each neighbour, ``w_u e_v / W``, is added exactly (only the clique among real
neighbours is sampled). A plain Laplacian (``e = 0``) has one zero pivot per connected part
(to rounding: ``ZERO_PIVOT``) whose preconditioner value is left at zero.

The factor is ``M ~ (I - C) D (I - C)^T`` in elimination order: column ``t`` of ``C`` holds the
entries ``w_u / W`` at the (later) positions of the neighbours. Random numbers come from the
xorshift64* generator (S. Vigna, "An experimental exploration of Marsaglia's xorshift
generators, scrambled", ACM TOMS 42(4), 2016), written identically in both versions, so one seed
gives one factor.
"""

from __future__ import annotations

import numba
import numpy as np
import scipy.sparse as sp

from ..growth import with_room

_MASK = (1 << 64) - 1
_MULTIPLIER = 2685821657736338717
_GOLDEN = 0x9E3779B97F4A7C15
_UNIT = 2.0 ** -53
# Neighbour lists up to this length are sorted by insertion, longer ones by merge sort.
_INSERTION_SORT = 32
# Each round eliminates, in index order, the vertices of degree at most the QUANTILE[0] /
# QUANTILE[1] quantile of the live degrees (capped at DEGREE_BINS) that no vertex eliminated
# earlier in the round touches.
QUANTILE = (1, 2)
DEGREE_BINS = 64
# A pivot at most this fraction of its row's diagonal is rounding (the last vertex of a part
# without ground) and counts as zero.
ZERO_PIVOT = 1e-12


def seed_state(seed: int) -> int:
    """The generator's nonzero 64-bit start state for ``seed``."""
    return ((int(seed) * _GOLDEN + 1) & _MASK) or 1


def split_laplacian(matrix) -> tuple:
    """``(indptr, indices, weights, excess)`` of a symmetric matrix with nonpositive
    off-diagonal entries, by scipy (the reference of :func:`split_kernel`): the Laplacian's edge
    weights ``-M_ij`` (each edge in both rows, zeros dropped) and the diagonal excess
    ``M_ii - sum_j w_ij``."""
    matrix = sp.csr_matrix(matrix)
    off = sp.csr_matrix(-(matrix - sp.diags(matrix.diagonal())))
    off.eliminate_zeros()
    off.sort_indices()
    excess = matrix.diagonal() - np.asarray(off.sum(axis=1)).ravel()
    return (off.indptr.astype(np.int64), off.indices.astype(np.int64), off.data.astype(np.float64),
            excess.astype(np.float64))


@numba.njit(cache=True, nogil=True)
def split_kernel(indptr, indices, data):
    """:func:`split_laplacian` of a CSR matrix with sorted indices in one pass; also whether
    every off-diagonal entry is nonpositive (a grounded Laplacian's are)."""
    n = indptr.size - 1
    ptr = np.zeros(n + 1, np.int64)
    idx = np.empty(indices.size, np.int32)
    weights = np.empty(indices.size, np.float64)
    excess = np.empty(n, np.float64)
    laplacian = True
    k = 0
    for v in range(n):
        diagonal = 0.0
        total = 0.0
        for e in range(indptr[v], indptr[v + 1]):
            u = indices[e]
            if u == v:
                diagonal += data[e]
            elif data[e] != 0.0:
                if data[e] > 0.0:
                    laplacian = False
                idx[k] = u
                weights[k] = -data[e]
                total += -data[e]
                k += 1
        excess[v] = diagonal - total
        ptr[v + 1] = k
    return ptr, idx[:k], weights[:k], excess, laplacian


@numba.njit(cache=True, nogil=True)
def grounded_laplacian_kernel(indptr, indices, data):
    """Whether a CSR matrix has nonpositive off-diagonal entries and rows that are diagonally
    dominant to rounding (excess ``>= -1e-12`` of the diagonal): the matrices this factor is
    made for."""
    for v in range(indptr.size - 1):
        diagonal = 0.0
        total = 0.0
        for e in range(indptr[v], indptr[v + 1]):
            if indices[e] == v:
                diagonal += data[e]
            elif data[e] > 0.0:
                return False
            else:
                total -= data[e]
        if diagonal - total < -1e-12 * abs(diagonal):
            return False
    return True


@numba.njit(cache=True, nogil=True)
def weight_variation_kernel(indptr, indices, data, stride):
    """Mean over every ``stride``-th row of the standard deviation of ``log10`` of the row's
    off-diagonal magnitudes (0 for a matrix of equal conductances)."""
    total = 0.0
    rows = 0
    for v in range(0, indptr.size - 1, stride):
        count = 0
        mean = 0.0
        square = 0.0
        for e in range(indptr[v], indptr[v + 1]):
            if indices[e] != v and data[e] != 0.0:
                x = np.log10(abs(data[e]))
                count += 1
                mean += x
                square += x * x
        if count > 0:
            mean /= count
            total += np.sqrt(max(square / count - mean * mean, 0.0))
            rows += 1
    return total / rows if rows else 0.0


# ------------------------------------------------------------------ the factorisation kernel
@numba.njit(cache=True, nogil=True)
def _next_uniform(state):
    x = state[0]
    x ^= x >> np.uint64(12)
    x ^= x << np.uint64(25)
    x ^= x >> np.uint64(27)
    state[0] = x
    return np.float64((x * np.uint64(_MULTIPLIER)) >> np.uint64(11)) * _UNIT


# Columns of the kernel's per-vertex record (32 bytes: within one cache line). Each vertex's
# edges (neighbour, weight) lie together in a pool, from START, LENGTH of them in ROOM slots,
# after a header slot (owner, room); a full list moves to the pool's end with twice the room,
# leaving its dead edges behind, and a full pool is compacted in place (_compact).
_DEGREE, _SEEN, _ROUND, _START, _LENGTH, _ROOM = 0, 1, 2, 3, 4, 5
_GONE = -1
_SLACK = 2
_POOL = 1.5          # pool size over the initial lists, headers and slack


@numba.njit(cache=True, nogil=True)
def _compact(node, neighbour, weight, used):
    """Slide the live vertices' lists to the front of the pool, in pool order, each keeping at
    most ``_SLACK`` free slots; returns the new end."""
    p = 0
    q = 0
    while p < used:
        v = neighbour[p]
        room = np.int64(weight[p])
        if node[v, _SEEN] != _GONE and node[v, _START] == p + 1:
            length = node[v, _LENGTH]
            kept_room = min(room, length + _SLACK)
            neighbour[q] = v
            weight[q] = kept_room
            for k in range(1, length + 1):
                neighbour[q + k] = neighbour[p + k]
                weight[q + k] = weight[p + k]
            node[v, _START] = q + 1
            node[v, _ROOM] = kept_room
            q += kept_room + 1
        p += room + 1
    return q


@numba.njit(cache=True, nogil=True)
def _threshold(node, live, n_live, histogram):
    """The least degree (capped at ``DEGREE_BINS``) that at least ``QUANTILE`` of the live
    vertices do not exceed."""
    histogram[:] = 0
    for i in range(n_live):
        histogram[min(node[live[i], _DEGREE], DEGREE_BINS)] += 1
    need = (n_live * QUANTILE[0] + QUANTILE[1] - 1) // QUANTILE[1]
    seen = 0
    for d in range(DEGREE_BINS + 1):
        seen += histogram[d]
        if seen >= need:
            return d
    return DEGREE_BINS


@numba.njit(cache=True, nogil=True)
def diagonal_kernel(indptr, weights, excess):
    """Each row's diagonal ``max(e_v, 0) + sum_u w_uv`` (summed in list order): the scale
    against which a pivot counts as zero (``ZERO_PIVOT``)."""
    diagonal = np.maximum(excess, 0.0)
    for v in range(indptr.size - 1):
        for e in range(indptr[v], indptr[v + 1]):
            diagonal[v] += weights[e]
    return diagonal


@numba.njit(cache=True, nogil=True)
def factor_kernel(indptr, indices, weights, excess, state0, pool=_POOL):
    """Approximate Cholesky factor (see the module docstring); ``pool``: the edge pool's size
    over the initial lists (a smaller one is compacted more often; the factor is the same).

    Returns ``order`` (vertex eliminated at each step), ``colptr``, ``rows`` (elimination
    positions of the neighbours, int32), ``values`` (``w_u / W``, float32) and ``pivots``
    (``W`` per step).
    """
    n = indptr.size - 1
    order, colptr, rows, values, pivots = eliminate_kernel(
        indptr, indices, weights, excess, diagonal_kernel(indptr, weights, excess),
        np.ones(n, np.bool_), state0, pool)[:5]
    position = np.empty(n, np.int64)
    for t in range(n):
        position[order[t]] = t
    for e in range(rows.size):
        rows[e] = position[rows[e]]
    return order, colptr, rows, values, pivots


@numba.njit(cache=True, nogil=True)
def eliminate_kernel(indptr, indices, weights, excess, diagonal, eliminable, state0, pool):
    """Eliminate the vertices where ``eliminable`` is true (see the module docstring), the
    others staying live: they are never picked but receive fill edges and excess like any
    neighbour. ``diagonal``: the rows' diagonals (:func:`diagonal_kernel` of the whole
    matrix), the scale of the zero-pivot test.

    Returns ``order``, ``colptr``, ``rows`` (neighbours' VERTEX ids, int32), ``values``,
    ``pivots`` of the eliminated vertices and the remaining graph among the others: every
    vertex's ``excess`` and the CSR ``(ptr, idx, weight)`` of their live edges (multi-edges
    kept, in list order; rows of eliminated vertices empty).
    """
    n = indptr.size - 1
    state = np.empty(1, np.uint64)
    state[0] = state0
    neighbour = np.empty(int(pool * (indices.size + (_SLACK + 1) * n)) + 16, np.int32)
    weight = np.empty(neighbour.size, np.float64)
    node = np.empty((n, 8), np.int32)
    used = 0
    for v in range(n):
        first, last = indptr[v], indptr[v + 1]
        neighbour[used] = v
        weight[used] = last - first + _SLACK
        used += 1
        for e in range(first, last):
            neighbour[used + e - first] = indices[e]
            weight[used + e - first] = weights[e]
        node[v, _START] = used
        node[v, _LENGTH] = last - first
        node[v, _ROOM] = last - first + _SLACK
        used += last - first + _SLACK
        node[v, _DEGREE] = last - first
        node[v, _SEEN] = -2
        node[v, _ROUND] = -1
    excess = np.maximum(excess, 0.0)
    live = np.flatnonzero(eliminable)
    n_live = live.size
    order = np.empty(n_live, np.int64)
    colptr = np.zeros(n_live + 1, np.int64)
    rows = np.empty(indices.size + n, np.int32)
    values = np.empty(indices.size + n, np.float32)
    pivots = np.empty(n_live, np.float64)
    near = np.empty(16, np.int64)
    near_w = np.empty(16, np.float64)
    times = np.empty(16, np.int64)
    histogram = np.zeros(DEGREE_BINS + 1, np.int64)
    total = 0
    step = 0
    rnd = 0
    while n_live > 0:
        threshold = _threshold(node, live, n_live, histogram)
        for scan in range(n_live):
            v = live[scan]
            if node[v, _ROUND] == rnd or min(node[v, _DEGREE], DEGREE_BINS) > threshold:
                continue
            node[v, _SEEN] = _GONE
            order[step] = v
            # gather the live edges, merging multi-edges (summed in list order); a neighbour
            # seen in this step has SEEN = total + its place
            count = 0
            start = node[v, _START]
            for e in range(start, start + node[v, _LENGTH]):
                u = neighbour[e]
                seen = node[u, _SEEN]
                if seen >= total:
                    near_w[seen - total] += weight[e]
                    times[seen - total] += 1
                elif seen != _GONE:
                    if count == near.size:
                        near = with_room(near, 2 * count)
                        near_w = with_room(near_w, 2 * count)
                        times = with_room(times, 2 * count)
                    node[u, _SEEN] = total + count
                    node[u, _ROUND] = rnd
                    near[count] = u
                    near_w[count] = weight[e]
                    times[count] = 1
                    count += 1
            node[v, _LENGTH] = 0
            # sort by (weight, vertex) ascending
            if count <= _INSERTION_SORT:
                for i in range(1, count):
                    u, w, c = near[i], near_w[i], times[i]
                    j = i - 1
                    while j >= 0 and (near_w[j] > w or (near_w[j] == w and near[j] > u)):
                        near[j + 1] = near[j]
                        near_w[j + 1] = near_w[j]
                        times[j + 1] = times[j]
                        j -= 1
                    near[j + 1] = u
                    near_w[j + 1] = w
                    times[j + 1] = c
            else:
                by_vertex = np.argsort(near[:count], kind="mergesort")
                by_weight = by_vertex[np.argsort(near_w[:count][by_vertex], kind="mergesort")]
                near[:count] = near[:count][by_weight]
                near_w[:count] = near_w[:count][by_weight]
                times[:count] = times[:count][by_weight]
            big_w = excess[v]
            for i in range(count):
                big_w += near_w[i]
            if big_w <= ZERO_PIVOT * diagonal[v]:
                big_w = 0.0
            pivots[step] = big_w
            if total + count > rows.size:
                rows = with_room(rows, total + count)
                values = with_room(values, total + count)
            for i in range(count):
                u = near[i]
                rows[total + i] = u
                values[total + i] = near_w[i] / big_w if big_w > 0 else 0.0
                node[u, _DEGREE] -= times[i]
            total += count
            step += 1
            colptr[step] = total
            if big_w > 0 and excess[v] > 0:
                for i in range(count):
                    excess[near[i]] += near_w[i] * excess[v] / big_w
            # one sampled edge per neighbour but the last; cumulative weights in near_w
            for i in range(1, count):
                near_w[i] += near_w[i - 1]
            for i in range(count - 1):
                below = near_w[i]
                rest = near_w[count - 1] - below
                own = below - (near_w[i - 1] if i > 0 else 0.0)
                target = below + _next_uniform(state) * rest
                lo, hi = i + 1, count - 1
                while lo < hi:
                    mid = (lo + hi) // 2
                    if near_w[mid] < target:
                        lo = mid + 1
                    else:
                        hi = mid
                a, b = near[i], near[lo]
                new_w = own * rest / big_w
                for end, other in ((a, b), (b, a)):
                    length = node[end, _LENGTH]
                    if length == node[end, _ROOM]:
                        room = 2 * length + _SLACK
                        if used + room + 1 > neighbour.size:
                            used = _compact(node, neighbour, weight, used)
                            if used + room + 1 > 0.75 * neighbour.size:
                                neighbour = with_room(neighbour, int(pool * (used + room + 1)))
                                weight = with_room(weight, neighbour.size)
                        neighbour[used] = end
                        weight[used] = room
                        used += 1
                        start = node[end, _START]
                        kept = used
                        for e in range(start, start + length):
                            if node[neighbour[e], _SEEN] != _GONE:
                                neighbour[kept] = neighbour[e]
                                weight[kept] = weight[e]
                                kept += 1
                        node[end, _START] = used
                        length = kept - used
                        node[end, _ROOM] = room
                        used += room
                    slot = node[end, _START] + length
                    neighbour[slot] = other
                    weight[slot] = new_w
                    node[end, _LENGTH] = length + 1
                    node[end, _DEGREE] += 1
        kept = 0
        for scan in range(n_live):
            if node[live[scan], _SEEN] != _GONE:
                live[kept] = live[scan]
                kept += 1
        n_live = kept
        rnd += 1
    ptr = np.zeros(n + 1, np.int64)
    for v in range(n):
        ptr[v + 1] = ptr[v]
        if node[v, _SEEN] != _GONE:
            start = node[v, _START]
            for e in range(start, start + node[v, _LENGTH]):
                if node[neighbour[e], _SEEN] != _GONE:
                    ptr[v + 1] += 1
    idx = np.empty(ptr[n], np.int32)
    rest = np.empty(ptr[n], np.float64)
    for v in range(n):
        k = ptr[v]
        if node[v, _SEEN] != _GONE:
            start = node[v, _START]
            for e in range(start, start + node[v, _LENGTH]):
                if node[neighbour[e], _SEEN] != _GONE:
                    idx[k] = neighbour[e]
                    rest[k] = weight[e]
                    k += 1
    return (order, colptr, rows[:total].copy(), values[:total].copy(), pivots, excess, ptr, idx,
            rest)


@numba.njit(cache=True, nogil=True)
def sweep_kernel(colptr, rows, values, inverse, r, z):
    """``z = (I - C)^-T D^-1 (I - C)^-1 r`` with ``r`` and ``z`` in elimination order
    (``inverse``: :func:`inverse_pivots`); returns ``r . z`` (formed in the backward sweep)."""
    n = r.size
    for t in range(n):
        z[t] = r[t]
    for t in range(n):
        y = z[t]
        for e in range(colptr[t], colptr[t + 1]):
            z[rows[e]] += values[e] * y
        z[t] = y * inverse[t]
    dot = 0.0
    for t in range(n - 1, -1, -1):
        y = z[t]
        for e in range(colptr[t], colptr[t + 1]):
            y += values[e] * z[rows[e]]
        z[t] = y
        dot += r[t] * y
    return dot


@numba.njit(cache=True, nogil=True)
def permute_kernel(indptr, indices, data, order):
    """The CSR matrix ``A[order][:, order]`` (the system in elimination order)."""
    n = order.size
    position = np.empty(n, np.int64)
    for t in range(n):
        position[order[t]] = t
    ptr = np.zeros(n + 1, np.int64)
    for t in range(n):
        v = order[t]
        ptr[t + 1] = ptr[t] + indptr[v + 1] - indptr[v]
    idx = np.empty(ptr[n], np.int32)
    val = np.empty(ptr[n], np.float64)
    for t in range(n):
        v = order[t]
        k = ptr[t]
        for e in range(indptr[v], indptr[v + 1]):
            idx[k] = position[indices[e]]
            val[k] = data[e]
            k += 1
    return ptr, idx, val


# --------------------------------------------------------------------- plain-Python reference
def _next_uniform_reference(state: list) -> float:
    x = state[0]
    x ^= x >> 12
    x ^= (x << 25) & _MASK
    x ^= x >> 27
    state[0] = x
    return float(((x * _MULTIPLIER) & _MASK) >> 11) * _UNIT


def factor_reference(indptr, indices, weights, excess, seed: int) -> tuple:
    """The same factor as :func:`factor_kernel` with Python lists and dictionaries (small
    graphs; for testing)."""
    n = len(indptr) - 1
    diagonal = [max(float(x), 0.0) for x in excess]
    for v in range(n):
        for e in range(indptr[v], indptr[v + 1]):
            diagonal[v] += float(weights[e])
    order, colptr, rows, values, pivots = eliminate_reference(
        indptr, indices, weights, excess, diagonal, [True] * n, seed)[:5]
    position = {v: t for t, v in enumerate(order)}
    return order, colptr, np.array([position[u] for u in rows], np.int32), values, pivots


def eliminate_reference(indptr, indices, weights, excess, diagonal, eliminable,
                        seed: int) -> tuple:
    """The same as :func:`eliminate_kernel` (with the generator started at
    ``seed_state(seed)``) with Python lists and dictionaries (small graphs; for testing)."""
    n = len(indptr) - 1
    state = [seed_state(seed)]
    lists = [[(int(indices[e]), float(weights[e])) for e in range(indptr[v], indptr[v + 1])]
             for v in range(n)]
    excess = [max(float(x), 0.0) for x in excess]
    degree = [len(edges) for edges in lists]
    eliminated = [False] * n
    order, colptr, rows, values, pivots = [], [0], [], [], []
    live = [v for v in range(n) if eliminable[v]]
    while live:
        capped = sorted(min(degree[v], DEGREE_BINS) for v in live)
        threshold = capped[-(-len(live) * QUANTILE[0] // QUANTILE[1]) - 1]
        touched = set()
        for v in live:
            if v in touched or min(degree[v], DEGREE_BINS) > threshold:
                continue
            eliminated[v] = True
            order.append(v)
            merged: dict = {}
            times: dict = {}
            for u, w in lists[v]:
                if not eliminated[u]:
                    merged[u] = merged[u] + w if u in merged else w
                    times[u] = times.get(u, 0) + 1
            lists[v] = []
            touched.update(merged)
            near = sorted(merged, key=lambda u: (merged[u], u))
            big_w = excess[v]
            for u in near:
                big_w += merged[u]
            if big_w <= ZERO_PIVOT * diagonal[v]:
                big_w = 0.0
            pivots.append(big_w)
            for u in near:
                rows.append(u)
                values.append(merged[u] / big_w if big_w > 0 else 0.0)
                degree[u] -= times[u]
            colptr.append(len(rows))
            if big_w > 0 and excess[v] > 0:
                for u in near:
                    excess[u] += merged[u] * excess[v] / big_w
            cumulative = []
            for u in near:
                cumulative.append(merged[u] + (cumulative[-1] if cumulative else 0.0))
            count = len(near)
            for i in range(count - 1):
                below = cumulative[i]
                rest = cumulative[-1] - below
                own = below - (cumulative[i - 1] if i > 0 else 0.0)
                target = below + _next_uniform_reference(state) * rest
                lo = next((s for s in range(i + 1, count - 1) if cumulative[s] >= target),
                          count - 1)
                a, b = near[i], near[lo]
                new_w = own * rest / big_w
                lists[a].append((b, new_w))
                lists[b].append((a, new_w))
                degree[a] += 1
                degree[b] += 1
        live = [v for v in live if not eliminated[v]]
    remaining = [[(u, w) for u, w in ([] if eliminated[v] else lists[v]) if not eliminated[u]]
                 for v in range(n)]
    return (np.array(order, np.int64), np.array(colptr, np.int64), np.array(rows, np.int32),
            np.array(values, np.float32), np.array(pivots, np.float64), np.array(excess),
            np.cumsum([0] + [len(edges) for edges in remaining]).astype(np.int64),
            np.array([u for edges in remaining for u, _ in edges], np.int32),
            np.array([w for edges in remaining for _, w in edges], np.float64))


def inverse_pivots(pivots) -> np.ndarray:
    """``1 / D`` with the zero pivots of a plain Laplacian's last vertices mapped to 0."""
    pivots = np.asarray(pivots, dtype=np.float64)
    return np.divide(1.0, pivots, out=np.zeros_like(pivots), where=pivots > 0)


def apply_reference(colptr, rows, values, pivots, order, r) -> np.ndarray:
    """``(I - C)^-T D^-1 (I - C)^-1 r`` in the original numbering, by the same loops as
    :func:`sweep_kernel`."""
    n = len(order)
    values = [float(v) for v in values]
    inverse = [float(v) for v in inverse_pivots(pivots)]
    work = [float(r[order[t]]) for t in range(n)]
    for t in range(n):
        for e in range(colptr[t], colptr[t + 1]):
            work[rows[e]] += values[e] * work[t]
        work[t] = work[t] * inverse[t]
    for t in range(n - 1, -1, -1):
        y = work[t]
        for e in range(colptr[t], colptr[t + 1]):
            y += values[e] * work[rows[e]]
        work[t] = y
    out = np.empty(n)
    out[np.asarray(order)] = work
    return out


def factor_matrix(colptr, rows, values, pivots, order) -> sp.csr_matrix:
    """``(I - C) D (I - C)^T`` in the original numbering, for testing."""
    n = len(order)
    cols = np.repeat(np.arange(n), np.diff(colptr))
    unit_lower = sp.identity(n, format="csr") - sp.csr_matrix((values, (rows, cols)), shape=(n, n))
    permuted = unit_lower @ sp.diags(pivots) @ unit_lower.T
    back = np.empty(n, np.int64)
    back[np.asarray(order)] = np.arange(n)
    return sp.csr_matrix(permuted[back][:, back])
