"""The V-cycle of ``amg-cg``, its large levels smoothed and multiplied in two threads.

One V-cycle of a pyamg hierarchy from a zero start: on every level but the coarsest a forward
Gauss–Seidel sweep, the residual restricted (``R = P^T``), the coarse correction interpolated
(``P``) and a backward sweep; a sparse LU on the coarsest level. It is the cycle of pyamg's
``MultilevelSolver.aspreconditioner(cycle="V")`` without what pyamg's ``solve`` adds around it
(two residual norms and a product with the finest matrix per application).

A level with at least :data:`SPLIT_MIN_NONZEROS` entries is split into two blocks of rows of
about equal entries, each handled by one thread (the kernels release the GIL): products and
residuals row by row, and *hybrid* Gauss–Seidel — Gauss–Seidel inside each block, Jacobi
between them, the coupling to the other block taken from the values before the sweep (Baker,
Falgout, Kolev & Yang, "Multigrid smoothers for ultraparallel computing", SIAM J. Sci. Comput.
33(5), 2011). The forward sweep is ``x += (D + L_in)^{-1} (b - A x)`` and the backward one its
transpose, so the cycle stays symmetric. A level is split only when

* the entries joining the blocks are at most :data:`SPLIT_MAX_COUPLING` of the level's (rows
  numbered with locality, as lattices and meshes are; a random numbering would turn the
  smoother into Jacobi), and
* every row's diagonal exceeds the sum of its entries' magnitudes into the other block. Then
  ``M + M^T - A = D - A_between`` is positive definite (``M = D + L_in``), which makes the
  sweep a convergent smoother in the energy norm and the cycle positive definite, as
  conjugate gradient needs (the condition of Baker et al. 2011, sect. 3; recalled from
  memory).

Otherwise, and wherever numba is held to one thread (:func:`two_threads`), the level runs in one
thread with the same kernels, which give pyamg's sweep and
SciPy's products bit for bit (tested). Partial results never cross threads within a step and
the coupling is read before the sweep, so the cycle does not depend on thread timing. Each
kernel has a plain-Python twin (``*_reference``) that it is tested against.
"""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np
import scipy.sparse.linalg as spla

# Levels smaller than this stay in one thread: a thread hand-over costs tens of microseconds,
# a sweep over 200,000 entries about 0.3 ms.
SPLIT_MIN_NONZEROS = 200_000
# Largest share of a level's entries that may join its two blocks.
SPLIT_MAX_COUPLING = 0.01


# ------------------------------------------------------------------------------------ kernels
@numba.njit(cache=True, nogil=True)
def sweep_kernel(indptr, indices, data, x, b, coupling, lo, hi, forward):
    """One Gauss–Seidel sweep over rows ``lo:hi`` (forward or backward), using only the
    columns inside ``lo:hi``; ``coupling[i]`` is row ``i``'s product with the columns outside
    (zero where it has none). Rows with a zero diagonal are left alone (as pyamg does)."""
    width = np.uint64(hi - lo)
    first = np.uint64(lo)
    for step in range(hi - lo):
        i = lo + step if forward else hi - 1 - step
        row_sum = 0.0
        diagonal = 0.0
        for entry in range(np.uint64(indptr[i]), np.uint64(indptr[i + 1])):
            j = np.uint64(indices[entry])
            if j == i:
                diagonal = data[entry]
            elif j - first < width:
                row_sum += data[entry] * x[j]
        if diagonal != 0.0:
            x[i] = (b[i] - coupling[i] - row_sum) / diagonal


@numba.njit(cache=True, nogil=True)
def coupling_kernel(rows, indptr, indices, data, x, coupling, lo, hi):
    """``coupling[i]`` = row ``i``'s product with ``x`` over the columns outside ``lo:hi``,
    for the given ``rows``."""
    width = np.uint64(hi - lo)
    first = np.uint64(lo)
    for i in rows:
        total = 0.0
        for entry in range(np.uint64(indptr[i]), np.uint64(indptr[i + 1])):
            j = np.uint64(indices[entry])
            if j - first >= width:
                total += data[entry] * x[j]
        coupling[i] = total


