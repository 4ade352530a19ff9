"""Solvers for the symmetric positive-definite reduced system, behind one small interface.

A solver is built once for a matrix (factorisation or multigrid hierarchy) and then solves any
number of right-hand sides, one vector or a block of columns, returning the solution and a
:class:`SolveInfo` with what it did. New back ends (a distributed one, say) implement
:class:`SPDSolver` and register in :data:`SOLVERS`; nothing else changes.

* ``direct``: sparse LU factorisation by SuperLU (Li, ACM TOMS 31(3), 2005) through
  :func:`scipy.sparse.linalg.splu`, with a minimum-degree ordering of ``A^T + A`` and diagonal
  pivoting, which suits a symmetric positive-definite matrix.
* ``amg-cg``: conjugate gradient (Hestenes & Stiefel, 1952) preconditioned by one V-cycle of
  classical (Ruge–Stüben) algebraic multigrid (J. W. Ruge & K. Stüben, "Algebraic multigrid",
  in *Multigrid Methods*, SIAM Frontiers in Applied Mathematics 3, 1987) from pyamg.

Both set up and solve with the BLAS limited to one thread (threadpoolctl). Conjugate gradient
calls BLAS dot products on vectors of 10^4 to 10^6 entries; OpenBLAS splits each of them over
threads, and on two busy cores that made whole solves 3 to 20 times slower (the core type
OpenBLAS picks made no difference); SuperLU's block solves gain too. Numbers in
``benchmarks/README.md``.
"""

from __future__ import annotations

import functools
import time
from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from threadpoolctl import ThreadpoolController

DEFAULT_RTOL = 1e-10
# ``auto`` picks direct up to this many unknowns. Set-up plus one solve (benchmarks/README.md):
# direct wins on lattices below about 40,000 unknowns and on k-nearest-neighbour graphs up to
# about 200,000; in between it costs at most about 0.5 s more, and it makes every further
# right-hand side (readings, sensitivities, resistances) a cheap pair of triangular solves.
AUTO_DIRECT_LIMIT = 100_000
DIRECT_FALLBACK_LIMIT = 2_000_000
DIRECT_RESIDUAL_LIMIT = 1e-8


@functools.cache
def _blas_threads():
    """One controller of the loaded BLAS libraries (cheap to apply once built)."""
    return ThreadpoolController()


def single_threaded_blas():
    """Context manager that limits every loaded BLAS library to one thread."""
    return _blas_threads().limit(limits=1, user_api="blas")


class SolverFailed(RuntimeError):
    """The solve did not reach the requested accuracy and no fallback applied."""


@dataclass(frozen=True)
class SolveInfo:
    """What one solve did.

    Attributes
    ----------
    method : str
        ``"direct"`` or ``"amg-cg"``.
    iterations : int
        Conjugate-gradient iterations (the largest over a block); 0 for ``direct``.
    relative_residual : float
        ``max_j ||A x_j - b_j|| / ||b_j||`` measured after the solve.
    converged : bool
        ``relative_residual <= rtol`` (always True for ``direct`` unless the matrix is singular).
    setup_seconds, solve_seconds : float
    """

    method: str
    iterations: int
    relative_residual: float
    converged: bool
    setup_seconds: float
    solve_seconds: float


def shortfall(info: SolveInfo, rtol: float) -> str:
    """Why a solve missed its target, in words: the residual reached, or the overflow that
    left no finite residual (values beyond the double-precision range)."""
    text = (f"{info.method} solve ended at relative residual {info.relative_residual:.3g} "
            f"(rtol {rtol:g})")
    if not np.isfinite(info.relative_residual):
        text += ("; the values overflow double precision (IEEE 754 binary64): rescale them, "
                 "for example to other units")
    return text


def relative_residual(matrix, x: np.ndarray, b: np.ndarray) -> float:
    """``max_j ||A x_j - b_j|| / ||b_j||`` over the columns (0 for a zero right-hand side)."""
    num = np.linalg.norm(matrix @ x - b, axis=0)
    den = np.linalg.norm(b, axis=0)
    ratio = np.where(den > 0, num / np.where(den > 0, den, 1.0), num)
    return float(np.max(ratio)) if np.size(ratio) else 0.0


