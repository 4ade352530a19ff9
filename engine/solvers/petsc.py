"""``petsc``: conjugate gradient preconditioned by hypre's BoomerAMG, through PETSc.

PETSc (S. Balay et al., *PETSc/TAO Users Manual*, ANL-21/39, Argonne National Laboratory) through
petsc4py (L. Dalcin et al., "Parallel distributed computing using Python", Adv. Water Resour.
34(9), 2011). Conjugate gradient (Hestenes & Stiefel, 1952) preconditioned by one V-cycle of
BoomerAMG, the parallel classical algebraic multigrid of hypre (V. E. Henson & U. M. Yang,
"BoomerAMG: a parallel algebraic multigrid solver and preconditioner", Appl. Numer. Math. 41(1),
2002). Where PETSc was built without hypre, PETSc's own smoothed-aggregation multigrid GAMG
(M. F. Adams et al., "Ultrascalable implicit finite element analyses in solid mechanics with over
a half a billion degrees of freedom", SC 2004) takes its place.

The same configuration (:func:`configure_ksp`) serves one process (:class:`PetscSolver`, behind
:class:`~.base.SPDSolver`) and a distributed matrix (:mod:`ohmgraph.engine.distributed`).
``petsc4py`` is imported only when a PETSc solver is set up, so it stays out of every other run.
"""

from __future__ import annotations

import numpy as np

from .base import SPDSolver

MAX_ITERATIONS = 1000


def petsc_module():
    """``petsc4py.PETSc`` (initialising PETSc, and MPI with it, on first use)."""
    from petsc4py import PETSc

    return PETSc


def configure_ksp(ksp, rtol: float) -> str:
    """Make ``ksp`` conjugate gradient with a BoomerAMG (else GAMG) preconditioner.

    Convergence is judged on the true (unpreconditioned) residual ``||b - A x|| / ||b||`` at half
    of ``rtol`` (the recurrence drifts from the true residual, which the caller checks).

    Returns
    -------
    str
        The preconditioner used: ``"hypre-boomeramg"`` or ``"gamg"``.
    """
    PETSc = petsc_module()
    ksp.setType(PETSc.KSP.Type.CG)
    ksp.setNormType(PETSc.KSP.NormType.UNPRECONDITIONED)
    ksp.setTolerances(rtol=0.5 * rtol, atol=0.0, max_it=MAX_ITERATIONS)
    pc = ksp.getPC()
    if PETSc.Sys.hasExternalPackage("hypre"):
        pc.setType(PETSc.PC.Type.HYPRE)
        pc.setHYPREType("boomeramg")
        return "hypre-boomeramg"
    pc.setType(PETSc.PC.Type.GAMG)
    return "gamg"


class PetscSolver(SPDSolver):
    """CG + BoomerAMG (GAMG without hypre) through PETSc on this process alone."""

    method = "petsc"
    worker_thread = False           # PETSc and MPI calls stay on the main thread

    def _setup(self) -> None:
        PETSc = petsc_module()
        csr = self.matrix
        n = csr.shape[0]
        self._comm = PETSc.COMM_SELF
        self._matrix = PETSc.Mat().createAIJ(
            size=(n, n), csr=(csr.indptr.astype(PETSc.IntType),
                              csr.indices.astype(PETSc.IntType), csr.data), comm=self._comm)
        self._matrix.assemble()
        self._ksp = PETSc.KSP().create(comm=self._comm)
        self._ksp.setOperators(self._matrix)
        self.preconditioner_name = configure_ksp(self._ksp, self.rtol)
        if n:
            self._ksp.setUp()

    def preconditioner(self, matrix=None):
        """One application of the PETSc preconditioner (BoomerAMG or GAMG) as a linear operator;
        ``matrix`` is not folded in."""
        import scipy.sparse.linalg as spla

        pc = self._ksp.getPC()
        n = self.matrix.shape[0]

        def apply(v):
            x, y = self._matrix.createVecRight(), self._matrix.createVecLeft()
            x.setArray(np.ascontiguousarray(v, dtype=np.float64).ravel())
            pc.apply(x, y)
            out = y.getArray().copy()
            x.destroy()
            y.destroy()
            return out

        return spla.LinearOperator((n, n), matvec=apply, dtype=np.float64)

    def _solve_column(self, b: np.ndarray, x0=None) -> tuple[np.ndarray, int]:
        if not np.any(b):
            return np.zeros_like(b), 0
        rhs, x = self._matrix.createVecRight(), self._matrix.createVecLeft()
        rhs.setArray(b)
        self._ksp.setInitialGuessNonzero(x0 is not None)
        if x0 is not None:
            x.setArray(np.ascontiguousarray(x0, dtype=np.float64))
        self._ksp.solve(rhs, x)
        result = x.getArray().copy()
        iterations = self._ksp.getIterationNumber()
        rhs.destroy()
        x.destroy()
        return result, iterations

    def _solve(self, b, x0=None):
        if b.ndim == 1:
            return self._solve_column(b, x0)
        columns = [self._solve_column(np.ascontiguousarray(b[:, j]),
                                      None if x0 is None else x0[:, j])
                   for j in range(b.shape[1])]
        return (np.column_stack([c[0] for c in columns]),
                max((c[1] for c in columns), default=0))

    def __del__(self):
        for handle in ("_ksp", "_matrix"):
            if hasattr(self, handle):
                getattr(self, handle).destroy()
