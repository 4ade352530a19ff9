"""Residuals and energies that can be trusted, formed edge by edge from the conductances.

A residual ``r = d - A x`` formed in float64 with the assembled matrix is wrong by about
``eps |A| |x|``, and the assembled diagonal (a rounded sum of conductances) is itself a
perturbation of the network of that size; both enter a resistance linearly through ``x^T r``.
On a 60 x 80 lattice that is a relative error near 1e-12, far above the solve's own error.
This module never uses the assembled matrix. With ``B`` the incidence matrix and ``g`` the
float64 conductances, it forms

* the residual ``r = d - B^T (g * (B x))``, whose rounding it bounds by the standard model of
  floating-point arithmetic (N. J. Higham, *Accuracy and Stability of Numerical Algorithms*,
  2nd ed., SIAM 2002, §2.2 and §3.1): each edge current ``g_e (x_a - x_b)`` is rounded twice and
  node ``i`` sums ``degree_i + 1`` terms, so
  ``|r_computed - r|_i <= gamma_{deg_i + 3} (|d_i| + sum_{e at i} |g_e (x_a - x_b)|)`` with
  ``gamma_k = k u / (1 - k u)``;
* the energy ``x^T A x = sum_e g_e (x_a - x_b)^2``, a sum of non-negative terms, each rounded at
  most four times, added by compensated (Neumaier) summation, whose error is at most
  ``(2 u + O(m u^2))`` times the sum (Higham §4.3): a relative error of a few ``u`` however
  ill-conditioned ``A`` is. The energy estimate of a pair is then
  ``d^T x + x^T r = 2 d^T x - x^T A x``, accurate to a few ``u`` of the resistance.

The matrix enters only as the exact Laplacian of ``g = fl(1/R)``; those conductances are within
a relative ``u`` of the true ``1/R``, which by Rayleigh's monotonicity law moves every resistance
by at most a relative ``u / (1 - u)`` (:data:`ASSEMBLY`).

``edge_energies`` is the numba kernel; ``edge_energies_reference`` computes the same with
:func:`math.fsum` (correctly rounded sums) for the tests.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import scipy.sparse as sp

UNIT_ROUNDOFF = float(np.finfo(np.float64).eps) / 2.0
# Relative change of any resistance from rounding each conductance 1/R to float64.
ASSEMBLY = UNIT_ROUNDOFF / (1.0 - UNIT_ROUNDOFF)
# Margin on bounds that are themselves computed in floating point (a few roundings each).
MARGIN = 1.0 + 1e-6


def gamma(k, u: float = UNIT_ROUNDOFF):
    """Higham's ``gamma_k = k u / (1 - k u)``, the relative error bound of ``k`` roundings."""
    k = np.asarray(k, np.float64)
    return k * u / (1.0 - k * u)


@numba.njit(cache=True)
def edge_energies(a, b, g, x):
    """``sum_e g_e (x[a_e, j] - x[b_e, j])^2`` for every column ``j``, by Neumaier summation.

    ``a``, ``b`` index rows of ``x``; a grounded end points at a row of zeros.
    """
    k = x.shape[1]
    total = np.zeros(k)
    carry = np.zeros(k)
    for e in range(a.size):
        for j in range(k):
            d = x[a[e], j] - x[b[e], j]
            term = g[e] * (d * d)
            s = total[j]
            t = s + term
            if abs(s) >= abs(term):
                carry[j] += (s - t) + term
            else:
                carry[j] += (term - t) + s
            total[j] = t
    return total + carry


def edge_energies_reference(a, b, g, x) -> np.ndarray:
    """The same sums with :func:`math.fsum` (the terms rounded exactly as in the kernel)."""
    diff = x[a] - x[b]
    terms = g[:, None] * (diff * diff)
    return np.array([math.fsum(terms[:, j]) for j in range(x.shape[1])])


