"""Symbolic analysis of a sparse Cholesky factor: fill-reducing ordering, elimination tree and
column counts, without computing a single numerical entry.

For a symmetric positive-definite matrix ``A`` and a symmetric permutation ``P`` the Cholesky
factor ``L`` of ``P A Pᵀ`` is determined, entry by entry, by the sparsity pattern alone. Its
number of entries ``nnz(L)`` says how much memory a factorisation needs, and the number of
floating-point operations of a column-oriented factorisation, ``Σ_j colcount_j²`` (counting
each multiply-add once; George & Liu, *Computer Solution of Large Sparse Positive Definite
Systems*, 1981, §2.2), how long it takes.

* :func:`fill_reducing_order`: approximate minimum degree (AMD; Amestoy, Davis & Duff, SIAM J.
  Matrix Anal. Appl. 17(4), 886-905, 1996) from SuiteSparse, through CVXOPT.
* :func:`column_counts`: the elimination tree (Liu, ACM TOMS 12(2), 127-148, 1986, with path
  compression), its postorder, and the column counts of ``L`` by the algorithm of Gilbert, Ng &
  Peyton (SIAM J. Matrix Anal. Appl. 15(4), 1075-1091, 1994) in the formulation of
  T. A. Davis, *Direct Methods for Sparse Linear Systems* (SIAM 2006), §4.5. All three run in
  ``O(nnz(A) α(n))`` time, far below ``O(nnz(L))``, so the analysis stays cheap however badly
  the factor fills in. These are numba kernels; :func:`column_counts_reference` computes the
  same by plain set unions along the tree (symbolic factorisation, George & Liu §5.4) for
  testing them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
import scipy.sparse as sp


@dataclass(frozen=True)
class FactorAnalysis:
    """The predicted Cholesky factor of ``P A Pᵀ``.

    Attributes
    ----------
    order : ndarray of int64
        ``order[k]`` is the unknown eliminated ``k``-th (``P A Pᵀ = A[order][:, order]``).
    column_counts : ndarray of int64
        Entries of each column of ``L`` (the diagonal included).
    factor_nonzeros : int
        ``nnz(L)``, the diagonal included.
    flops : float
        ``Σ_j colcount_j²``: multiply-adds of the factorisation.
    """

    order: np.ndarray
    column_counts: np.ndarray
    factor_nonzeros: int
    flops: float


def _permuted_pattern(matrix, order: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``indptr, indices`` of the pattern of ``P A Pᵀ`` (``A[order][:, order]``) for a matrix
    with a symmetric pattern: its rows are also its columns, so the result serves as CSC."""
    rows = sp.csr_matrix(matrix)[order]
    inverse = np.empty_like(order)
    inverse[order] = np.arange(order.size)
    return rows.indptr.astype(np.int64), inverse[rows.indices]


def fill_reducing_order(matrix) -> np.ndarray:
    """Approximate minimum degree ordering of the symmetric pattern of ``matrix`` (its lower
    triangle is read).

    SuiteSparse AMD through :func:`cvxopt.amd.order` (Amestoy, Davis & Duff 1996).

    Returns
    -------
    ndarray of int64
        ``order[k]`` is the unknown eliminated ``k``-th.
    """
    n = matrix.shape[0]
    if n == 0:
        return np.zeros(0, np.int64)
    from cvxopt import amd, matrix as cvx_matrix, spmatrix

    lower = sp.tril(matrix, format="coo")
    pattern = spmatrix(1.0, cvx_matrix(lower.row.astype(np.int64)),
                       cvx_matrix(lower.col.astype(np.int64)), (n, n))
    return np.asarray(amd.order(pattern, "L"), np.int64).reshape(-1)


@numba.njit(cache=True)
def elimination_tree(indptr, indices):
    """Parent of each column in the elimination tree of a symmetric pattern (CSC, both
    triangles, indices in any order within a column); -1 for a root. Liu's algorithm with path
    compression (Davis 2006, §4.1)."""
    n = indptr.size - 1
    parent = np.full(n, -1, np.int64)
    ancestor = np.full(n, -1, np.int64)
    for k in range(n):
        for p in range(indptr[k], indptr[k + 1]):
            i = indices[p]
            while i != -1 and i < k:
                following = ancestor[i]
                ancestor[i] = k
                if following == -1:
                    parent[i] = k
                i = following
    return parent


