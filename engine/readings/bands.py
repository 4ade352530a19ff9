"""Bands of readings that hold both the instrument's accuracy and the spread of the parts.

A reading's model value assumes every resistor at its nominal value; a built network has parts
anywhere within their tolerance. The part spread of each reading comes from its adjoint
sensitivities (:mod:`.sensitivity`): a resistor ``k`` at its tolerance limit ``t_k R_k`` moves
reading ``i`` by ``c_ik = (dr_i/dR_k) t_k R_k`` (first order).

Two rules combine that spread with the instrument's accuracy limit ``a_i``:

``gum`` (the default), following the Guide to the Expression of Uncertainty in Measurement
(JCGM 100:2008):

* a limit known only as ``±a`` is taken as a rectangular (uniform) distribution, standard
  uncertainty ``a/sqrt(3)`` (§4.3.7); the same for every part's tolerance limit;
* independent contributions combine by root-sum-square, ``u_c^2 = sum u^2`` (§5.1.2, the law of
  propagation of uncertainty for uncorrelated inputs, first order);
* the band is the expanded uncertainty ``U = k u_c`` with coverage factor ``k`` (§6.2.1;
  default 2).

``worst`` (worst case): ``a_i + sum_k |c_ik|``, every limit reached at once in the worse direction.

The full covariance of the readings (parts correlate readings that share resistors) is
``Sigma = diag(u_instrument^2) + P P^T / 3`` with ``P`` the matrix of ``c_ik``; the generalised
least-squares diagnosis (:mod:`.gls`) uses it. Resistors are visited in chunks so that the
sensitivity matrix of a large network is never held whole.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg.blas import dsyrk

from .model import ReadingModel
from .sensitivity import conductance_sensitivity, resistor_candidates

RULES = ("gum", "worst")
DEFAULT_COVERAGE = 2.0
CHUNK = 4096
UNIFORM_VARIANCE = 1.0 / 3.0        # variance of a uniform variable on [-1, 1] (JCGM 100 §4.3.7)


@dataclass(frozen=True)
class PartSpread:
    """Spread of every reading from the part tolerances, summed over all resistors.

    Attributes
    ----------
    worst_case : ndarray, shape (n_readings,)
        ``sum_k |c_ik|``.
    rss : ndarray, shape (n_readings,)
        ``sqrt(sum_k c_ik^2)`` (limits combined by root-sum-square).
    covariance : ndarray or None, shape (n_readings, n_readings)
        ``P P^T / 3``, the covariance of the readings for parts uniform within tolerance
        (None unless asked for).
    """

    worst_case: np.ndarray
    rss: np.ndarray
    covariance: np.ndarray | None

    @property
    def standard(self) -> np.ndarray:
        """Standard uncertainty from the parts, ``rss / sqrt(3)``."""
        return self.rss * np.sqrt(UNIFORM_VARIANCE)


def part_spread(model: ReadingModel, tolerance: np.ndarray, *, covariance: bool = False,
                chunk: int = CHUNK) -> PartSpread:
    """Spread of every reading from the resistors' tolerances, by adjoint sensitivities.

    Parameters
    ----------
    model : ReadingModel
    tolerance : ndarray, shape (n_branches,)
        Relative tolerance of every branch (``0.01`` for 1 %); resistors with a positive
        resistance take part.
    covariance : bool
        Also accumulate the covariance matrix ``P P^T / 3``.
    chunk : int
        Resistors per block of sensitivities.

    Returns
    -------
    PartSpread
        Zero spread for readings without a usable model value.
    """
    net = model.network
    n = model.readings.n
    resistors = resistor_candidates(net)
    tolerance = np.asarray(tolerance, np.float64)
    resistors = resistors[tolerance[resistors] > 0]
    worst, square = np.zeros(n), np.zeros(n)
    matrix = np.zeros((n, n), order="F") if covariance else None
    for start in range(0, resistors.size, chunk):
        part = resistors[start:start + chunk]
        # dr/dR * t R = -(dr/dg) / R^2 * t R = -(dr/dg) * t / R
        contribution = conductance_sensitivity(model, part)
        contribution *= (-tolerance[part] / net.value[part])[:, None]
        contribution[:, ~model.usable] = 0.0
        worst += np.abs(contribution).sum(axis=0)
        square += np.einsum("ki,ki->i", contribution, contribution)
        if matrix is not None:
            # P^T P of the block, upper triangle only (BLAS symmetric rank-k update: half the
            # work of a general product).
            matrix = dsyrk(1.0, contribution.T, beta=1.0, c=matrix, overwrite_c=True)
    if matrix is not None:
        matrix = np.triu(matrix) + np.triu(matrix, 1).T
        matrix *= UNIFORM_VARIANCE
    return PartSpread(worst, np.sqrt(square), matrix)


@dataclass(frozen=True)
class ReadingBands:
    """The allowed deviation of every reading and its two parts.

    Attributes
    ----------
    rule : {"gum", "worst"}
    coverage : float
        Coverage factor ``k`` (``gum``; 1 for ``worst``, where it takes no part).
    instrument : ndarray
        The instrument's accuracy limit ``a``.
    parts : ndarray
        The parts' share: ``k u_parts`` (``gum``) or the worst-case sum (``worst``).
    band : ndarray
        ``k sqrt(a^2/3 + u_parts^2)`` (``gum``) or ``a + worst case`` (``worst``).
    instrument_std, parts_std : ndarray
        Standard uncertainties ``a/sqrt(3)`` and ``rss/sqrt(3)`` (used by ``gum`` and by the
        generalised least-squares diagnosis whatever the rule).
    """

    rule: str
    coverage: float
    instrument: np.ndarray
    parts: np.ndarray
    band: np.ndarray
    instrument_std: np.ndarray
    parts_std: np.ndarray

    @property
    def combined_std(self) -> np.ndarray:
        """``u_c = sqrt(u_instrument^2 + u_parts^2)`` (JCGM 100:2008 §5.1.2)."""
        return np.hypot(self.instrument_std, self.parts_std)


def reading_bands(instrument: np.ndarray, spread: PartSpread, rule: str = "gum",
                  coverage: float = DEFAULT_COVERAGE) -> ReadingBands:
    """Combine the instrument's accuracy limits with the part spread.

    Parameters
    ----------
    instrument : ndarray, shape (n_readings,)
        Accuracy limit ``a`` of every reading (``±a``).
    spread : PartSpread
    rule : {"gum", "worst"}
        Root-sum-square of rectangular standard uncertainties with coverage factor
        (JCGM 100:2008 §4.3.7, §5.1.2, §6.2.1), or the worst case.
    coverage : float
        Coverage factor ``k`` of the ``gum`` rule.

    Raises
    ------
    ValueError
        On an unknown rule or a coverage factor that is not positive.
    """
    if rule not in RULES:
        raise ValueError(f"unknown band rule {rule!r} (expected {' or '.join(RULES)})")
    if not coverage > 0:
        raise ValueError("the coverage factor must be positive")
    instrument = np.asarray(instrument, np.float64)
    u_instrument = instrument * np.sqrt(UNIFORM_VARIANCE)
    u_parts = spread.standard
    if rule == "gum":
        parts = coverage * u_parts
        band = coverage * np.hypot(u_instrument, u_parts)
    else:
        coverage = 1.0
        parts = spread.worst_case
        band = instrument + parts
    return ReadingBands(rule, float(coverage), instrument, parts, band, u_instrument, u_parts)


__all__ = ["part_spread", "PartSpread", "reading_bands", "ReadingBands", "RULES",
           "DEFAULT_COVERAGE"]
