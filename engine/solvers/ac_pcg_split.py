"""The conjugate gradient of ``ac-cg`` in two threads, for a factor made by :mod:`.ac_split`.

In elimination order the unknowns are ``P0``, then ``P1``, then the separator ``S``, and no
matrix or factor entry joins ``P0`` to ``P1``. So each step of the preconditioned conjugate
gradient (Hestenes & Stiefel, 1952; the loop of :func:`.ac_cg.pcg_kernel`, its one-thread
reference) splits into a ``P0`` half and a ``P1`` half run at once (the kernels release the
GIL): the matrix-vector product of their rows, the vector updates, and the factor's forward
sweep over their columns -- each half adds what it sends to ``S`` into its own buffer -- and,
after ``S`` is swept forward and back in one thread, the backward sweep over their columns,
which only reads ``S``. The rows of ``S`` are done in one thread. Partial sums are added in a
fixed order (``P0``, ``P1``, ``S``), so the iterates do not depend on thread timing; they equal
the one-thread loop's to rounding.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np

from .split_cg import direction_kernel, product_dot_kernel


@numba.njit(cache=True, nogil=True)
def step_forward_kernel(alpha, p, q, x, r, colptr, rows, values, inverse, z, buffer, lo, hi,
                        cut):
    """``x += alpha p``, ``r -= alpha q`` on rows ``lo:hi`` and the forward sweep over the
    columns ``lo:hi`` (``z = r`` there first), the updates of rows from ``cut`` on added to
    ``buffer`` (zeroed first); returns the rows' share of ``r . r``."""
    norm2 = 0.0
    for i in range(lo, hi):
        x[i] += alpha * p[i]
        r[i] -= alpha * q[i]
        norm2 += r[i] * r[i]
    buffer[:] = 0.0
    for t in range(lo, hi):
        z[t] = r[t]
    for t in range(lo, hi):
        y = z[t]
        for e in range(colptr[t], colptr[t + 1]):
            k = rows[e]
            if k >= cut:
                buffer[k - cut] += values[e] * y
            else:
                z[k] += values[e] * y
        z[t] = y * inverse[t]
    return norm2


@numba.njit(cache=True, nogil=True)
def separator_kernel(alpha, p, q, x, r, lo):
    """``x += alpha p``, ``r -= alpha q`` on the rows from ``lo`` on; returns their share of
    ``r . r``."""
    norm2 = 0.0
    for i in range(lo, r.size):
        x[i] += alpha * p[i]
        r[i] -= alpha * q[i]
        norm2 += r[i] * r[i]
    return norm2


@numba.njit(cache=True, nogil=True)
def separator_sweep_kernel(colptr, rows, values, inverse, r, z, first, second, lo):
    """Both sweeps over the columns from ``lo`` on (``z = r`` plus both halves' buffers there
    first); returns their share of ``r . z``."""
    n = r.size
    for t in range(lo, n):
        z[t] = r[t] + first[t - lo] + second[t - lo]
    for t in range(lo, n):
        y = z[t]
        for e in range(colptr[t], colptr[t + 1]):
            z[rows[e]] += values[e] * y
        z[t] = y * inverse[t]
    return backward_kernel(colptr, rows, values, r, z, lo, n)


@numba.njit(cache=True, nogil=True)
def backward_kernel(colptr, rows, values, r, z, lo, hi):
    """The backward sweep over the columns ``hi - 1`` down to ``lo``; returns their share of
    ``r . z``."""
    dot = 0.0
    for t in range(hi - 1, lo - 1, -1):
        y = z[t]
        for e in range(colptr[t], colptr[t + 1]):
            y += values[e] * z[rows[e]]
        z[t] = y
        dot += r[t] * y
    return dot


class SplitPcg:
    """The two-thread loop for one factor. ``bounds = (n0, n0 + n1)``: where ``P1`` and ``S``
    start in elimination order."""

    def __init__(self, permuted, colptr, rows, values, inverse, bounds):
        self.permuted = permuted
        self.factor = (colptr, rows, values, inverse)
        self.ranges = ((0, bounds[0]), (bounds[0], bounds[1]))
        self.cut = bounds[1]

    def _both(self, pool, task, *args):
        """``task(*args, lo, hi)`` for both halves at once; the sum of their results,
        ``P0``'s first."""
        other = pool.submit(task, *args, *self.ranges[1])
        mine = task(*args, *self.ranges[0])
        return mine + other.result()

    def _half_step(self, alpha, p, q, x, r, z, buffers, lo, hi):
        buffer = buffers[0] if lo == 0 else buffers[1]
        return step_forward_kernel(alpha, p, q, x, r, *self.factor, z, buffer, lo, hi, self.cut)

    def _precondition(self, pool, alpha, p, q, x, r, z, buffers):
        """The step's vector updates and the forward sweeps but over ``S``; returns
        ``r . r``."""
        norm2 = self._both(pool, self._half_step, alpha, p, q, x, r, z, buffers)
        norm2 += separator_kernel(alpha, p, q, x, r, self.cut)
        return norm2

    def _finish(self, pool, r, z, buffers):
        colptr, rows, values, inverse = self.factor
        rho = separator_sweep_kernel(colptr, rows, values, inverse, r, z, *buffers, self.cut)
        return self._both(pool, backward_kernel, colptr, rows, values, r, z) + rho

    def sweep(self, r) -> np.ndarray:
        """The preconditioner applied to ``r`` (elimination order), as the loop applies it."""
        n = r.size
        r = np.array(r, dtype=np.float64)
        zeros, z = np.zeros(n), np.empty(n)
        buffers = (np.empty(n - self.cut), np.empty(n - self.cut))
        with ThreadPoolExecutor(1) as pool:
            self._precondition(pool, 0.0, zeros, zeros, np.zeros(n), r, z, buffers)
            self._finish(pool, r, z, buffers)
        return z

    def _half_product(self, z, p, q, beta, lo, hi):
        direction_kernel(z, p, beta, lo, hi)
        return product_dot_kernel(*self.permuted, p, q, lo, hi)

    def run(self, b, x, target, max_iterations) -> int:
        """As :func:`.ac_cg.pcg_kernel`: ``x`` updated in place; returns the iterations."""
        n = b.size
        p, q, z, r = np.zeros(n), np.empty(n), np.empty(n), np.array(b, dtype=np.float64)
        buffers = (np.empty(n - self.cut), np.empty(n - self.cut))
        with ThreadPoolExecutor(1) as pool:
            # r = b - A x: q = A x, then the update with alpha = 1 and p = 0
            self._both(pool, product_dot_kernel, *self.permuted, x, q)
            product_dot_kernel(*self.permuted, x, q, self.cut, n)
            norm2 = self._precondition(pool, 1.0, p, q, np.zeros(n), r, z, buffers)
            if np.sqrt(norm2) <= target:
                return 0
            rho = self._finish(pool, r, z, buffers)
            beta = 0.0                                  # p = z
            for iteration in range(1, max_iterations + 1):
                direction_kernel(z, p, beta, self.cut, n)
                pq = self._both(pool, self._half_product, z, p, q, beta)
                pq += product_dot_kernel(*self.permuted, p, q, self.cut, n)
                if pq <= 0.0:
                    return iteration
                alpha = rho / pq
                norm2 = self._precondition(pool, alpha, p, q, x, r, z, buffers)
                if np.sqrt(norm2) <= target:
                    return iteration
                rho_new = self._finish(pool, r, z, buffers)
                beta = rho_new / rho
                rho = rho_new
        return max_iterations
