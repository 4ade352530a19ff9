"""Pair resistances from a sparse LDLᵀ factor, by forward solves with sparse right-hand sides.

With the symmetric positive-definite grounded matrix factorised without pivoting as
``P A Pᵀ = L U``, ``U ≈ D Lᵀ`` (SuperLU in symmetric mode with diagonal pivots), the resistance
of a pair with injection vector ``d = e_a - e_b`` is

    R = dᵀ A⁻¹ d ≈ Σ_j y_j² / D_jj,    L y = P d,

a single forward solve whose right-hand side has two non-zeros. Its solution is non-zero only on
the nodes reachable from ``a`` and ``b`` in the graph of ``L``, which are their ancestors in the
elimination tree (Liu, "The role of elimination trees in sparse factorization", SIAM J. Matrix
Anal. Appl. 11(1), 134–172, 1990; Gilbert & Peierls, SIAM J. Sci. Stat. Comput. 9(5), 862–874,
1988): the two paths to the root, merged in increasing column order (a topological order, since a
parent comes after its child). No depth-first search is needed: a path is followed by the
parent pointers, the first sub-diagonal entry of each column. This holds when the pattern of
``L`` is closed along the tree (every column's rows below its parent are rows of the parent), as
for any Cholesky pattern; :class:`FactorPairs` checks it and refuses a factor that breaks it. On a
million-node lattice a pair visits a few thousand columns instead of the whole factor.

Every pair's paths end in the last columns (the root of the tree, a dense triangle on a
lattice). Those :data:`DENSE_TOP` columns are solved for all pairs at once by one dense
triangular solve (BLAS), from the right-hand sides the sparse part leaves there.

Each pair also returns the rounding term of its forward solve: the computed ``ŷ`` solves
``L ŷ = P d - f`` exactly with ``|f_i| <= γ_{c_i} (|b_i| + Σ_j |L_ij| |ŷ_j|)``, ``c_i`` the
non-zeros of row ``i`` of ``L`` (the terms of that row's sum; N. J. Higham, *Accuracy and
Stability of Numerical Algorithms*, 2nd ed., SIAM 2002, Thm 8.5 and §3.1, numbers recalled
from memory), so
``||f||_1 <= γ_{c_a} + γ_{c_b} + Σ_j |ŷ_j| w_j`` with ``w_j = Σ_{i>j} γ_{c_i} |L_ij|``
(the dense part sums the same terms of each row in another order, with explicit zeros that add
no rounding, so the same bound holds)
(:attr:`FactorPairs.column_rounding`). :mod:`ohmgraph.engine.resistance.factor_bound` turns that
and the factor's own backward error into a bound.

``pair_energies`` is the numba kernel; ``pair_energies_reference`` computes the same energies by
dense triangular solves (:func:`scipy.sparse.linalg.spsolve_triangular`), and
``tree_closed_reference`` the closure check with Python sets, for the tests.
"""

from __future__ import annotations

import numba
import numpy as np
import scipy.sparse as sp
from scipy.linalg import solve_triangular
from scipy.sparse.linalg import spsolve_triangular

from .accuracy import UNIT_ROUNDOFF, gamma

# Trailing columns of L solved as one dense block for all pairs at once (every pair's path ends
# there). On the 10^6-node lattice the last 3,000 columns hold 57 % of each pair's work; as a
# dense square they take 72 MB and one BLAS solve per block of pairs (CPU 2.1 s instead of 4.3 s
# for 1,000 pairs). 4,000 columns (128 MB) took the forward solves of 1,000 pairs from 3.3 s to
# 2.6 s on 2 threads (5,000: 2.4-2.5 s, 200 MB; 8,000: 3.0 s; 2,000: 5.0 s).
DENSE_TOP = 4000


@numba.njit(cache=True)
def _parents(indptr, indices):
    """Smallest sub-diagonal row of each column (-1 for a root)."""
    n = indptr.size - 1
    parent = np.full(n, -1, np.int32)
    for j in range(n):
        best = n
        for p in range(indptr[j], indptr[j + 1]):
            i = indices[p]
            if j < i < best:
                best = i
        if best < n:
            parent[j] = best
    return parent


@numba.njit(cache=True)
def tree_closed(indptr, indices, parent):
    """True when every column's rows below its parent are rows of the parent."""
    n = parent.size
    mark = np.full(n, -1, np.int32)
    for j in range(n):
        p = parent[j]
        if p < 0:
            continue
        for q in range(indptr[p], indptr[p + 1]):
            mark[indices[q]] = j
        for k in range(indptr[j], indptr[j + 1]):
            i = indices[k]
            if i > p and mark[i] != j:
                return False
    return True


