"""Kron reduction: the equivalent network seen from a set of terminal nodes.

Eliminating the interior nodes ``I`` of a Laplacian by Gaussian elimination leaves the Schur
complement onto the terminals ``T``,

    S = L_TT - L_TI L_II^{-1} L_IT,

itself a Laplacian (of the equivalent network among the terminals) with the same effective
resistances between every two terminals as the full network (Dörfler & Bullo, "Kron reduction of
graphs with applications to electrical networks", IEEE TCAS-I 60(1), 150–163, 2013).
Interior nodes of islands without a terminal are dropped first: they do not affect ``S`` and
would make ``L_II`` singular.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from ..session import SolveSession
from ..solvers import DEFAULT_RTOL


def kron_reduction(laplacian, terminals, method: str = "auto",
                   rtol: float = DEFAULT_RTOL) -> np.ndarray:
    """The Kron-reduced Laplacian onto ``terminals`` (dense, in their given order).

    Parameters
    ----------
    laplacian : sparse matrix, shape (n, n)
        Weighted graph Laplacian (symmetric, zero row sums, non-positive off-diagonal).
    terminals : array_like of int
        Distinct node indices to keep.
    method, rtol
        Solve session for the interior block (:class:`ohmgraph.engine.session.SolveSession`).

    Raises
    ------
    SolverFailed
        When the interior solve misses ``rtol``.
    """
    laplacian = sp.csr_matrix(laplacian)
    terminals = np.asarray(terminals, np.int64)
    n = laplacian.shape[0]
    if np.unique(terminals).size != terminals.size:
        raise ValueError("terminals must be distinct")
    _, island = connected_components(laplacian, directed=False)
    kept_islands = np.zeros(island.max() + 1 if n else 0, bool)
    kept_islands[island[terminals]] = True
    interior = np.setdiff1d(np.flatnonzero(kept_islands[island]), terminals)
    reduced = laplacian[terminals][:, terminals].toarray()
    if interior.size == 0:
        return reduced
    coupling = laplacian[interior][:, terminals].toarray()            # L_IT
    session = SolveSession(laplacian[interior][:, interior], method, rtol)
    session.expect(terminals.size)
    x = session.solve(coupling)
    return reduced - coupling.T @ x


def reduced_resistances(reduced: np.ndarray) -> np.ndarray:
    """All pairwise effective resistances of a small (dense) Laplacian.

    Within a connected part ``R_ij = (e_i - e_j)^T S^+ (e_i - e_j)`` with the Moore–Penrose
    pseudo-inverse of that part; between parts the value is ``inf``.
    """
    t = reduced.shape[0]
    out = np.full((t, t), np.inf)
    count, part = connected_components(sp.csr_matrix(reduced != 0), directed=False)
    for p in range(count):
        members = np.flatnonzero(part == p)
        pinv = np.linalg.pinv(reduced[np.ix_(members, members)], hermitian=True)
        diagonal = np.diag(pinv)
        out[np.ix_(members, members)] = diagonal[:, None] + diagonal[None, :] - 2.0 * pinv
    return out
