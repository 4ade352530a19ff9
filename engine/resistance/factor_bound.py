"""A rigorous error bound for pair resistances read from a factorisation (factor reach).

A factor-reach value (:mod:`ohmgraph.engine.resistance.reach`) has no residual of its own: it is
``V = dᵀ Â⁻¹ d`` for the matrix ``Â = L D Lᵀ`` the computed factors stand for, evaluated by a
sparse forward solve. Two things separate it from ``R = dᵀ A⁻¹ d``:

**The factor.** Write ``E = Â - A`` (``A``: the exact grounded Laplacian of the float64
conductances). If ``|xᵀ E x| <= δ xᵀ A x`` for every ``x``, then ``(1-δ) A ⪯ Â ⪯ (1+δ) A`` in
the Loewner order, so ``R/(1+δ) <= dᵀ Â⁻¹ d <= R/(1-δ)`` for every pair at once. With any
entrywise bound ``B >= |E|``, ``|xᵀ E x| <= Σ_ij B_ij |x_i| |x_j| <= Σ_i ρ_i x_i²`` with
``ρ = (B 1 + Bᵀ 1) / 2``; and ``Σ_i ρ_i x_i² <= δ xᵀ A x`` holds for ``δ`` the spectral radius of
the entrywise non-negative matrix ``A⁻¹ diag(ρ)`` (``A`` is a non-singular M-matrix), which is at
most its largest row sum ``max_i (A⁻¹ ρ)_i`` (Perron–Frobenius; Horn & Johnson, *Matrix
Analysis*, 2nd ed., Thm 8.1.22, theorem number recalled from memory): ONE solve, done through the session, its residual bounded as
in :mod:`ohmgraph.engine.resistance.accuracy` and the ground distance ``D >= max G_ij``.

``B`` has three parts, all computed from the factors after the fact:

* LU's backward error, ``L U = A_asm + ΔA`` with ``|ΔA| <= γ_{k+1} |L| |U|`` entrywise, ``k`` the
  non-zero terms of the entry's inner product (N. J. Higham, *Accuracy and Stability of Numerical
  Algorithms*, 2nd ed., SIAM 2002, Thm 9.3, number recalled from memory; zero terms add no
  rounding). ``k`` is at most the
  non-zeros of the entry's row of ``L`` and of its column of ``U``: row sums use the first, column
  sums the second.
* ``L D Lᵀ - L U = L (D Lᵀ - U)``: SuperLU computes ``U`` and ``L`` separately, so ``D Lᵀ``
  and ``U`` differ by rounding; their difference is formed entry by entry (each with its own
  rounding bounded).
* The assembled matrix against the exact Laplacian: each entry is a sum of conductances,
  ``|A_asm - A| <= γ_{deg+3} |A|`` by rows.

**The forward solve.** Its rounding is bounded per pair by :mod:`.reach` (``||f||_1``); with
``ŷ = L⁻¹ (P d - f)``, ``|sqrt(ŷᵀ D⁻¹ ŷ) - sqrt(dᵀ Â⁻¹ d)| <= sqrt(fᵀ Â⁻¹ f)
<= sqrt(D_island / (1 - δ)) ||f||_1``. The sum of the ``T`` visited squares adds ``γ_{T+3}``.

The bound is small when ``A⁻¹ ρ`` is: it grows with the network's distance to its ground (on a
10^6-node lattice grounded through 100 pads it is 2.3e-9; grounded at one corner, 4.2e-7), so
``--pairs`` grounds the strongest node of each island (``ResistanceSolver(ground_at=...)``).

``lu_row_sums`` and ``symmetry_gap`` are numba kernels; ``factor_rho_reference`` computes ``ρ``
with dense matrices for the tests.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .accuracy import ASSEMBLY, MARGIN, UNIT_ROUNDOFF, gamma
from .reach import row_counts

# Blocks in which the rows of U are gathered for the symmetry gap: each block scans U's columns
# from its first row on, so fewer blocks are less work and more memory (an 8th of U's entries at
# a time). On a 1000 x 1000 lattice (3.9e7 entries) ``factor_rho`` took 2.4 s with 32 blocks,
# 1.65 s with 8, 1.54 s with 4; 8 blocks add 44 MB over 32, below the factorisation's peak.
GAP_CHUNKS = 8


@numba.njit(cache=True, nogil=True)
def lu_row_sums(l_ptr, l_idx, l_val, u_ptr, u_idx, u_val):
    """``(|L| |U| 1, 1ᵀ |L| |U|)`` for CSC factors."""
    n = l_ptr.size - 1
    u_rows = np.zeros(n)
    for k in range(n):
        for p in range(u_ptr[k], u_ptr[k + 1]):
            u_rows[u_idx[p]] += abs(u_val[p])
    rows = np.zeros(n)
    l_cols = np.zeros(n)
    for j in range(n):
        for p in range(l_ptr[j], l_ptr[j + 1]):
            magnitude = abs(l_val[p])
            rows[l_idx[p]] += magnitude * u_rows[j]
            l_cols[j] += magnitude
    cols = np.zeros(n)
    for k in range(n):
        total = 0.0
        for p in range(u_ptr[k], u_ptr[k + 1]):
            total += l_cols[u_idx[p]] * abs(u_val[p])
        cols[k] = total
    return rows, cols


@numba.njit(cache=True)
def _upper_row_starts(u_ptr, u_idx):
    """``starts[j]``: entries of the rows of CSC ``U`` above its diagonal before row ``j``."""
    n = u_ptr.size - 1
    starts = np.zeros(n + 1, np.int64)
    for k in range(n):
        for q in range(u_ptr[k], u_ptr[k + 1]):
            if u_idx[q] < k:
                starts[u_idx[q] + 1] += 1
    return np.cumsum(starts)


@numba.njit(cache=True)
def _upper_rows(u_ptr, u_idx, u_val, starts, start, stop):
    """Rows ``start .. stop-1`` of the CSC matrix ``U`` above its diagonal (``idx``, ``val``
    from ``starts[start]`` on)."""
    base = starts[start]
    idx = np.empty(starts[stop] - base, np.int32)
    val = np.empty(starts[stop] - base)
    fill = starts[start:stop] - base
    for k in range(start + 1, u_ptr.size - 1):
        for q in range(u_ptr[k], u_ptr[k + 1]):
            j = u_idx[q]
            if start <= j < stop and j < k:
                idx[fill[j - start]] = k
                val[fill[j - start]] = u_val[q]
                fill[j - start] += 1
    return idx, val


@numba.njit(cache=True, nogil=True)
def symmetry_gap(l_ptr, l_idx, l_val, u_ptr, u_idx, u_val, pivot, u, bounds):
    """Bounds ``e_jk >= |D_jj L_kj - U_jk|`` (``k > j``) summed two ways: ``Σ_k e_jk`` for each
    ``j`` and ``Σ_j (1ᵀ|L|)_j e_jk`` for each ``k``. Both factors CSC, indices in any order;
    the rows of ``U`` are gathered a block at a time, ``bounds[c] .. bounds[c+1]-1`` (memory)."""
    n = l_ptr.size - 1
    l_cols = np.zeros(n)                   # 1ᵀ |L|
    for j in range(n):
        for p in range(l_ptr[j], l_ptr[j + 1]):
            l_cols[j] += abs(l_val[p])
    by_row = np.zeros(n)
    by_col = np.zeros(n)
    in_u = np.full(n, -1, np.int32)        # position in U's row j of column k, for this j
    owner = np.full(n, -1, np.int32)
    in_l = np.full(n, -1, np.int32)        # row k present in L's column j
    starts = _upper_row_starts(u_ptr, u_idx)
    for c in range(bounds.size - 1):
        start, stop = bounds[c], bounds[c + 1]
        ur_idx, ur_val = _upper_rows(u_ptr, u_idx, u_val, starts, start, stop)
        for j in range(start, stop):
            first, last = starts[j] - starts[start], starts[j + 1] - starts[start]
            for q in range(first, last):
                in_u[ur_idx[q]] = q
                owner[ur_idx[q]] = j
            for p in range(l_ptr[j], l_ptr[j + 1]):
                k = l_idx[p]
                if k <= j:
                    continue
                in_l[k] = j
                scaled = pivot[j] * l_val[p]
                other = ur_val[in_u[k]] if owner[k] == j else 0.0
                e = abs(scaled - other) * (1.0 + 2.0 * u) + u * abs(scaled)
                by_row[j] += e
                by_col[k] += l_cols[j] * e
            for q in range(first, last):                 # U entries without an L partner
                k = ur_idx[q]
                if in_l[k] != j:
                    e = abs(ur_val[q])
                    by_row[j] += e
                    by_col[k] += l_cols[j] * e
    return by_row, by_col


@numba.njit(cache=True, nogil=True)
def _lower_times(l_ptr, l_idx, l_val, v):
    """``|L| v``."""
    out = np.zeros(v.size)
    for j in range(v.size):
        for p in range(l_ptr[j], l_ptr[j + 1]):
            out[l_idx[p]] += abs(l_val[p]) * v[j]
    return out


def factor_rho(lower, upper, pivot: np.ndarray) -> np.ndarray:
    """``ρ`` of the factor's part of ``B`` (module notes), in factor order.

    Parameters
    ----------
    lower, upper : scipy.sparse.csc_matrix
        SuperLU's ``L`` (unit lower) and ``U``.
    pivot : ndarray
        ``diag(U)``.
    """
    l_ptr, l_idx, l_val = lower.indptr, lower.indices, lower.data
    u_ptr, u_idx, u_val = upper.indptr, upper.indices, upper.data
    # blocks of rows holding about equal shares of U's entries (U's row j mirrors L's column j)
    bounds = np.unique(np.searchsorted(l_ptr, np.linspace(0, l_ptr[-1], GAP_CHUNKS + 1)))
    bounds[0], bounds[-1] = 0, pivot.size
    by_row, by_col = symmetry_gap(l_ptr, l_idx, l_val, u_ptr, u_idx, u_val, pivot,
                                  UNIT_ROUNDOFF, bounds.astype(np.int64))
    rows, cols = lu_row_sums(l_ptr, l_idx, l_val, u_ptr, u_idx, u_val)
    row_count = row_counts(l_idx, pivot.size)
    col_count = np.diff(u_ptr)
    backward = gamma(row_count + 1) * rows + gamma(col_count + 1) * cols
    gap = _lower_times(l_ptr, l_idx, l_val, by_row) + by_col
    return 0.5 * (backward + gap) * MARGIN


def factor_rho_reference(lower, upper) -> np.ndarray:
    """Plain reference for :func:`factor_rho` with dense matrices (small factors only)."""
    low, up = lower.toarray(), upper.toarray()
    row_count = np.diff(lower.tocsr().indptr)            # stored pattern, as the kernel counts
    col_count = np.diff(upper.tocsc().indptr)
    product = np.abs(low) @ np.abs(up)
    scaled = np.triu(np.diag(np.diag(up)) @ low.T, k=1)  # D Lᵀ above the diagonal
    gap = (np.abs(scaled - np.triu(up, k=1)) * (1 + 2 * UNIT_ROUNDOFF)
           + UNIT_ROUNDOFF * np.abs(scaled))
    spread = np.abs(low) @ gap
    rows = gamma(row_count + 1) * product.sum(axis=1) + spread.sum(axis=1)
    cols = gamma(col_count + 1) * product.sum(axis=0) + spread.sum(axis=0)
    return 0.5 * (rows + cols) * MARGIN


def assembly_rho(matrix, degree_rounding: np.ndarray) -> np.ndarray:
    """``ρ`` of the assembly part of ``B``: ``γ_{deg_i+3} (|A| 1)_i`` (unknown order), with
    ``(|A| 1)_i <= 2 A_ii (1 + 2 γ_{deg_i+3})``: the off-diagonal conductances of a row add up to
    at most its diagonal, each sum assembled within ``γ_{deg_i}`` (no copy of the matrix)."""
    return degree_rounding * 2.0 * matrix.diagonal() * (1.0 + 2.0 * degree_rounding)


def loewner_delta(potential_max: float, residual_l1: float, distance: float) -> float:
    """``δ >= max_i (A⁻¹ ρ)_i`` from a computed ``x ≈ A⁻¹ ρ``: ``max x`` plus ``D ||r||_1``."""
    return (potential_max + distance * residual_l1) * MARGIN


def pair_bounds(values, rounding, visited, delta: float, distance) -> np.ndarray:
    """Relative error bounds of factor-reach values (module notes).

    Parameters
    ----------
    values : ndarray
        Computed ``Σ ŷ_j² / D_jj``.
    rounding : ndarray
        Bounds on ``||f||_1`` of each forward solve.
    visited : ndarray of int
        Columns each forward solve summed.
    delta : float
        The factor's Loewner bound (:func:`loewner_delta`).
    distance : ndarray
        Ground distance of each pair's island.
    """
    if not delta < 1.0:
        return np.full(np.shape(values), math.inf)
    g = gamma(np.asarray(visited) + 3)
    h = np.sqrt(distance / (1.0 - delta)) * rounding
    s = np.sqrt(values / (1.0 + g))
    with np.errstate(divide="ignore", invalid="ignore"):
        eta = np.where(s > h, h / (s - h), np.inf)
        upper = (1.0 + g) * (1.0 + eta) ** 2 / (1.0 - delta) - 1.0
        lower = 1.0 - (1.0 - g) * np.maximum(1.0 - eta, 0.0) ** 2 / (1.0 + delta)
    return (np.maximum(upper, lower) + ASSEMBLY + UNIT_ROUNDOFF) * MARGIN