def tree_closed_reference(lower) -> bool:
    """Plain reference for :func:`tree_closed` (Python sets)."""
    lower = sp.csc_matrix(lower)
    rows = [set(lower.indices[lower.indptr[j]:lower.indptr[j + 1]].tolist())
            for j in range(lower.shape[1])]
    for j, column in enumerate(rows):
        below = [i for i in column if i > j]
        if below and not {i for i in below if i > min(below)} <= rows[min(below)]:
            return False
    return True


@numba.njit(cache=True, nogil=True)
def row_counts(indices, n):
    """Entries of each row of a compressed-column pattern (``np.bincount`` without its 64-bit
    copy of ``indices``)."""
    count = np.zeros(n, np.int32)
    for i in indices:
        count[i] += 1
    return count


@numba.njit(cache=True)
def column_rounding(indptr, indices, data, row_count, u):
    """``w_j = Σ_{i>j} γ_{c_i} |L_ij|`` with ``c_i = row_count[i]`` and unit roundoff ``u``."""
    n = indptr.size - 1
    out = np.zeros(n)
    for j in range(n):
        total = 0.0
        for p in range(indptr[j], indptr[j + 1]):
            i = indices[p]
            if i > j:
                k = row_count[i] * u
                total += k / (1.0 - k) * abs(data[p])
        out[j] = total
    return out


def column_rounding_reference(lower, row_count) -> np.ndarray:
    """Plain reference for :func:`column_rounding` (sparse matrix arithmetic)."""
    strict = sp.tril(sp.csr_matrix(lower), k=-1).tocoo()
    weights = gamma(row_count[strict.row]) * np.abs(strict.data)
    return np.bincount(strict.col, weights=weights, minlength=lower.shape[1])


@numba.njit(cache=True)
def _trailing_block(indptr, indices, data, top):
    """Rows and columns ``top ..`` of a lower-triangular CSC matrix, dense (no copy of the rest,
    which a scipy slice would make)."""
    k = indptr.size - 1 - top
    block = np.zeros((k, k))
    for j in range(top, top + k):
        for p in range(indptr[j], indptr[j + 1]):
            if indices[p] >= top:
                block[indices[p] - top, j - top] = data[p]
    return block


@numba.njit(cache=True)
def _path_energy(indptr, indices, data, pivot, weight, parent, a, b, top, y, gathered):
    """``Σ y_j² / D_jj`` over columns below ``top`` for ``L y = e_a - e_b`` (-1: grounded), the
    rounding sum ``Σ |y_j| weight_j`` and the columns visited; the entries of ``y`` from ``top``
    on (the dense trailing block's right-hand side) go to ``gathered``. Leaves ``y`` zero."""
    if a >= 0:
        y[a] += 1.0
    if b >= 0:
        y[b] -= 1.0
    energy = 0.0
    rounding = 0.0
    visited = 0
    ja = a if a < top else -1
    jb = b if b < top else -1
    while ja >= 0 or jb >= 0:
        if jb < 0 or (ja >= 0 and ja < jb):
            j = ja
            ja = parent[ja]
        elif ja < 0 or jb < ja:
            j = jb
            jb = parent[jb]
        else:                      # the paths have met: one path from here on
            j = ja
            ja = parent[ja]
            jb = -1
        if ja >= top:
            ja = -1
        if jb >= top:
            jb = -1
        yj = y[j]
        y[j] = 0.0
        visited += 1
        if yj == 0.0:
            continue
        energy += yj * yj / pivot[j]
        rounding += abs(yj) * weight[j]
        for p in range(indptr[j], indptr[j + 1]):
            i = indices[p]
            if i > j:
                y[i] -= data[p] * yj
    for i in range(top, y.size):
        gathered[i - top] = y[i]
        y[i] = 0.0
    return energy, rounding, visited


@numba.njit(parallel=True, cache=True)
def pair_energies(indptr, indices, data, pivot, weight, parent, a, b, top, n_chunks):
    """Energies, rounding sums and visited columns of ``L y = e_a[k] - e_b[k]`` (permuted
    indices; -1 = grounded) over the columns below ``top``, and the right-hand sides of the
    trailing block (one row per pair); the pairs split into ``n_chunks`` parallel runs."""
    n = pivot.size
    m = a.size
    energy = np.empty(m)
    rounding = np.empty(m)
    visited = np.empty(m, np.int64)
    gathered = np.zeros((m, n - top))
    bounds = np.linspace(0, m, n_chunks + 1).astype(np.int64)
    for c in numba.prange(n_chunks):
        y = np.zeros(n)
        for k in range(bounds[c], bounds[c + 1]):
            energy[k], rounding[k], visited[k] = _path_energy(
                indptr, indices, data, pivot, weight, parent, a[k], b[k], top, y, gathered[k])
    return energy, rounding, visited, gathered


