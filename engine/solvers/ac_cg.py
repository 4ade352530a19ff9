"""``ac-cg``: conjugate gradient preconditioned by a randomised approximate Cholesky factor.

The factor is :mod:`.ac_factor`'s approximate Gaussian elimination (Kyng & Sachdeva, FOCS 2016;
the "AC" variant of Gao, Kyng & Spielman, 2023: merged multi-edges, least-degree order); the
conjugate gradient loop (Hestenes & Stiefel, 1952) runs in numba, with the preconditioner
applied in elimination order. The factor is seeded (:attr:`AcCgSolver.seed`), so a run repeats
exactly: the same matrix, seed and right-hand side give the same iterates.
"""

from __future__ import annotations

import numba
import numpy as np
import scipy.sparse.linalg as spla

from .ac_factor import apply_kernel, factor_kernel, inverse_pivots, seed_state, split_kernel
from .base import DEFAULT_RTOL, SPDSolver

DEFAULT_SEED = 1


@numba.njit(cache=True, nogil=True)
def _matvec(indptr, indices, data, x, out):
    for i in range(indptr.size - 1):
        total = 0.0
        for e in range(indptr[i], indptr[i + 1]):
            total += data[e] * x[indices[e]]
        out[i] = total


@numba.njit(cache=True, nogil=True)
def pcg_kernel(indptr, indices, data, colptr, rows, values, pivots, order, b, x, target,
               max_iterations):
    """Preconditioned conjugate gradient from ``x`` (updated in place) until the recurrence
    residual norm is at most ``target``; returns the iterations made."""
    n = b.size
    r = np.empty(n)
    z = np.empty(n)
    p = np.empty(n)
    q = np.empty(n)
    work = np.empty(n)
    _matvec(indptr, indices, data, x, q)
    norm2 = 0.0
    for i in range(n):
        r[i] = b[i] - q[i]
        norm2 += r[i] * r[i]
    if np.sqrt(norm2) <= target:
        return 0
    apply_kernel(colptr, rows, values, pivots, order, r, z, work)
    rho = 0.0
    for i in range(n):
        p[i] = z[i]
        rho += r[i] * z[i]
    for iteration in range(1, max_iterations + 1):
        _matvec(indptr, indices, data, p, q)
        pq = 0.0
        for i in range(n):
            pq += p[i] * q[i]
        if pq <= 0.0:
            return iteration
        alpha = rho / pq
        norm2 = 0.0
        for i in range(n):
            x[i] += alpha * p[i]
            r[i] -= alpha * q[i]
            norm2 += r[i] * r[i]
        if np.sqrt(norm2) <= target:
            return iteration
        apply_kernel(colptr, rows, values, pivots, order, r, z, work)
        rho_new = 0.0
        for i in range(n):
            rho_new += r[i] * z[i]
        beta = rho_new / rho
        rho = rho_new
        for i in range(n):
            p[i] = z[i] + beta * p[i]
    return max_iterations


class AcCgSolver(SPDSolver):
    """Conjugate gradient preconditioned by a seeded approximate Cholesky factor.

    For a symmetric matrix with nonpositive off-diagonal entries and a nonnegative diagonal
    excess (a grounded Laplacian, as :func:`ohmgraph.engine.formulation.assemble` builds); the
    session's residual check and fallback cover any other input.

    Parameters
    ----------
    matrix, rtol
        As :class:`~.base.SPDSolver`.
    seed : int
        Seed of the factor's random stream (default :data:`DEFAULT_SEED`); the session stores
        it in its statistics.

    Attributes
    ----------
    seed : int
    factor_nonzeros : int
        Entries of the factor's strictly lower part.
    """

    method = "ac-cg"
    max_iterations = 1000

    def __init__(self, matrix, rtol: float = DEFAULT_RTOL, seed: int = DEFAULT_SEED):
        self.seed = int(seed)
        super().__init__(matrix, rtol)

    def _setup(self) -> None:
        n = self.matrix.shape[0]
        self._indptr = self.matrix.indptr
        self._indices = self.matrix.indices
        self._data = self.matrix.data
        if n == 0:
            self.factor_nonzeros = 0
            return
        self.matrix.sort_indices()
        indptr, indices, weights, excess, _ = split_kernel(self._indptr, self._indices, self._data)
        (self._order, self._colptr, self._rows, self._values,
         pivots) = factor_kernel(indptr, indices, weights, excess,
                                 np.uint64(seed_state(self.seed)))
        self._pivots = inverse_pivots(pivots)
        self.factor_nonzeros = int(self._rows.size)

    def apply(self, r: np.ndarray) -> np.ndarray:
        """The preconditioner applied to one vector."""
        r = np.ascontiguousarray(r, dtype=np.float64)
        out = np.empty_like(r)
        apply_kernel(self._colptr, self._rows, self._values, self._pivots, self._order, r, out,
                     np.empty_like(r))
        return out

    def preconditioner(self, matrix=None) -> spla.LinearOperator:
        """The factor as an approximate inverse (of its own matrix; a nearby ``matrix`` is
        preconditioned by the same factor)."""
        n = self.matrix.shape[0]
        return spla.LinearOperator((n, n), matvec=self.apply, dtype=np.float64)

    def _solve_column(self, b, x0=None):
        if not np.any(b):
            return np.zeros_like(b), 0
        x = np.zeros_like(b) if x0 is None else np.array(x0, dtype=np.float64)
        norm_b = float(np.linalg.norm(b))
        iterations = 0
        # Recurrence residual to half the target, then check the true one (they drift apart);
        # a second round restarts from the current iterate when the true one falls short.
        for _ in range(2):
            iterations += pcg_kernel(self._indptr, self._indices, self._data, self._colptr,
                                     self._rows, self._values, self._pivots, self._order,
                                     b, x, 0.5 * self.rtol * norm_b,
                                     self.max_iterations - iterations)
            if (np.linalg.norm(self.matrix @ x - b) <= self.rtol * norm_b
                    or iterations >= self.max_iterations):
                break
        return x, iterations

    def _solve(self, b, x0=None):
        b = np.ascontiguousarray(b, dtype=np.float64)
        if b.ndim == 1:
            return self._solve_column(b, x0)
        columns = [self._solve_column(np.ascontiguousarray(b[:, j]),
                                      None if x0 is None else x0[:, j])
                   for j in range(b.shape[1])]
        return (np.column_stack([c[0] for c in columns]),
                max((c[1] for c in columns), default=0))
