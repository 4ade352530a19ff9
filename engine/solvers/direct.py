"""``direct``: sparse LU factorisation by SuperLU (Li, ACM TOMS 31(3), 2005).

The unknowns are first put in a fill-reducing order (approximate minimum degree,
:func:`.symbolic.fill_reducing_order`, the same order :mod:`.choice` analyses to predict the
factor's size and cost), then :func:`scipy.sparse.linalg.splu` factorises the permuted matrix
in that order (``permc_spec="NATURAL"``) with diagonal pivoting in symmetric mode, which suits a
symmetric positive-definite matrix: the factor is then the Cholesky factor the prediction
counted.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse.linalg as spla

from .base import DEFAULT_RTOL, SPDSolver
from .symbolic import fill_reducing_order


class OrderedFactors:
    """SuperLU factors of ``A[order][:, order]`` presented as factors of ``A``.

    ``L``, ``U`` are SuperLU's; ``perm_r``, ``perm_c`` compose SuperLU's permutations with
    ``order``, so that unknown ``k`` of ``A`` sits at row ``perm_r[k]`` of the factors, as in
    :class:`scipy.sparse.linalg.SuperLU` (used by :mod:`ohmgraph.engine.resistance.reach`).
    """

    def __init__(self, lu, order: np.ndarray):
        self._lu = lu
        inverse = np.empty_like(order)
        inverse[order] = np.arange(order.size)
        self.perm_r = lu.perm_r[inverse]
        self.perm_c = lu.perm_c[inverse]

    @property
    def L(self):
        return self._lu.L

    @property
    def U(self):
        return self._lu.U


class DirectSolver(SPDSolver):
    """Sparse LU (SuperLU) in a fill-reducing order.

    Parameters
    ----------
    matrix, rtol
        As :class:`~.base.SPDSolver`.
    order : ndarray of int, optional
        The elimination order (``order[k]`` is eliminated ``k``-th); by default approximate
        minimum degree. :class:`~ohmgraph.engine.session.SolveSession` passes the one its
        choice analysed, so it is computed once.
    """

    method = "direct"

    def __init__(self, matrix, rtol: float = DEFAULT_RTOL, *, order: np.ndarray | None = None):
        self._order = order
        super().__init__(matrix, rtol)

    def _setup(self) -> None:
        if self.matrix.shape[0] == 0:
            self._lu = self._factors = None
            return
        order = self._order if self._order is not None else fill_reducing_order(self.matrix)
        self._order = np.asarray(order, np.int64)
        permuted = self.matrix[self._order][:, self._order].tocsc()
        self._lu = spla.splu(permuted, permc_spec="NATURAL", diag_pivot_thresh=0.0,
                             options={"SymmetricMode": True})
        self._factors = OrderedFactors(self._lu, self._order)

    @property
    def factors(self):
        """The factorisation (``L``, ``U``, ``perm_r``, ``perm_c`` of ``A``), or None when
        empty; for callers that exploit the factors' sparsity
        (:mod:`ohmgraph.engine.resistance.reach`)."""
        return self._factors

    def preconditioner(self, matrix=None):
        """The factorisation's solve (exact for this set-up's matrix; ``matrix`` is not used),
        in the unknowns' own order like :meth:`_solve`."""
        n = self.matrix.shape[0]
        return spla.LinearOperator((n, n), matvec=lambda b: self._solve(np.ravel(b))[0],
                                   dtype=np.float64)

    def _solve(self, b, x0=None):
        # One call for a block. With the BLAS on one thread a Fortran-ordered block beats column
        # by column (16 columns of a 490,000-unknown lattice: 1.1 s against 1.4 s; 64: 4.9 s
        # against 6.8 s); with OpenBLAS threads on busy cores it lost 2-3x (benchmarks/README.md).
        x = np.empty_like(b)
        x[self._order] = self._lu.solve(np.asfortranarray(b[self._order]))
        return x, 0
