"""Readings flagged as gross errors or poor probe contacts: limits and the mean-shift estimate.

A reading ``j`` that is off by an unknown offset ``s`` (the mean-shift outlier model; Cook &
Weisberg, *Residuals and Influence in Regression*, 1982, §2.2) is fitted exactly like the same
fit without that reading; the drop of the best generalised least-squares cost when it is left
out is the likelihood-ratio statistic of "offset on ``j``" against "no offset", and its signed
square root is Baarda's ``w`` (Baarda, *A testing procedure for use in geodetic networks*, 1968)
when the other parameters are held fixed. Two kinds of offset are tested:

* **gross error**, on any reading, of either sign and any size: ``drop`` against the chi-square
  quantile of one degree of freedom at ``1 - alpha / n`` (Bonferroni over the ``n`` readings);
* **contact error**, on a two-point resistance reading only: a poor probe contact adds its own
  resistance in series with the path measured, so the reading is high by ``0 < s <= s_max``
  (common practice: a poor contact adds up to a few ohms). The drop is that of the offset held
  within ``(0, s_max]`` (quadratic in ``s``: ``drop (1 - (1 - s_max / s)^2)`` when the estimate
  ``s`` exceeds ``s_max``, 0 when it is negative), and its limit is the ``1 - alpha`` quantile
  of ``max_j w_j`` over the resistance readings when none is corrupted, simulated under the
  error model the fit assumes (:func:`contact_limit`; a Monte Carlo test, Barnard, J. R. Stat.
  Soc. B 25, 1963). A voltage reading with a high-impedance meter draws almost no current, so a
  few ohms of contact barely change it (common practice): voltage and current readings are
  tested for gross errors only.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import cho_solve, cholesky, eigh
from scipy.stats import chi2 as chi2_distribution

from ..solvers.base import single_threaded_blas

CONTACT_KINDS = ("R",)          # readings a poor probe contact adds resistance to
DEFAULT_CONTACT_MAX_OHMS = 5.0
CONTACT_DRAWS = 10000          # tail probability of the limit within about ±0.005 at 5 %
DRAW_BLOCK = 2000
SEED = 20261203                 # fixed: the same readings always give the same limit


def gross_limit(readings: int, significance: float) -> float:
    """``chi2_1`` quantile at ``1 - significance / readings`` (``inf`` without readings)."""
    if readings == 0:
        return np.inf
    return float(chi2_distribution.ppf(1.0 - significance / readings, 1))


def contact_limit(part_covariance: np.ndarray, instrument_limit: np.ndarray,
                  eligible: np.ndarray, significance: float, *, draws: int = CONTACT_DRAWS,
                  seed: int = SEED) -> float:
    """Limit on the drop for a contact error: ``q^2``, ``q`` the ``1 - significance`` quantile
    of ``max_j w_j`` over the ``eligible`` readings when no reading is corrupted.

    ``w_j = (Sigma^-1 e)_j / sqrt((Sigma^-1)_jj)`` is the standardised conditional residual of
    reading ``j`` (Baarda's w-test statistic). Its maximum is simulated under the model the fit
    assumes: part errors normal with covariance ``part_covariance`` (sums over many parts), the
    instrument's error uniform within ``±instrument_limit`` (JCGM 100:2008 §4.3.7). This holds
    the chance that any clean reading is flagged as a contact error at ``significance`` (the
    union over readings included; with uniform instrument errors the limit is lower than the
    Bonferroni bound of normal errors). ``inf`` when no reading is eligible or the test is off.

    Parameters
    ----------
    part_covariance : ndarray, shape (n, n)
    instrument_limit : ndarray, shape (n,)
        Accuracy limit ``a`` of every reading.
    eligible : ndarray of bool, shape (n,)
    significance : float
        Family-wise ``alpha`` (0: no contact test).
    draws, seed : int
        Simulated sets of readings; seed of the generator (fixed: repeatable limits).
    """
    if significance <= 0 or not np.any(eligible):
        return np.inf
    n = instrument_limit.size
    covariance = part_covariance + np.diag(instrument_limit ** 2 / 3.0)
    inverse = cho_solve((cholesky(covariance, lower=True, check_finite=False), True),
                        np.eye(n), check_finite=False)[:, eligible]
    inverse /= np.sqrt(np.diag(inverse[eligible]))[None, :]
    values, vectors = eigh(part_covariance, check_finite=False)
    root = vectors * np.sqrt(np.clip(values, 0.0, None))[None, :]
    rng = np.random.default_rng(seed)
    largest = []
    with single_threaded_blas():
        for start in range(0, draws, DRAW_BLOCK):
            size = min(DRAW_BLOCK, draws - start)
            error = (rng.standard_normal((size, n)) @ root.T
                     + instrument_limit[None, :] * rng.uniform(-1.0, 1.0, (size, n)))
            largest.append((error @ inverse).max(axis=1))
    quantile = float(np.quantile(np.concatenate(largest), 1.0 - significance))
    return max(quantile, 0.0) ** 2


def mean_shift(residual: np.ndarray, covariance: np.ndarray, position: int) -> float:
    """Offset of reading ``position`` that best explains ``residual`` (all readings, the other
    parameters fixed): ``(Sigma^-1 e)_j / (Sigma^-1)_jj``. NaN when a residual is not finite."""
    if not np.all(np.isfinite(residual)):
        return np.nan
    unit = np.zeros(residual.size)
    unit[position] = 1.0
    row = cho_solve((cholesky(covariance, lower=True, check_finite=False), True), unit,
                    check_finite=False)
    return float(row @ residual / row[position])


def contact_drop(drop: float, shift: float, most: float) -> float:
    """The drop with the offset held within ``(0, most]``: the cost is quadratic in the offset
    about its estimate ``shift``, with curvature ``drop / shift^2``."""
    if not shift > 0 or drop <= 0:
        return 0.0
    if shift <= most:
        return drop
    return drop * (1.0 - (1.0 - most / shift) ** 2)


__all__ = ["gross_limit", "contact_limit", "mean_shift", "contact_drop", "CONTACT_KINDS",
           "DEFAULT_CONTACT_MAX_OHMS", "CONTACT_DRAWS"]