def pair_energies_reference(lower, pivot, a, b):
    """Plain reference for :func:`pair_energies`: dense forward solves of the same systems."""
    n = pivot.size
    rhs = np.zeros((n, a.size))
    columns = np.arange(a.size)
    rhs[a[a >= 0], columns[a >= 0]] += 1.0
    rhs[b[b >= 0], columns[b >= 0]] -= 1.0
    y = spsolve_triangular(sp.csr_matrix(lower), rhs, lower=True, unit_diagonal=True)
    return (y ** 2 / pivot[:, None]).sum(axis=0)


class FactorPairs:
    """Pair resistances from the SuperLU factors of a grounded matrix.

    Parameters
    ----------
    lu : scipy.sparse.linalg.SuperLU or OrderedFactors
        Factors of the SPD matrix computed with diagonal pivoting in symmetric mode.
    dense_top : int, optional
        Trailing columns solved as one dense block (default :data:`DENSE_TOP`, at most an eighth
        of the columns).

    Attributes
    ----------
    row_count : ndarray of int32
        Non-zeros of each row of ``L`` (diagonal included).
    column_rounding : ndarray of float64
        ``w_j = Σ_{i>j} γ_{c_i} |L_ij|`` (module notes).

    Raises
    ------
    ValueError
        If the row and column permutations differ, a pivot is not positive (the factors are then
        not an LDLᵀ factorisation) or the pattern of ``L`` is not closed along its tree.
    """

    def __init__(self, lu, dense_top: int | None = None):
        if not np.array_equal(lu.perm_r, lu.perm_c):
            raise ValueError("the factorisation pivoted off the diagonal")
        lower = lu.L.tocsc()
        self.indptr = lower.indptr
        self.indices = lower.indices
        self.data = lower.data
        self.parent = _parents(self.indptr, self.indices)
        if not tree_closed(self.indptr, self.indices, self.parent):
            raise ValueError("the pattern of L is not closed along its elimination tree")
        self.n = lower.shape[0]
        self.position = lu.perm_r                      # unknown k sits at row perm_r[k]
        self.factor_nonzeros = int(lower.nnz)
        self.row_count = row_counts(self.indices, self.n)
        self.column_rounding = column_rounding(self.indptr, self.indices, self.data,
                                               self.row_count, UNIT_ROUNDOFF)
        self._lower = lower
        self.pivot = self._read_pivots(lu)
        self.top = self.n - (min(DENSE_TOP, self.n // 8) if dense_top is None
                             else int(dense_top))
        self._dense_top = None                     # built on first use (memory)

    @staticmethod
    def _read_pivots(lu) -> np.ndarray:
        pivot = lu.U.diagonal()
        if not np.all(pivot > 0):
            raise ValueError("a pivot is not positive")
        return pivot

    @property
    def lower(self):
        """``L`` (unit lower triangular, CSC, factor order)."""
        return self._lower

    def positions(self, unknowns: np.ndarray) -> np.ndarray:
        """Factor rows of unknown indices (-1 stays -1: grounded)."""
        return np.where(unknowns >= 0, self.position[np.maximum(unknowns, 0)], -1)

    def energies(self, into: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``dᵀ A⁻¹ d`` for ``d = e_into[k] - e_out[k]`` over unknown indices (-1: grounded)."""
        return self.forward(into, out)[0]

    @property
    def dense_top(self) -> np.ndarray:
        """The trailing block of ``L`` from row and column :attr:`top` on, dense."""
        if self._dense_top is None:
            self._dense_top = _trailing_block(self.indptr, self.indices, self.data, self.top)
        return self._dense_top

    def forward(self, into: np.ndarray, out: np.ndarray, dense: bool = True):
        """Energies, bounds on ``||f||_1`` of each forward solve (module notes) and the columns
        each visited, for ``d = e_into[k] - e_out[k]`` over unknown indices (-1: grounded).
        ``dense=False`` solves the trailing block pair by pair too (for a few pairs)."""
        a, b = self.positions(into), self.positions(out)
        chunks = max(1, min(numba.get_num_threads(), a.size))
        top = self.top if dense else self.n
        energy, rounding, visited, gathered = pair_energies(
            self.indptr, self.indices, self.data, self.pivot, self.column_rounding, self.parent,
            a, b, top, chunks)
        if top < self.n:        # the trailing block for every pair at once (BLAS)
            y = solve_triangular(self.dense_top, gathered.T, lower=True, unit_diagonal=True,
                                 check_finite=False)
            energy += np.einsum("ij,ij->j", y, y / self.pivot[top:, None])
            rounding += np.abs(y).T @ self.column_rounding[top:]
            visited += self.n - top
        ends = (np.where(a >= 0, gamma(self.row_count[np.maximum(a, 0)]), 0.0)
                + np.where(b >= 0, gamma(self.row_count[np.maximum(b, 0)]), 0.0))
        return energy, rounding + ends, visited
