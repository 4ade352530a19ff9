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

from . import ac_split
from .ac_factor import (factor_kernel, inverse_pivots, permute_kernel, seed_state, split_kernel,
                        sweep_kernel)
from .ac_pcg_split import SplitPcg
from .base import DEFAULT_RTOL, SPDSolver, column_by_column

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
    threads : int or None
        2: factor a system of at least :data:`.ac_split.MIN_UNKNOWNS` unknowns in two threads
        (:mod:`.ac_split`; another factor of the same kind, in another order) when its graph
        splits evenly; 1: always one thread. None (default): 2 when numba may use two threads
        (``numba.config.NUMBA_NUM_THREADS``, which the command line sets to 1 under an
        address-space limit, where every thread reserves its stack and malloc arena).

    Attributes
    ----------
    seed : int
    split : bool
        Whether the factor was made in two threads.
    factor_nonzeros : int
        Entries of the factor's strictly lower part.
    """

    method = "ac-cg"
    max_iterations = 1000

    def __init__(self, matrix, rtol: float = DEFAULT_RTOL, seed: int = DEFAULT_SEED,
                 threads: int | None = None):
        self.seed = int(seed)
        self.threads = self.default_threads() if threads is None else int(threads)
        super().__init__(matrix, rtol)

    @staticmethod
    def default_threads() -> int:
        """Threads used when none are asked for: 2, or 1 where numba may use only one (the
        command line sets that under an address-space limit)."""
        return min(2, numba.config.NUMBA_NUM_THREADS)

    def _setup(self) -> None:
        self.factor_nonzeros = 0
        self.split = False
        self._split_pcg = None
        if self.matrix.shape[0] == 0:
            return
        matrix = self.matrix
        parts = split_kernel(matrix.indptr, matrix.indices, matrix.data)[:4]
        labels = None
        if self.threads > 1 and matrix.shape[0] >= ac_split.MIN_UNKNOWNS:
            labels = ac_split.split_labels(*parts[:3])
        if labels is not None:
            self.split = True
            (self._order, self._colptr, self._rows, self._values,
             pivots) = ac_split.split_factor(*parts, labels, self.seed, self.threads)
        else:
            (self._order, self._colptr, self._rows, self._values,
             pivots) = factor_kernel(*parts, np.uint64(seed_state(self.seed)))
        del parts
        self._inverse = inverse_pivots(pivots)
        self._permuted = permute_kernel(matrix.indptr, matrix.indices, matrix.data, self._order)
        if self.split:
            sizes = np.bincount(labels, minlength=2)
            self._split_pcg = SplitPcg(self._permuted, self._colptr, self._rows, self._values,
                                       self._inverse, (sizes[0], sizes[0] + sizes[1]))
        self.factor_nonzeros = int(self._rows.size)

    def apply(self, r: np.ndarray) -> np.ndarray:
        """The preconditioner applied to one vector (in the original numbering)."""
        r = np.ascontiguousarray(r, dtype=np.float64)[self._order]
        if self._split_pcg is not None:
            z = self._split_pcg.sweep(r)
        else:
            z = np.empty(r.shape[0])
            sweep_kernel(self._colptr, self._rows, self._values, self._inverse, r, z)
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
            target, budget = 0.8 * self.rtol * norm_b, self.max_iterations - iterations
            if self._split_pcg is not None:
                iterations += self._split_pcg.run(bp, xp, target, budget)
            else:
                iterations += pcg_kernel(*self._permuted, self._colptr, self._rows,
                                         self._values, self._inverse, bp, xp, target, budget)
            x = np.empty_like(xp)
            x[order] = xp
            if (np.linalg.norm(self.matrix @ x - b) <= self.rtol * norm_b
                    or iterations >= self.max_iterations):
                break
        return x, iterations

    def _solve(self, b, x0=None):
        b = np.ascontiguousarray(b, dtype=np.float64)
        return column_by_column(self._solve_column, b, x0)