@numba.njit(cache=True)
def postorder(parent):
    """A postorder of the forest ``parent`` (children before parents; Davis 2006, §4.3)."""
    n = parent.size
    head = np.full(n, -1, np.int64)
    following = np.full(n, -1, np.int64)
    for j in range(n - 1, -1, -1):
        if parent[j] != -1:
            following[j] = head[parent[j]]
            head[parent[j]] = j
    post = np.empty(n, np.int64)
    stack = np.empty(n, np.int64)
    k = 0
    for root in range(n):
        if parent[root] != -1:
            continue
        top = 0
        stack[0] = root
        while top >= 0:
            p = stack[top]
            child = head[p]
            if child == -1:
                top -= 1
                post[k] = p
                k += 1
            else:
                head[p] = following[child]
                top += 1
                stack[top] = child
    return post


@numba.njit(cache=True)
def _counts_from_tree(indptr, indices, parent, post):
    """Column counts of ``L`` (diagonal included): Gilbert, Ng & Peyton 1994 as ``cs_counts``
    in Davis 2006, §4.5, for a symmetric pattern given by both triangles (CSC)."""
    n = parent.size
    delta = np.zeros(n, np.int64)
    first = np.full(n, -1, np.int64)
    maxfirst = np.full(n, -1, np.int64)
    prevleaf = np.full(n, -1, np.int64)
    ancestor = np.arange(n)
    for k in range(n):                       # first descendant of each node, leaves get 1
        j = post[k]
        delta[j] = 1 if first[j] == -1 else 0
        while j != -1 and first[j] == -1:
            first[j] = k
            j = parent[j]
    for k in range(n):
        j = post[k]
        if parent[j] != -1:
            delta[parent[j]] -= 1            # j is not a root
        for p in range(indptr[j], indptr[j + 1]):
            i = indices[p]
            if i <= j or first[j] <= maxfirst[i]:
                continue                     # j is not a leaf of row i's subtree
            maxfirst[i] = first[j]
            previous = prevleaf[i]
            prevleaf[i] = j
            delta[j] += 1                    # A(i, j) is in the skeleton matrix
            if previous != -1:               # a later leaf: remove the overlap at the LCA q
                q = previous
                while q != ancestor[q]:
                    q = ancestor[q]
                s = previous
                while s != q:                # path compression
                    following = ancestor[s]
                    ancestor[s] = q
                    s = following
                delta[q] -= 1
        if parent[j] != -1:
            ancestor[j] = parent[j]
    for j in range(n):                       # children before parents: parent[j] > j
        if parent[j] != -1:
            delta[parent[j]] += delta[j]
    return delta


def column_counts(matrix, order: np.ndarray | None = None) -> FactorAnalysis:
    """Predict the Cholesky factor of ``matrix`` in the elimination order ``order``.

    Parameters
    ----------
    matrix : sparse matrix, shape (n, n)
        With a symmetric pattern (only the pattern counts).
    order : ndarray of int, optional
        Elimination order; by default :func:`fill_reducing_order`.
    """
    if order is None:
        order = fill_reducing_order(matrix)
    order = np.asarray(order, np.int64)
    indptr, indices = _permuted_pattern(matrix, order)
    parent = elimination_tree(indptr, indices)
    counts = _counts_from_tree(indptr, indices, parent, postorder(parent))
    return FactorAnalysis(order, counts, int(counts.sum()),
                          float(np.square(counts, dtype=np.float64).sum()))


def column_counts_reference(matrix, order: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Plain reference for :func:`column_counts`: the elimination tree and column counts by
    symbolic factorisation with Python sets (George & Liu 1981, §5.4).

    The pattern of column ``j`` of ``L`` is that of column ``j`` of ``A`` below the diagonal,
    joined with the patterns of its children's columns (less the child itself); the parent is
    the first entry below the diagonal.

    Returns
    -------
    parent, counts : ndarray of int64
    """
    pattern = sp.csc_matrix(matrix)[order][:, order]
    n = pattern.shape[0]
    columns = [set(int(i) for i in pattern.indices[pattern.indptr[j]:pattern.indptr[j + 1]]
                   if i > j) for j in range(n)]
    parent = np.full(n, -1, np.int64)
    counts = np.zeros(n, np.int64)
    for j in range(n):
        below = columns[j]
        counts[j] = len(below) + 1
        if below:
            parent[j] = min(below)
            columns[parent[j]] |= below - {parent[j]}
    return parent, counts