def incidence_matrix(a: np.ndarray, b: np.ndarray, n_unknowns: int) -> sp.csr_matrix:
    """The branch-unknown incidence matrix in CSR form: row ``i`` holds ``+1`` at ``a[i]`` and
    ``-1`` at ``b[i]``, each only where it is an unknown (``>= 0``; ``a[i] != b[i]``).

    Built row by row without SciPy's coordinate format, whose conversion sorts (0.5-0.7 s
    against 0.1-0.3 s for 2·10^6 branches); the stored order within a row (``a`` then ``b``)
    does not change any product, a row having at most two entries.
    """
    live_a, live_b = a >= 0, b >= 0
    indptr = np.zeros(a.size + 1, np.int64)
    np.cumsum(live_a.astype(np.int64) + live_b, out=indptr[1:])
    indices = np.empty(indptr[-1], np.int64)
    data = np.empty(indptr[-1])
    first = indptr[:-1]
    indices[first[live_a]], data[first[live_a]] = a[live_a], 1.0
    second = first + live_a
    indices[second[live_b]], data[second[live_b]] = b[live_b], -1.0
    return sp.csr_matrix((data, indices, indptr), shape=(a.size, n_unknowns))


class ResidualMeter:
    """Edge-by-edge residuals and energies of a grounded Laplacian system, with their rounding
    bounded (module notes).

    Parameters
    ----------
    a, b : ndarray of int64
        End unknowns of every resistor (``-1`` for a grounded end).
    conductance : ndarray of float64
        Each resistor's conductance (the float64 values the matrix was assembled from).
    n_unknowns : int
    """

    def __init__(self, a: np.ndarray, b: np.ndarray, conductance: np.ndarray, n_unknowns: int):
        m = a.size
        self.n = n_unknowns
        self.a = np.where(a >= 0, a, n_unknowns)          # row n: the ground, a row of zeros
        self.b = np.where(b >= 0, b, n_unknowns)
        self.incidence = incidence_matrix(a, b, n_unknowns)
        self.incidence_t = self.incidence.T.tocsr()
        self.magnitude_t = abs(self.incidence_t)
        self.conductance = np.ascontiguousarray(conductance, dtype=np.float64)
        degree = np.diff(self.incidence_t.indptr)
        self.rounding = gamma(degree + 3) * MARGIN
        # Energy: four roundings per term, then compensated summation of m terms.
        self.energy_rounding = (gamma(4) + 2.0 * UNIT_ROUNDOFF
                                + 4.0 * m * UNIT_ROUNDOFF ** 2) * MARGIN

    def residual(self, rhs: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``d - A x`` from the conductances, and an elementwise bound on its rounding error.

        Parameters
        ----------
        rhs, x : ndarray, shape (n, k)

        Returns
        -------
        residual : ndarray, shape (n, k)
        slack : ndarray, shape (n, k)
            ``|residual - (d - A x)| <= slack`` elementwise, ``A`` being the exact Laplacian of
            the float64 conductances.
        """
        current = self.conductance[:, None] * (self.incidence @ x)
        residual = rhs - self.incidence_t @ current
        size = np.abs(rhs) + self.magnitude_t @ np.abs(current)
        return residual, self.rounding[:, None] * size

    def residual_l1(self, rhs: np.ndarray, x: np.ndarray) -> np.ndarray:
        """A bound on ``||d - A x||_1`` of each column (computed residual plus its slack)."""
        residual, slack = self.residual(rhs, x)
        return (np.abs(residual) + slack).sum(axis=0) * MARGIN

    def energy_estimates(self, rhs: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The energy estimates ``d^T x + x^T r = 2 d^T x - x^T A x`` of each column.

        Returns
        -------
        values : ndarray of float64
        rounding : ndarray of float64
            A bound on ``|values - (d^T x + x^T r)|`` (exact arithmetic on the same ``x``):
            the rounding of ``d^T x`` (a sum over the nonzeros of ``d``), of the energy and of
            the final difference.
        """
        dx = np.einsum("ij,ij->j", rhs, x)
        terms = np.count_nonzero(rhs, axis=0)
        dx_rounding = gamma(terms) * np.einsum("ij,ij->j", np.abs(rhs), np.abs(x))
        padded = np.vstack([x, np.zeros((1, x.shape[1]))])
        energy = edge_energies(self.a, self.b, self.conductance, padded)
        values = 2.0 * dx - energy
        rounding = (2.0 * dx_rounding + self.energy_rounding * energy
                    + UNIT_ROUNDOFF * np.abs(values)) * MARGIN
        return values, rounding
