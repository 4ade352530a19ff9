"""``direct``: sparse LU factorisation by SuperLU (Li, ACM TOMS 31(3), 2005).

Through :func:`scipy.sparse.linalg.splu`, with a minimum-degree ordering of ``A^T + A`` and
diagonal pivoting, which suits a symmetric positive-definite matrix.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse.linalg as spla

from .base import SPDSolver


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
        for callers that exploit the factors' sparsity (:mod:`ohmgraph.engine.resistance.reach`)."""
        return self._lu

    def preconditioner(self, matrix=None):
        """The factorisation's solve (exact for this set-up's matrix; ``matrix`` is not used)."""
        n = self.matrix.shape[0]
        return spla.LinearOperator((n, n), matvec=self._lu.solve, dtype=np.float64)

    def _solve(self, b, x0=None):
        # One call for a block. With the BLAS on one thread a Fortran-ordered block beats column
        # by column (16 columns of a 490,000-unknown lattice: 1.1 s against 1.4 s; 64: 4.9 s
        # against 6.8 s); with OpenBLAS threads on busy cores it lost 2-3x (benchmarks/README.md).
        return self._lu.solve(np.asfortranarray(b)), 0
