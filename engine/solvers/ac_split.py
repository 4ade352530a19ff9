"""The approximate Cholesky factor in two threads, by one level of nested dissection.

A vertex separator ``S`` splits the graph into parts ``P0`` and ``P1`` with no edge between
them (A. George, "Nested dissection of a regular finite element mesh", SIAM J. Numer. Anal.
10(2), 1973): ``S`` is the middle level set of a breadth-first search from a pseudo-peripheral
vertex (N. E. Gibbs, W. G. Poole & P. K. Stockmeyer, SIAM J. Numer. Anal. 13(2), 1976), the
level where the count of vertices passes half. Each part is eliminated by
:func:`.ac_factor.eliminate_kernel` on its own subgraph ``P_k + S`` (the separator's own edges
given to neither), with ``S`` kept live; the two run at once in two threads (the kernel releases
the GIL), each on its own random stream, so the factor does not depend on their timing. The
separator's graph -- its own edges, both parts' fill edges among ``S`` and the excess they left
-- is then factored whole. Every step is an elimination step of the same kind as the
single-thread factor's, so the result is an approximate Cholesky factor of the whole matrix in
the order ``P0, P1, S``, used by the same sweeps.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import breadth_first_order

from .ac_factor import _POOL, diagonal_kernel, eliminate_kernel, seed_state

# Fewer unknowns than this are factored in one thread (the split's set-up would not pay).
MIN_UNKNOWNS = 50_000
# Either part smaller than this fraction of the unknowns: one thread.
MIN_SHARE = 0.25
# Offsets of the seeds of P1's and S's random streams from the session's (P0 uses it as is).
SEED_OFFSETS = (0, 1 << 32, 1 << 33)
SEPARATOR = 2


@numba.njit(cache=True, nogil=True)
def levels_kernel(order, predecessors, n):
    """Breadth-first level of each vertex from the search's ``order`` and ``predecessors``
    (-1: not reached)."""
    level = np.full(n, -1, np.int64)
    if order.size:
        level[order[0]] = 0
    for i in range(1, order.size):
        v = order[i]
        level[v] = level[predecessors[v]] + 1
    return level


def split_labels(indptr, indices, weights) -> np.ndarray | None:
    """Per vertex 0 (``P0``), 1 (``P1``) or :data:`SEPARATOR`; None when either part would be
    smaller than :data:`MIN_SHARE` of the vertices. Vertices the search does not reach (other
    connected parts) join ``P0``. ``weights`` (float64, the search ignores them) are passed so
    that SciPy takes the graph as it is: with any other dtype it makes a float64 copy first
    (0.18 against 0.04 s for both searches at 10^6 vertices)."""
    n = indptr.size - 1
    graph = sp.csr_matrix((weights, indices, indptr), shape=(n, n))
    order = breadth_first_order(graph, 0, directed=True, return_predecessors=False)
    order, predecessors = breadth_first_order(graph, int(order[-1]), directed=True)
    level = levels_kernel(order, predecessors, n)
    counts = np.bincount(level[level >= 0])
    middle = int(np.searchsorted(np.cumsum(counts), order.size / 2))
    labels = np.where(level > middle, 1, 0).astype(np.int8)
    labels[level == middle] = SEPARATOR
    shares = np.bincount(labels, minlength=3) / n
    return labels if min(shares[0], shares[1]) >= MIN_SHARE else None


@numba.njit(cache=True, nogil=True)
def part_kernel(indptr, indices, weights, excess, labels, part):
    """The subgraph of ``P_part + S`` (local numbering in vertex order; the edges among ``S``
    left out, and ``S``'s excess zero) or, for ``part == SEPARATOR``, of ``S`` alone with its
    own edges and excess. Returns ``(vertices, ptr, idx, weight, excess)``."""
    n = indptr.size - 1
    local = np.full(n, -1, np.int64)
    m = 0
    size = 0
    for v in range(n):
        if labels[v] == part or labels[v] == SEPARATOR:
            local[v] = m
            m += 1
            for e in range(indptr[v], indptr[v + 1]):
                size += _kept(labels, v, indices[e], part)
    vertices = np.empty(m, np.int64)
    ptr = np.zeros(m + 1, np.int64)
    idx = np.empty(size, np.int32)
    weight = np.empty(size, np.float64)
    out = np.zeros(m, np.float64)
    k = 0
    for v in range(n):
        i = local[v]
        if i < 0:
            continue
        vertices[i] = v
        if labels[v] != SEPARATOR or part == SEPARATOR:
            out[i] = excess[v]
        for e in range(indptr[v], indptr[v + 1]):
            u = indices[e]
            if _kept(labels, v, u, part):
                idx[k] = local[u]
                weight[k] = weights[e]
                k += 1
        ptr[i + 1] = k
    return vertices, ptr, idx, weight, out


@numba.njit(cache=True, nogil=True, inline="always")
def _kept(labels, v, u, part):
    """Whether the edge ``v``-``u`` of a vertex ``v`` of the subgraph belongs to it."""
    if labels[u] != part and labels[u] != SEPARATOR:
        return False
    return part == SEPARATOR or labels[v] != SEPARATOR or labels[u] != SEPARATOR


@numba.njit(cache=True, nogil=True)
def place_kernel(rows, vertices, position, out, start):
    """``out[start:start + rows.size] = position[vertices[rows]]``."""
    for e in range(rows.size):
        out[start + e] = position[vertices[rows[e]]]


def _eliminate_part(graph, labels, diagonal, part, seed):
    vertices, ptr, idx, weight, excess = part_kernel(*graph, labels, part)
    eliminable = labels[vertices] == part
    return (vertices,) + eliminate_kernel(ptr, idx, weight, excess, diagonal[vertices],
                                          eliminable, np.uint64(seed_state(seed)), _POOL)


def _separator_graph(graph, labels, parts):
    """``S``'s graph: its own edges and excess plus what both parts' eliminations left."""
    vertices, ptr, idx, weight, excess = part_kernel(*graph, labels, SEPARATOR)
    where = np.full(labels.size, -1, np.int64)
    where[vertices] = np.arange(vertices.size)
    heads = [np.repeat(np.arange(vertices.size), np.diff(ptr))]
    tails, weights = [idx.astype(np.int64)], [weight]
    for part in parts:
        local, rest, rptr, ridx, rweight = part[0], part[6], part[7], part[8], part[9]
        heads.append(where[local[np.repeat(np.arange(local.size), np.diff(rptr))]])
        tails.append(where[local[ridx]])
        weights.append(rweight)
        keep = labels[local] == SEPARATOR
        excess[where[local[keep]]] += rest[keep]
    heads, tails, weights = np.concatenate(heads), np.concatenate(tails), np.concatenate(weights)
    by_row = np.argsort(heads, kind="stable")
    sptr = np.zeros(vertices.size + 1, np.int64)
    sptr[1:] = np.cumsum(np.bincount(heads, minlength=vertices.size))
    return vertices, sptr, tails[by_row].astype(np.int32), weights[by_row], excess


def split_factor(indptr, indices, weights, excess, labels, seed: int, threads: int = 2) -> tuple:
    """The factor of :func:`.ac_factor.factor_kernel`'s form (``order, colptr, rows, values,
    pivots``) in the order ``P0, P1, S`` of ``labels`` (:func:`split_labels`); the two parts in
    ``threads`` threads (1: one after the other, the same factor)."""
    graph = (indptr, indices, weights, excess)
    diagonal = diagonal_kernel(indptr, weights, excess)
    jobs = [(graph, labels, diagonal, part, seed + SEED_OFFSETS[part]) for part in (0, 1)]
    if threads > 1:
        with ThreadPoolExecutor(1) as pool:
            other = pool.submit(_eliminate_part, *jobs[1])
            parts = [_eliminate_part(*jobs[0]), other.result()]
    else:
        parts = [_eliminate_part(*job) for job in jobs]
    vertices, sptr, sidx, sweight, sexcess = _separator_graph(graph, labels, parts)
    last = eliminate_kernel(sptr, sidx, sweight, sexcess, diagonal[vertices],
                            np.ones(vertices.size, np.bool_),
                            np.uint64(seed_state(seed + SEED_OFFSETS[SEPARATOR])), _POOL)
    steps = [(part[0], *part[1:6]) for part in parts] + [(vertices, *last[:5])]
    order = np.concatenate([local[o] for local, o, *_ in steps])
    position = np.empty(order.size, np.int64)
    position[order] = np.arange(order.size)
    offsets = np.cumsum([0] + [step[2][-1] for step in steps])
    rows = np.empty(offsets[-1], np.int32)
    for k, (local, _, _, local_rows, *_) in enumerate(steps):
        place_kernel(local_rows, local, position, rows, offsets[k])
    colptr = np.concatenate([[0]] + [step[2][1:] + offsets[k] for k, step in enumerate(steps)])
    values = np.concatenate([step[4] for step in steps])
    pivots = np.concatenate([step[5] for step in steps])
    return order, colptr.astype(np.int64), rows, values, pivots
