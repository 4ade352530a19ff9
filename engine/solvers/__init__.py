"""Solvers for the symmetric positive-definite reduced system, one module per back end.

:mod:`.base` holds the interface (:class:`SPDSolver`: set up once, solve many right-hand sides),
:data:`SOLVERS` registers the back ends by name, and :mod:`.choice` decides what ``auto`` means
for a given matrix and query. Callers never use a back end directly: they go through
:class:`ohmgraph.engine.session.SolveSession`, which owns the choice, the convergence check and
the fallback.

* ``direct`` (:mod:`.direct`): sparse LU by SuperLU;
* ``amg-cg`` (:mod:`.amg_cg`): conjugate gradient preconditioned by classical AMG (pyamg);
* ``ac-cg`` (:mod:`.ac_cg`): conjugate gradient preconditioned by a seeded randomised
  approximate Cholesky factor (numba), for grounded Laplacians;
* ``petsc`` (:mod:`.petsc`): conjugate gradient preconditioned by hypre's BoomerAMG through
  PETSc, registered only when petsc4py is installed (``make mpi``); it is never imported before a
  PETSc solver is set up.
"""

from __future__ import annotations

import importlib.util

from .ac_cg import AcCgSolver
from .amg_cg import AmgCgSolver
from .base import (DEFAULT_RTOL, DIRECT_RESIDUAL_LIMIT, SolveInfo, SolverFailed, SPDSolver,
                   relative_residual, shortfall, single_threaded_blas)
from .direct import DirectSolver
from .petsc import PetscSolver

SOLVERS = {"direct": DirectSolver, "amg-cg": AmgCgSolver, "ac-cg": AcCgSolver}
# Optional back ends that are known but cannot run here: name -> why (for example a library that
# is not installed). Tests list them as skipped, with the reason.
UNAVAILABLE: dict[str, str] = {}
if importlib.util.find_spec("petsc4py") is not None:
    SOLVERS["petsc"] = PetscSolver
else:
    UNAVAILABLE["petsc"] = "petsc4py is not installed (make mpi installs it)"

__all__ = ["SPDSolver", "SolveInfo", "SolverFailed", "DirectSolver", "AmgCgSolver", "AcCgSolver",
           "PetscSolver",
           "SOLVERS",
           "UNAVAILABLE", "DEFAULT_RTOL", "DIRECT_RESIDUAL_LIMIT", "relative_residual", "shortfall",
           "single_threaded_blas"]
