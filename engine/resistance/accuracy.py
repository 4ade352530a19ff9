"""Residuals that can be trusted: the grounded system's residual in extended precision.

A residual ``r = d - A x`` formed in float64 with the assembled matrix is wrong by about
``eps |A| |x|``, and the assembled diagonal (a rounded sum of conductances) is itself a
perturbation of the network of that size; both enter a resistance linearly through ``x^T r``.
On a 60 x 80 lattice that is a relative error near 1e-12, far above the solve's own error.
:class:`ResidualMeter` therefore forms the residual edge by edge from the conductances,

    r = d - B^T (g * (B x)),

in ``numpy.longdouble`` (64-bit significand on x86; on platforms where it is plain float64
the bound below simply comes out larger), and bounds its rounding by the standard model of
floating-point arithmetic (N. J. Higham, *Accuracy and Stability of Numerical Algorithms*,
2nd ed., SIAM 2002, §2.2 and §3.1): each edge current ``g_e (x_a - x_b)`` is rounded twice and
each node sums at most ``degree + 1`` terms, so

    |r_computed - r|_i <= gamma_{deg_i + 3} (|d_i| + sum_{e at i} |g_e (x_a - x_b)|),

``gamma_k = k u / (1 - k u)`` with ``u`` the unit roundoff of the extended type. The matrix never
enters: the residual is that of the exact Laplacian of the float64 conductances ``g = fl(1/R)``,
and those are within a relative ``u_64`` of the true ``1/R``, which by Rayleigh's monotonicity
law moves every resistance by at most a relative ``u_64 / (1 - u_64)`` (:data:`ASSEMBLY`).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

EXTENDED = np.longdouble
UNIT_ROUNDOFF = float(np.finfo(np.float64).eps) / 2.0
EXTENDED_ROUNDOFF = float(np.finfo(EXTENDED).eps) / 2.0
# Relative change of any resistance from rounding each conductance 1/R to float64.
ASSEMBLY = UNIT_ROUNDOFF / (1.0 - UNIT_ROUNDOFF)
# Margin on bounds that are themselves computed in floating point (a few roundings each).
MARGIN = 1.0 + 1e-6


def gamma(k, u: float = EXTENDED_ROUNDOFF):
    """Higham's ``gamma_k = k u / (1 - k u)``, the relative error bound of ``k`` roundings."""
    k = np.asarray(k, np.float64)
    return k * u / (1.0 - k * u)


class ResidualMeter:
    """Edge-by-edge extended-precision residuals of a grounded Laplacian system.

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
        rows = np.concatenate([np.arange(m), np.arange(m)])
        cols = np.concatenate([a, b])
        signs = np.concatenate([np.ones(m), -np.ones(m)])
        live = cols >= 0
        self.incidence = sp.csr_matrix((signs[live].astype(EXTENDED), (rows[live], cols[live])),
                                       shape=(m, n_unknowns))
        self.incidence_t = self.incidence.T.tocsr()
        self.magnitude_t = abs(self.incidence_t).astype(np.float64)
        self.conductance = conductance.astype(EXTENDED)
        degree = np.bincount(cols[live], minlength=n_unknowns)
        self.rounding = gamma(degree + 3) * MARGIN

    def residual(self, rhs: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``d - A x`` in extended precision, and an elementwise bound on its rounding error.

        Parameters
        ----------
        rhs, x : ndarray, shape (n,) or (n, k)

        Returns
        -------
        residual : ndarray of longdouble, same shape
        slack : ndarray of float64, same shape
            ``|residual - (d - A x)| <= slack`` elementwise, ``A`` being the exact Laplacian of
            the float64 conductances.
        """
        xe = x.astype(EXTENDED)
        g = self.conductance if x.ndim == 1 else self.conductance[:, None]
        current = g * (self.incidence @ xe)
        residual = rhs.astype(EXTENDED) - self.incidence_t @ current
        size = np.abs(rhs) + self.magnitude_t @ np.abs(current).astype(np.float64)
        rounding = self.rounding if x.ndim == 1 else self.rounding[:, None]
        return residual, rounding * size


def energy_values(rhs: np.ndarray, x: np.ndarray, residual: np.ndarray,
                  slack: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The energy estimates ``d^T x + x^T r`` of each column, with what bounds their error.

    Returns
    -------
    values : ndarray of float64
        The estimates, summed in extended precision and rounded once to float64.
    linear : ndarray of float64
        Bound on the error of the extended sums from the residual's rounding
        (``|x|^T slack``) and the sums' own rounding (``gamma_n (|d|^T |x| + |x|^T |r|)``).
    residual_l1 : ndarray of float64
        ``||r||_1 + ||slack||_1``: a bound on the l1 norm of the exact residual.
    """
    xe = x.astype(EXTENDED)
    total = np.einsum("ij,ij->j", rhs.astype(EXTENDED), xe) + np.einsum("ij,ij->j", xe, residual)
    ax = np.abs(x)
    size = np.einsum("ij,ij->j", np.abs(rhs), ax) + np.einsum(
        "ij,ij->j", ax, np.abs(residual).astype(np.float64))
    linear = (np.einsum("ij,ij->j", ax, slack) + gamma(x.shape[0] + 1) * size) * MARGIN
    residual_l1 = (np.abs(residual).astype(np.float64).sum(axis=0) + slack.sum(axis=0)) * MARGIN
    return total.astype(np.float64), linear, residual_l1