class SPDSolver(ABC):
    """Set up once for a symmetric positive-definite matrix, solve many right-hand sides."""

    method: str = ""

    def __init__(self, matrix, rtol: float = DEFAULT_RTOL):
        self.matrix = sp.csr_matrix(matrix)
        self.rtol = float(rtol)
        start = time.perf_counter()
        with single_threaded_blas():
            self._setup()
        self.setup_seconds = time.perf_counter() - start

    @abstractmethod
    def _setup(self) -> None:
        """Factorise or build the preconditioner."""

    @abstractmethod
    def _solve(self, b: np.ndarray) -> tuple[np.ndarray, int]:
        """Solve for a 1-D or 2-D right-hand side; return the solution and iteration count."""

    def solve(self, b: np.ndarray) -> tuple[np.ndarray, SolveInfo]:
        """Solve ``A x = b`` for one column (shape ``(n,)``) or a block (shape ``(n, r)``)."""
        b = np.asarray(b, dtype=np.float64)
        start = time.perf_counter()
        if self.matrix.shape[0] == 0:
            x, iterations = np.zeros_like(b), 0
        else:
            with single_threaded_blas():
                x, iterations = self._solve(b)
        elapsed = time.perf_counter() - start
        residual = relative_residual(self.matrix, x, b) if b.size else 0.0
        target = max(self.rtol, DIRECT_RESIDUAL_LIMIT) if self.method == "direct" else self.rtol
        converged = bool(np.isfinite(residual) and residual <= target)
        return x, SolveInfo(self.method, iterations, residual, converged,
                            self.setup_seconds, elapsed)


class DirectSolver(SPDSolver):
    """Sparse LU (SuperLU) with a symmetric fill-reducing ordering."""

    method = "direct"

    def _setup(self) -> None:
        if self.matrix.shape[0] == 0:
            self._lu = None
            return
        self._lu = spla.splu(self.matrix.tocsc(), permc_spec="MMD_AT_PLUS_A",
                             diag_pivot_thresh=0.0, options={"SymmetricMode": True})

    @property
    def factors(self):
        """The SuperLU factorisation (``L``, ``U``, ``perm_r``, ``perm_c``), or None when empty;
        for callers that exploit the factors' sparsity (:mod:`ohmgraph.engine.reach`)."""
        return self._lu

    def _solve(self, b):
        # One call for a block. With the BLAS on one thread a Fortran-ordered block beats column
        # by column (16 columns of a 490,000-unknown lattice: 1.1 s against 1.4 s; 64: 4.9 s
        # against 6.8 s); with OpenBLAS threads on busy cores it lost 2-3x (benchmarks/README.md).
        return self._lu.solve(np.asfortranarray(b)), 0


class AmgCgSolver(SPDSolver):
    """Conjugate gradient preconditioned by a classical (Ruge–Stüben) AMG V-cycle (pyamg).

    Settings, chosen by measurement on grounded Laplacians (a 1000 x 1000 lattice, a three-layer
    mesh, a k-nearest-neighbour graph and the IBM power-grid benchmark pg1; benchmarks/README.md):

    * classical strength of connection with threshold 0.25 and Ruge–Stüben C/F splitting with
      its second pass, which makes every pair of strongly connected fine points share a coarse
      point (Ruge & Stüben 1987); without it pg1, whose conductances span four
      decades, needs 49 iterations instead of 13;
    * direct interpolation and Galerkin coarse operators ``P^T A P``;
    * one forward Gauss–Seidel sweep before and one backward sweep after each coarse correction,
      which makes the V-cycle a symmetric positive-definite preconditioner as CG needs;
    * sparse LU on the coarsest level (at most ``max_coarse`` unknowns).
    """

    method = "amg-cg"
    max_iterations = 500
    max_coarse = 500

    def _setup(self) -> None:
        import pyamg

        if self.matrix.shape[0] == 0:
            return
        self._hierarchy = pyamg.ruge_stuben_solver(
            self.matrix, strength=("classical", {"theta": 0.25}),
            CF=("RS", {"second_pass": True}), interpolation="direct",
            presmoother=("gauss_seidel", {"sweep": "forward"}),
            postsmoother=("gauss_seidel", {"sweep": "backward"}),
            max_coarse=self.max_coarse, coarse_solver="splu")
        self._preconditioner = self._hierarchy.aspreconditioner(cycle="V")

    def _solve_column(self, b):
        count = [0]

        def tally(_):
            count[0] += 1

        if not np.any(b):
            return np.zeros_like(b), 0
        # Ask CG for half the target: its recurrence residual drifts from the true one.
        x, _ = spla.cg(self.matrix, b, rtol=0.5 * self.rtol, atol=0.0, maxiter=self.max_iterations,
                       M=self._preconditioner, callback=tally)
        return x, count[0]

    def _solve(self, b):
        if b.ndim == 1:
            return self._solve_column(b)
        columns = [self._solve_column(b[:, j]) for j in range(b.shape[1])]
        return (np.column_stack([c[0] for c in columns]),
                max((c[1] for c in columns), default=0))


