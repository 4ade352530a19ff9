"""Preconditioned conjugate gradient with its vector work in two threads.

The loop of preconditioned conjugate gradient (Hestenes & Stiefel, 1952; Saad, *Iterative
Methods for Sparse Linear Systems*, 2nd ed., SIAM 2003, Algorithm 9.1), as SciPy's ``cg`` runs
it, with the matrix-vector product, the vector updates and the inner products fused into three
kernels that each run on two blocks of rows at once (the kernels release the GIL): ``q = A p``
with ``p . q``; ``x += alpha p``, ``r -= alpha q`` with ``r . r``; and ``p = z + beta p``
after ``r . z``. A matrix under :data:`SPLIT_MIN_NONZEROS` entries, or any where numba is held to one thread,
runs in one block, in this thread. Each block's partial sums are added in a fixed order, so the iterates do not depend on
thread timing. On a 1000 x 1000 lattice the work around the preconditioner fell from 8 ms to
3 ms per iteration (benchmarks/README.md).

Each kernel is tested against the same operation in NumPy and SciPy (tests/test_split_cg.py).
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np

from .amg_cycle import SPLIT_MIN_NONZEROS, halves, two_threads


# ------------------------------------------------------------------------------------ kernels
@numba.njit(cache=True, nogil=True)
def product_dot_kernel(indptr, indices, data, p, q, lo, hi):
    """``q = A p`` on rows ``lo:hi``; returns their share of ``p . q``."""
    pq = 0.0
    for i in range(lo, hi):
        total = 0.0
        for entry in range(np.uint64(indptr[i]), np.uint64(indptr[i + 1])):
            total += data[entry] * p[np.uint64(indices[entry])]
        q[i] = total
        pq += p[i] * total
    return pq


@numba.njit(cache=True, nogil=True)
def update_kernel(alpha, p, q, x, r, lo, hi):
    """``x += alpha p`` and ``r -= alpha q`` on rows ``lo:hi``; returns their share of
    ``r . r``."""
    rr = 0.0
    for i in range(lo, hi):
        x[i] += alpha * p[i]
        r[i] -= alpha * q[i]
        rr += r[i] * r[i]
    return rr


@numba.njit(cache=True, nogil=True)
def dot_kernel(u, v, lo, hi):
    """Rows ``lo:hi``'s share of ``u . v``."""
    total = 0.0
    for i in range(lo, hi):
        total += u[i] * v[i]
    return total


@numba.njit(cache=True, nogil=True)
def direction_kernel(z, p, beta, lo, hi):
    """``p = z + beta p`` on rows ``lo:hi``."""
    for i in range(lo, hi):
        p[i] = z[i] + beta * p[i]


# -------------------------------------------------------------------------------- the loop
class _Blocks:
    """Runs a kernel on every block, the second in a helper thread; adds the returned partial
    sums in block order."""

    def __init__(self, blocks, helper):
        self.blocks, self.helper = blocks, helper

    def run(self, kernel, *args) -> float | None:
        if len(self.blocks) == 1:
            return kernel(*args, *self.blocks[0])
        other = self.helper.submit(kernel, *args, *self.blocks[1])
        first = kernel(*args, *self.blocks[0])
        second = other.result()
        return None if first is None else first + second


def conjugate_gradient(A, b, precondition, *, x0=None, target: float,
                       max_iterations: int, callback=None) -> tuple[np.ndarray, int]:
    """Solve ``A x = b`` (CSR, symmetric positive definite) by preconditioned CG.

    Parameters
    ----------
    A : scipy.sparse.csr_matrix
    b : ndarray, shape (n,)
    precondition : callable
        ``z = precondition(r)``, a symmetric positive definite approximate inverse.
    x0 : ndarray, optional
        Starting point (zero by default); not modified.
    target : float
        Stop when the recurrence residual ``||r||`` is at most this (absolute).
    max_iterations : int
    callback : callable, optional
        Called with the iterate after every iteration (as SciPy's ``cg`` does).

    Returns
    -------
    x : ndarray
    iterations : int
        Iterations run (the last one may have stopped short of ``target``: the caller measures
        the true residual). A residual that is not finite (a start or a matrix holding NaN or
        infinity) ends the loop at once instead of after ``max_iterations``.
    """
    n = b.size
    blocks = halves(A.indptr) if A.nnz >= SPLIT_MIN_NONZEROS and two_threads() else ((0, n),)
    x = np.zeros(n) if x0 is None else np.array(x0, dtype=np.float64)
    q = np.empty(n)
    with ThreadPoolExecutor(1) as helper:
        run = _Blocks(blocks, helper).run
        indptr, indices, data = A.indptr, A.indices, A.data
        if x0 is None:
            r = np.array(b, dtype=np.float64)
        else:
            run(product_dot_kernel, indptr, indices, data, x, q)
            r = b - q
        norm = math.sqrt(run(dot_kernel, r, r))
        if norm <= target or not math.isfinite(norm):      # done, or nothing to iterate on
            return x, 0
        z = np.asarray(precondition(r), dtype=np.float64).ravel()
        p = z.copy()
        rz = run(dot_kernel, r, z)
        for iteration in range(1, max_iterations + 1):
            pq = run(product_dot_kernel, indptr, indices, data, p, q)
            alpha = rz / pq
            rr = run(update_kernel, alpha, p, q, x, r)
            if callback is not None:
                callback(x)
            if math.sqrt(rr) <= target or not math.isfinite(rr):
                return x, iteration
            z = np.asarray(precondition(r), dtype=np.float64).ravel()
            rz_next = run(dot_kernel, r, z)
            run(direction_kernel, z, p, rz_next / rz)
            rz = rz_next
    return x, max_iterations
