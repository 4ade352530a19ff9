"""Solvers for the symmetric positive-definite reduced system, one module per back end.

:mod:`.base` holds the interface (:class:`SPDSolver`: set up once, solve many right-hand sides)
and :data:`SOLVERS` registers the back ends by name:

* ``direct`` (:mod:`.direct`): sparse LU by SuperLU;
* ``amg-cg`` (:mod:`.amg_cg`): conjugate gradient preconditioned by classical AMG (pyamg);
* ``petsc`` (:mod:`.petsc`): conjugate gradient preconditioned by hypre's BoomerAMG through
  PETSc, registered only when petsc4py is installed (``make mpi``); it is never imported before a
  PETSc solver is set up.
"""

from __future__ import annotations

import importlib.util

from .amg_cg import AmgCgSolver
from .base import (DEFAULT_RTOL, DIRECT_RESIDUAL_LIMIT, SolveInfo, SolverFailed, SPDSolver,
                   relative_residual, shortfall, single_threaded_blas)
from .direct import DirectSolver
from .petsc import PetscSolver

# ``auto`` picks direct up to this many unknowns. Set-up plus one solve (benchmarks/README.md):
# direct wins on lattices below about 40,000 unknowns and on k-nearest-neighbour graphs up to
# about 200,000; in between it costs at most about 0.5 s more, and it makes every further
# right-hand side (readings, sensitivities, resistances) a cheap pair of triangular solves.
AUTO_DIRECT_LIMIT = 100_000
DIRECT_FALLBACK_LIMIT = 2_000_000
SOLVERS = {"direct": DirectSolver, "amg-cg": AmgCgSolver}
if importlib.util.find_spec("petsc4py") is not None:
    SOLVERS["petsc"] = PetscSolver


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


__all__ = ["SPDSolver", "SolveInfo", "SolverFailed", "DirectSolver", "AmgCgSolver", "SOLVERS",
           "DEFAULT_RTOL", "DIRECT_RESIDUAL_LIMIT", "AUTO_DIRECT_LIMIT", "DIRECT_FALLBACK_LIMIT",
           "choose_method", "make_solver", "solve_with_fallback", "solve_spd",
           "relative_residual", "shortfall", "single_threaded_blas"]