SOLVERS = {"direct": DirectSolver, "amg-cg": AmgCgSolver}


def choose_method(n_unknowns: int, method: str = "auto") -> str:
    """Resolve ``"auto"``: direct below :data:`AUTO_DIRECT_LIMIT` unknowns, else ``amg-cg``."""
    if method == "auto":
        return "direct" if n_unknowns <= AUTO_DIRECT_LIMIT else "amg-cg"
    if method not in SOLVERS:
        raise ValueError(f"unknown method {method!r} (expected auto, {', '.join(SOLVERS)})")
    return method


def make_solver(matrix, method: str = "auto", rtol: float = DEFAULT_RTOL) -> SPDSolver:
    """Build (set up) the solver for ``matrix``; ``method`` is ``auto``, ``direct`` or ``amg-cg``."""
    return SOLVERS[choose_method(matrix.shape[0], method)](matrix, rtol)


def solve_with_fallback(matrix, b, method: str = "auto", rtol: float = DEFAULT_RTOL):
    """Solve ``A x = b``; if an iterative solve misses ``rtol``, fall back to ``direct``.

    Returns
    -------
    x : ndarray
    info : SolveInfo
    solver : SPDSolver
        The solver that produced ``x`` (reusable for further right-hand sides).
    notes : list of str
        What happened (for example a fallback).

    Raises
    ------
    SolverFailed
        When the iterative solve did not converge and the system is too large
        (over :data:`DIRECT_FALLBACK_LIMIT` unknowns) for the direct fallback, or when the direct
        solve itself is inaccurate.
    """
    solver = make_solver(matrix, method, rtol)
    x, info = solver.solve(b)
    notes = []
    if not info.converged and solver.method != "direct":
        if matrix.shape[0] > DIRECT_FALLBACK_LIMIT:
            raise SolverFailed(
                f"{solver.method} stopped at relative residual {info.relative_residual:.3g} after "
                f"{info.iterations} iterations (rtol {rtol:g}); the system ({matrix.shape[0]} "
                "unknowns) is too large for the direct fallback")
        notes.append(f"{solver.method} reached relative residual {info.relative_residual:.3g} "
                     f"after {info.iterations} iterations; fell back to direct")
        solver = DirectSolver(matrix, rtol)
        x, info = solver.solve(b)
    if not info.converged:
        raise SolverFailed(shortfall(info, rtol))
    return x, info, solver, notes


def solve_spd(A, b, rtol: float = DEFAULT_RTOL, method: str = "auto") -> np.ndarray:
    """Solve a symmetric positive-definite sparse system ``A x = b``.

    The same path :func:`ohmgraph.engine.solve` takes, exposed so benchmarks can compare it with
    other solvers on one matrix.

    Parameters
    ----------
    A : sparse matrix, shape (n, n)
    b : ndarray, shape (n,) or (n, r)
    rtol : float
        Relative residual target ``||A x - b|| / ||b||`` for iterative methods.
    method : {"auto", "direct", "amg-cg"}
    """
    return solve_with_fallback(A, b, method, rtol)[0]
