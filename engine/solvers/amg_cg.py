"""``amg-cg``: conjugate gradient preconditioned by classical algebraic multigrid.

Conjugate gradient (Hestenes & Stiefel, 1952) preconditioned by one V-cycle of classical
(Ruge–Stüben) algebraic multigrid (J. W. Ruge & K. Stüben, "Algebraic multigrid", in *Multigrid
Methods*, SIAM Frontiers in Applied Mathematics 3, 1987) from pyamg.

The hierarchy can be kept (:meth:`AmgCgSolver.export_setup`: every level's interpolation
``P_k`` and coarse operator ``A_k``, ``k >= 1``, as CSR arrays; ``R_k = P_k^T``) and rebuilt
in another process (``AmgCgSolver(matrix, rtol, kept=...)``) as a pyamg ``MultilevelSolver``
assembled from its levels, the coarsest refactorised; the finest level is the matrix given,
so a nearby matrix (the same network with some resistor values changed) gets the cycle of
:meth:`AmgCgSolver.preconditioner` with that matrix.
"""

from __future__ import annotations

import copy

import numpy as np
import scipy.sparse as sp

from .amg_cycle import VCycle
from .base import DEFAULT_RTOL, SPDSolver, column_by_column
from .split_cg import conjugate_gradient
from .kept import KeptSetup

