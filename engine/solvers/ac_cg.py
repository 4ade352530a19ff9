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

from .ac_factor import (factor_kernel, inverse_pivots, permute_kernel, seed_state, split_kernel,
                        sweep_kernel)
from .base import DEFAULT_RTOL, SPDSolver

DEFAULT_SEED = 1


@numba.njit(cache=True, nogil=True)
def pcg_kernel(indptr, indices, data, colptr, rows, values, inverse, b, x, target,
               max_iterations):
    """Preconditioned conjugate gradient from ``x`` (updated in place) until the recurrence
    residual norm is at most ``target``; returns the iterations made. The matrix, ``b`` and
    ``x`` are in elimination order, so the factor's sweeps need no gather or scatter."""
    n = b.size
    r = np.empty(n)
    z = np.empty(n)
    p = np.empty(n)
    norm2 = 0.0
    for i in range(n):
        total = 0.0
        for e in range(indptr[i], indptr[i + 1]):
            total += data[e] * x[indices[e]]
        r[i] = b[i] - total
        norm2 += r[i] * r[i]
    if np.sqrt(norm2) <= target:
        return 0
    rho = sweep_kernel(colptr, rows, values, inverse, r, z)
    for i in range(n):
        p[i] = z[i]
    q = z                                   # z is free until the next sweep
    for iteration in range(1, max_iterations + 1):
        pq = 0.0
        for i in range(n):
            total = 0.0
            for e in range(indptr[i], indptr[i + 1]):
                total += data[e] * p[indices[e]]
            q[i] = total
            pq += p[i] * total
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
        rho_new = sweep_kernel(colptr, rows, values, inverse, r, z)
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
        self.factor_nonzeros = 0
        if self.matrix.shape[0] == 0:
            return
        matrix = self.matrix
        parts = split_kernel(matrix.indptr, matrix.indices, matrix.data)[:4]
        (self._order, self._colptr, self._rows, self._values,
         pivots) = factor_kernel(*parts, np.uint64(seed_state(self.seed)))
        del parts
        self._inverse = inverse_pivots(pivots)
        self._permuted = permute_kernel(matrix.indptr, matrix.indices, matrix.data, self._order)
        self.factor_nonzeros = int(self._rows.size)

    def apply(self, r: np.ndarray) -> np.ndarray:
        """The preconditioner applied to one vector (in the original numbering)."""
        z = np.empty(r.shape[0])
        sweep_kernel(self._colptr, self._rows, self._values, self._inverse,
                     np.ascontiguousarray(r, dtype=np.float64)[self._order], z)
        out = np.empty_like(z)
        out[self._order] = z
        return out

    def preconditioner(self, matrix=None) -> spla.LinearOperator:
        """The factor as an approximate inverse (of its own matrix; a nearby ``matrix`` is
        preconditioned by the same factor)."""
        n = self.matrix.shape[0]
        return spla.LinearOperator((n, n), matvec=self.apply, dtype=np.float64)

    def _solve_column(self, b, x0=None):
        if not np.any(b):
            return np.zeros_like(b), 0
        order = self._order
        bp = b[order]
        xp = np.zeros_like(b) if x0 is None else np.asarray(x0, dtype=np.float64)[order]
        norm_b = float(np.linalg.norm(b))
        iterations = 0
        # Recurrence residual to 0.8 of the target, then check the true one (they drift apart);
        # a second round restarts from the current iterate when the true one falls short.
        for _ in range(2):
            iterations += pcg_kernel(*self._permuted, self._colptr, self._rows, self._values,
                                     self._inverse, bp, xp, 0.8 * self.rtol * norm_b,
                                     self.max_iterations - iterations)
            x = np.empty_like(xp)
            x[order] = xp
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