@numba.njit(cache=True, nogil=True)
def product_kernel(indptr, indices, data, x, y, b, lo, hi, mode):
    """Rows ``lo:hi`` of a product: ``y = M x`` (mode 0), ``y = b - M x`` (1), ``y += M x``
    (2). Each row's sum is formed first, in the order of its entries, as SciPy does."""
    for i in range(lo, hi):
        total = 0.0
        for entry in range(np.uint64(indptr[i]), np.uint64(indptr[i + 1])):
            total += data[entry] * x[np.uint64(indices[entry])]
        if mode == 0:
            y[i] = total
        elif mode == 1:
            y[i] = b[i] - total
        else:
            y[i] += total


# ------------------------------------------------------------------------ plain references
def sweep_reference(indptr, indices, data, x, b, coupling, lo, hi, forward):
    """:func:`sweep_kernel` in plain Python."""
    rows = range(lo, hi) if forward else range(hi - 1, lo - 1, -1)
    for i in rows:
        row_sum, diagonal = 0.0, 0.0
        for entry in range(indptr[i], indptr[i + 1]):
            j = indices[entry]
            if j == i:
                diagonal = data[entry]
            elif lo <= j < hi:
                row_sum += data[entry] * x[j]
        if diagonal != 0.0:
            x[i] = (b[i] - coupling[i] - row_sum) / diagonal


def coupling_reference(rows, indptr, indices, data, x, coupling, lo, hi):
    """:func:`coupling_kernel` in plain Python."""
    for i in rows:
        coupling[i] = sum((data[e] * x[indices[e]] for e in range(indptr[i], indptr[i + 1])
                           if not lo <= indices[e] < hi), 0.0)


def product_reference(indptr, indices, data, x, y, b, lo, hi, mode):
    """:func:`product_kernel` in plain Python."""
    for i in range(lo, hi):
        total = 0.0
        for entry in range(indptr[i], indptr[i + 1]):
            total += data[entry] * x[indices[entry]]
        y[i] = total if mode == 0 else b[i] - total if mode == 1 else y[i] + total


# ------------------------------------------------------------------------------- the split
def two_threads() -> bool:
    """Whether a second thread may run kernels: not where numba is held to one thread (the
    command line does that under an address-space limit, where every thread reserves memory)."""
    return numba.config.NUMBA_NUM_THREADS >= 2