# The settings a kept hierarchy must have been built with (they decide its levels and how
# the cycle uses them); stored with it.
SETTINGS = {"coarsening": "Ruge-Stueben, second pass", "strength": "classical",
            "theta": 0.25, "interpolation": "direct", "presmoother": "gauss_seidel forward",
            "postsmoother": "gauss_seidel backward", "coarse_solver": "splu", "max_coarse": 500,
            "cycle": "V"}


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
      which makes the V-cycle a symmetric positive-definite preconditioner as CG needs; on
      levels of 200,000 entries or more whose rows split into two weakly joined blocks the
      sweeps are hybrid (Gauss–Seidel inside each block, in two threads; :mod:`.amg_cycle`):
      27 ms instead of 44 ms per cycle on a 1000 x 1000 lattice, 9 CG iterations instead of 8
      at rtol 1e-8;
    * sparse LU on the coarsest level (at most ``max_coarse`` unknowns).

    Parameters
    ----------
    matrix : sparse matrix
    rtol : float
    kept : KeptSetup, optional
        A hierarchy from :meth:`export_setup` to rebuild instead of setting up (its finest
        level becomes ``matrix``); the caller has checked that it fits ``matrix``
        (:func:`~ohmgraph.engine.solvers.kept.mismatch`).
    """

    method = "amg-cg"
    keeps_setup = True
    settings = SETTINGS
    max_iterations = 500
    # A rebuilt hierarchy that needs more iterations than this serves worse than a new set-up
    # (a fresh one needs 10 to 20 at rtol 1e-10 to 1e-12 on the benchmark lattices).
    kept_max_iterations = 100
    max_coarse = SETTINGS["max_coarse"]

    def __init__(self, matrix, rtol: float = DEFAULT_RTOL, *, kept: KeptSetup | None = None):
        if kept is not None and (kept.method != self.method or kept.settings != SETTINGS):
            raise ValueError(f"a kept {kept.method} set-up with settings {kept.settings} cannot "
                             f"serve {self.method} with {SETTINGS}")
        self._kept = kept
        if kept is not None:
            self.max_iterations = self.kept_max_iterations
        super().__init__(matrix, rtol)

    def _setup(self) -> None:
        import pyamg

        if self.matrix.shape[0] == 0:
            return
        if self._kept is not None:
            self._hierarchy = _rebuilt(self.matrix, self._kept.arrays)
            self._kept = None          # its arrays now belong to the hierarchy
        else:
            self._hierarchy = pyamg.ruge_stuben_solver(
                self.matrix, strength=("classical", {"theta": SETTINGS["theta"]}),
                CF=("RS", {"second_pass": True}), interpolation="direct",
                presmoother=("gauss_seidel", {"sweep": "forward"}),
                postsmoother=("gauss_seidel", {"sweep": "backward"}),
                max_coarse=self.max_coarse, coarse_solver="splu")
        self._cycle = VCycle(self._hierarchy)
        self._preconditioner = self._cycle.operator()

    def export_setup(self) -> KeptSetup:
        """The hierarchy as plain arrays (without a fingerprint: the session adds it):
        ``sizes`` (unknowns per level), and for every level ``k`` but the finest
        ``A{k}/data``, ``A{k}/indices``, ``A{k}/indptr`` and for every level but the coarsest
        ``P{k}/...`` (CSR, ``P_k`` of shape ``sizes[k] x sizes[k+1]``)."""
        levels = self._hierarchy.levels if self.matrix.shape[0] else []
        arrays = {"sizes": np.array([level.A.shape[0] for level in levels], np.int64)}
        for k, level in enumerate(levels):
            for name, operator in (("A", level.A if k else None),
                                   ("P", getattr(level, "P", None) if k < len(levels) - 1
                                    else None)):
                if operator is not None:
                    operator = sp.csr_matrix(operator)
                    for part in ("data", "indices", "indptr"):
                        arrays[f"{name}{k}/{part}"] = getattr(operator, part)
        return KeptSetup(self.method, dict(SETTINGS), arrays)

    def preconditioner(self, matrix=None):
        """One V-cycle of the hierarchy; for a nearby ``matrix``, the same cycle with the
        finest level's operator (its smoothing and residual) replaced by ``matrix`` while the
        interpolation and coarse levels stay: on a lattice with 1 % of its resistors changed
        by up to 2x, CG from the old solution needed 7 iterations instead of 12 with the old
        cycle (benchmarks/README.md)."""
        if matrix is None:
            return self._preconditioner
        hierarchy = copy.copy(self._hierarchy)
        hierarchy.levels = list(hierarchy.levels)
        finest = copy.copy(hierarchy.levels[0])
        finest.A = sp.csr_matrix(matrix)
        hierarchy.levels[0] = finest
        return VCycle(hierarchy).operator()

    def _solve_column(self, b, x0=None):
        if not np.any(b):
            return np.zeros_like(b), 0
        # Ask CG for half the target: its recurrence residual drifts from the true one.
        return conjugate_gradient(self.matrix, b, self._cycle, x0=x0,
                                  target=0.5 * self.rtol * float(np.linalg.norm(b)),
                                  max_iterations=self.max_iterations)

    def _solve(self, b, x0=None):
        try:
            return column_by_column(self._solve_column, b, x0)
        finally:
            self._cycle.release()          # the cycle's work vectors, until the next solve


def _rebuilt(matrix, arrays: dict):
    """A pyamg ``MultilevelSolver`` from :meth:`AmgCgSolver.export_setup`'s arrays, with
    ``matrix`` on the finest level, the same smoothers and an LU of the coarsest level.

    Raises
    ------
    ValueError
        When the arrays do not make a hierarchy for ``matrix`` (sizes that do not chain).
    """
    import pyamg
    from pyamg.relaxation.smoothing import change_smoothers

    sizes = [int(n) for n in arrays["sizes"]]
    if not sizes or sizes[0] != matrix.shape[0]:
        raise ValueError(f"the kept hierarchy starts at {sizes[:1]} unknowns, the matrix has "
                         f"{matrix.shape[0]}")

    def csr(name, shape):
        operator = sp.csr_matrix((arrays[f"{name}/data"], arrays[f"{name}/indices"],
                                  arrays[f"{name}/indptr"]), shape=shape)
        operator.check_format(full_check=True)      # indices in range: pyamg's kernels trust them
        return operator

    levels = []
    for k, n in enumerate(sizes):
        level = pyamg.MultilevelSolver.Level()
        level.A = sp.csr_matrix(matrix) if k == 0 else csr(f"A{k}", (n, n))
        if k < len(sizes) - 1:
            level.P = csr(f"P{k}", (n, sizes[k + 1]))
            level.R = level.P.T.tocsr()
        levels.append(level)
    hierarchy = pyamg.MultilevelSolver(levels, coarse_solver=SETTINGS["coarse_solver"])
    change_smoothers(hierarchy, ("gauss_seidel", {"sweep": "forward"}),
                     ("gauss_seidel", {"sweep": "backward"}))
    return hierarchy