def halves(indptr) -> tuple:
    """Row ranges ``(0, mid), (mid, n)`` of about equal entries."""
    n = indptr.size - 1
    mid = int(np.searchsorted(indptr, indptr[-1] // 2))
    return (0, mid), (mid, n)


def split_rows(A) -> tuple | None:
    """The two row blocks of level matrix ``A`` (CSR) and the rows of each that reach into
    the other, or None when the level should stay in one thread (see the module notes)."""
    if A.nnz < SPLIT_MIN_NONZEROS or not two_threads():
        return None
    blocks = halves(A.indptr)
    mid, split_at = blocks[1][0], int(A.indptr[blocks[1][0]])
    crossing = np.concatenate([np.flatnonzero(A.indices[:split_at] >= mid),
                               split_at + np.flatnonzero(A.indices[split_at:] < mid)])
    if crossing.size > SPLIT_MAX_COUPLING * A.nnz:
        return None
    rows = np.searchsorted(A.indptr, crossing, side="right") - 1
    between = np.bincount(rows, np.abs(A.data[crossing]), minlength=A.shape[0])
    boundary = np.unique(rows)
    if np.any(A.diagonal()[boundary] <= between[boundary]):
        return None
    return blocks, (boundary[boundary < mid], boundary[boundary >= mid])


class _Level:
    """One level's operators (CSR) and its split (None: one thread)."""

    def __init__(self, level, coarsest: bool):
        self.A = level.A.tocsr()
        self.split = split_rows(self.A)
        self.blocks = self.split[0] if self.split else ((0, self.A.shape[0]),)
        if not coarsest:
            self.R, self.P = level.R.tocsr(), level.P.tocsr()
            self.R_blocks = halves(self.R.indptr) if self.split else ((0, self.R.shape[0]),)
            self.P_blocks = halves(self.P.indptr) if self.split else ((0, self.P.shape[0]),)
        self.release()

    def allocate(self) -> None:
        """Work vectors for the cycles of one solve (each cycle writes into them)."""
        if self.x is None and hasattr(self, "R"):
            self.coupling = np.zeros(self.A.shape[0])
            self.x = np.zeros(self.A.shape[0])
            self.residual = np.zeros(self.A.shape[0])
            self.restricted = np.zeros(self.R.shape[0])

    def release(self) -> None:
        self.coupling = self.x = self.residual = self.restricted = None


class VCycle:
    """One V-cycle of a pyamg hierarchy from a zero start (see the module notes).

    Parameters
    ----------
    hierarchy : pyamg.MultilevelSolver
        Made with Gauss–Seidel smoothing; only its levels' ``A``, ``R``, ``P`` and its coarse
        solver are used.
    """

    def __init__(self, hierarchy):
        levels = hierarchy.levels
        self._levels = [_Level(level, k == len(levels) - 1) for k, level in enumerate(levels)]
        self._coarse_solver = hierarchy.coarse_solver
        self.split_levels = sum(level.split is not None for level in self._levels[:-1])
        # the levels' work vectors serve one cycle at a time (a solve abandoned by an interrupt
        # may still be cycling in its worker thread when the next one starts)
        self._lock = threading.Lock()

    def operator(self) -> spla.LinearOperator:
        """The cycle as a SciPy linear operator (the preconditioner of ``scipy`` CG)."""
        finest = self._levels[0].A
        return spla.LinearOperator(finest.shape, matvec=self, dtype=finest.dtype)

    def __call__(self, b) -> np.ndarray:
        b = np.ravel(np.asarray(b, dtype=np.float64))
        levels = self._levels
        if len(levels) == 1:
            return np.asarray(self._coarse_solver(levels[0].A, b)).ravel()
        with self._lock, ThreadPoolExecutor(1) as helper:
            for level in levels:
                level.allocate()
            return self._cycle(b, helper)

    def release(self) -> None:
        """Free the work vectors until the next cycle (between solves: at 9 x 10^6 unknowns
        they hold 0.3 GB, which would otherwise stay alive beside the recovered currents)."""
        with self._lock:
            for level in self._levels:
                level.release()

    @staticmethod
    def _both(helper, kernel, blocks, arguments):
        """``kernel(*arguments(block))`` for every block, the second in the helper thread."""
        if len(blocks) == 1:
            kernel(*arguments(blocks[0]))
            return
        other = helper.submit(kernel, *arguments(blocks[1]))
        kernel(*arguments(blocks[0]))
        other.result()

    def _sweep(self, helper, level, x, b, forward):
        """Forward from a zero start (no coupling yet), or backward from the current ``x``."""
        A = level.A
        if level.split:
            for (lo, hi), rows in zip(*level.split):
                if forward:
                    level.coupling[rows] = 0.0
                else:
                    coupling_kernel(rows, A.indptr, A.indices, A.data, x, level.coupling, lo, hi)
        self._both(helper, sweep_kernel, level.blocks, lambda block: (
            A.indptr, A.indices, A.data, x, b, level.coupling, *block, forward))

    def _product(self, helper, M, blocks, x, y, b, mode):
        self._both(helper, product_kernel, blocks, lambda block: (
            M.indptr, M.indices, M.data, x, y, b, *block, mode))

    def _cycle(self, b, helper):
        levels = self._levels
        rights = [b]
        for level in levels[:-1]:           # down: smooth from zero, restrict the residual
            x, right = level.x, rights[-1]
            x[:] = 0.0
            self._sweep(helper, level, x, right, True)
            self._product(helper, level.A, level.blocks, x, level.residual, right, 1)
            self._product(helper, level.R, level.R_blocks, level.residual, level.restricted,
                          level.restricted, 0)
            rights.append(level.restricted)
        coarse = np.asarray(self._coarse_solver(levels[-1].A, rights[-1])).ravel()
        for k in range(len(levels) - 2, -1, -1):     # up: interpolate the correction, smooth
            level = levels[k]
            self._product(helper, level.P, level.P_blocks, coarse, level.x, level.x, 2)
            self._sweep(helper, level, level.x, rights[k], False)
            coarse = level.x
        return coarse.copy()
