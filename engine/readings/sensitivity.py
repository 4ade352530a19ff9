"""Adjoint sensitivities of readings to every resistor, tolerance spread and Monte Carlo.

For a reading ``r = w^T x + ...`` on the reduced system ``A x = b``, a change ``dg`` of resistor
``k``'s conductance adds ``dg c_k c_k^T`` to ``A``; by the adjoint method (Director & Rohrer,
IEEE Trans. Circuit Theory 16(3), 1969: the adjoint network) one solve ``lambda = A^{-1} w`` per
reading gives its derivative with respect to every resistor at once::

    dr/dg_k = v_k (beta_k - c_k^T lambda)        (powered network: V and I readings)
    dr/dg_k = -(c_k^T lambda)^2                   (two-point resistance, passive network)

with ``v_k`` the resistor's branch voltage and ``beta_k`` its coefficient in a current reading
(:mod:`ohmgraph.engine.readings.model`). For a resistance, ``dr/dR_k = -(dr/dg_k) / R_k^2``.

The spread of a reading from component tolerances ``t_k`` (fractions of ``R_k``) to first order
is the worst case ``sum_k |dr/dR_k| t_k R_k`` and the root-sum-square ``sqrt(sum_k (dr/dR_k t_k
R_k)^2)``; Monte Carlo re-solves the network with values drawn uniformly within the tolerances
(the usual reading of a tolerance as a limit; common practice) to confirm the linear estimate,
whose standard deviation for that distribution is ``rss / sqrt(3)`` (the variance of a uniform
variable on ``[-t, t]`` is ``t^2/3``; sums of independent variables add variances).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..formulation import assemble
from ..network import RESISTOR, Network
from ..session import SolveSession
from ..solvers import DEFAULT_RTOL
from .model import POWERED, ReadingModel, ReadingSystem, build_model

SELF_RESISTANCE_BATCH = 64


def resistor_candidates(net: Network) -> np.ndarray:
    """Indices of the resistors with a positive, finite resistance (ideal connections excluded)."""
    return np.flatnonzero((net.kind == RESISTOR) & (net.value > 0) & np.isfinite(net.value))


def conductance_sensitivity(model: ReadingModel, branches: np.ndarray) -> np.ndarray:
    """First-order change of every reading per siemens of each resistor's conductance.

    Parameters
    ----------
    model : ReadingModel
    branches : ndarray of int64, shape (k,)
        Resistors (positive resistance).

    Returns
    -------
    ndarray, shape (k, n_readings)
        ``dr_i / dg_k`` (volts, amperes or ohms per siemens).
    """
    net = model.network
    branches = np.asarray(branches, np.int64)
    out = None
    for name, rs in model.systems.items():
        along = rs.incidence_products(net, branches, rs.solve_adjoint())
        if name == POWERED:
            if rs.direct.nnz:
                along -= rs.direct.tocsc()[:, branches].T.toarray()
            along *= -rs.branch_voltage[branches][:, None]
        else:
            np.square(along, out=along)
            along *= -1.0
        if rs.rows.size == model.readings.n:          # every reading on this network
            return along
        if out is None:
            out = np.zeros((branches.size, model.readings.n))
        out[:, rs.rows] = along
    return out


def resistance_sensitivity(model: ReadingModel, branches: np.ndarray) -> np.ndarray:
    """``dr_i / dR_k`` (per ohm) of every reading to each resistor, shape ``(k, n_readings)``."""
    ohms = model.network.value[np.asarray(branches, np.int64)]
    return -conductance_sensitivity(model, branches) / ohms[:, None] ** 2


def grounded_self_resistance(rs: ReadingSystem, net: Network, branches: np.ndarray,
                             batch: int = SELF_RESISTANCE_BATCH) -> np.ndarray:
    """``c_k^T A^{-1} c_k`` for each resistor: its own effective resistance in the system.

    One solve per resistor (in blocks of ``batch`` columns). The value is zero for a resistor
    inside one supernode or between two known potentials.
    """
    branches = np.asarray(branches, np.int64)
    ua = rs.node_unknown(net.from_node[branches])
    ub = rs.node_unknown(net.to_node[branches])
    result = np.zeros(branches.size)
    active = np.flatnonzero(ua != ub)
    n = rs.system.n_unknowns
    rs.session.expect(active.size)
    for start in range(0, active.size, batch):
        chosen = active[start:start + batch]
        columns = np.arange(chosen.size)
        block = np.zeros((n, chosen.size))
        has_a, has_b = ua[chosen] >= 0, ub[chosen] >= 0
        block[ua[chosen][has_a], columns[has_a]] = 1.0
        block[ub[chosen][has_b], columns[has_b]] = -1.0
        solved = rs.session.solve(block)
        result[chosen] = ((np.where(has_a, solved[np.maximum(ua[chosen], 0), columns], 0.0))
                          - np.where(has_b, solved[np.maximum(ub[chosen], 0), columns], 0.0))
    return result


@dataclass(frozen=True)
class ToleranceSpread:
    """First-order spread of readings from resistor tolerances.

    Attributes
    ----------
    resistors : ndarray of int64, shape (k,)
        Branch indices of the resistors.
    sensitivity : ndarray, shape (n_readings, k)
        ``dr/dR`` per ohm.
    contribution : ndarray, shape (n_readings, k)
        ``dr/dR * t * R``: the change of each reading at each resistor's tolerance limit.
    worst_case : ndarray, shape (n_readings,)
        ``sum |contribution|``.
    rss : ndarray, shape (n_readings,)
        ``sqrt(sum contribution^2)``.
    """

    resistors: np.ndarray
    sensitivity: np.ndarray
    contribution: np.ndarray
    worst_case: np.ndarray
    rss: np.ndarray

    @property
    def linear_std_uniform(self) -> np.ndarray:
        """Standard deviation the linear model predicts for values uniform within tolerance."""
        return self.rss / np.sqrt(3.0)

    def top_contributors(self, reading: int, count: int = 5) -> np.ndarray:
        """Positions (into :attr:`resistors`) of the largest contributions to one reading."""
        size = np.abs(self.contribution[reading])
        return np.argsort(-size, kind="stable")[:count]


def tolerance_spread(model: ReadingModel, tolerance: np.ndarray) -> ToleranceSpread:
    """Worst-case and root-sum-square spread of every reading from resistor tolerances.

    Parameters
    ----------
    model : ReadingModel
    tolerance : ndarray, shape (n_branches,)
        Relative tolerance of every branch (``0.01`` for 1 %); only resistors with a positive
        resistance are used.
    """
    net = model.network
    resistors = resistor_candidates(net)
    sensitivity = resistance_sensitivity(model, resistors).T
    limit = np.asarray(tolerance, np.float64)[resistors] * net.value[resistors]
    contribution = sensitivity * limit[None, :]
    return ToleranceSpread(resistors, sensitivity, contribution,
                           np.abs(contribution).sum(axis=1),
                           np.sqrt((contribution ** 2).sum(axis=1)))


@dataclass(frozen=True)
class MonteCarloSpread:
    """Readings re-computed with resistor values drawn uniformly within their tolerances.

    Attributes
    ----------
    values : ndarray, shape (samples, n_readings)
    nominal : ndarray, shape (n_readings,)
    seed : int
    """

    values: np.ndarray
    nominal: np.ndarray
    seed: int

    @property
    def std(self) -> np.ndarray:
        return self.values.std(axis=0, ddof=1)

    @property
    def low(self) -> np.ndarray:
        return self.values.min(axis=0)

    @property
    def high(self) -> np.ndarray:
        return self.values.max(axis=0)


def monte_carlo(model: ReadingModel, tolerance: np.ndarray, samples: int, seed: int = 0,
                on_sample=None, *, method: str = "auto",
                rtol: float = DEFAULT_RTOL) -> MonteCarloSpread:
    """Re-solve the network ``samples`` times with values uniform within tolerance.

    For voltage readings the structure is reused: ideal connections and sources are unchanged,
    so the contraction and pinned nodes of the nominal solve stay valid and only the reduced
    system is re-assembled and solved. With resistance or current readings every sample builds
    the reading model of the sampled network afresh (:func:`.model.build_model`).

    Parameters
    ----------
    model : ReadingModel
    tolerance : ndarray, shape (n_branches,)
        Relative tolerance of every branch; only resistors with positive resistance vary.
    samples : int
    seed : int
        Seed of the NumPy random generator.
    on_sample : callable, optional
        Called with no argument after every sample (progress display).
    method, rtol
        Solver of the fresh models (resistance or current readings).
    """
    readings = model.readings
    net = model.network
    voltages_only = bool(np.all(readings.kind == "V"))
    report = model.solution.report if voltages_only else None
    resistors = resistor_candidates(net)
    spread = np.asarray(tolerance, np.float64)[resistors]
    generator = np.random.default_rng(seed)
    values = np.empty((samples, readings.n))
    for sample in range(samples):
        ohms = net.value.copy()
        ohms[resistors] *= 1.0 + spread * generator.uniform(-1.0, 1.0, resistors.size)
        if not voltages_only:
            values[sample] = build_model(net.with_values(ohms), readings, method=method,
                                         rtol=rtol).model_value
            if on_sample is not None:
                on_sample()
            continue
        system = assemble(net.with_values(ohms), report.contraction, report.pinned_nodes)
        x = SolveSession(system.matrix, model.solution.method,
                         model.solution.rtol).solve(system.rhs)
        volts = system.node_voltages(x)
        values[sample] = volts[readings.node_a] - volts[readings.node_b]
        if on_sample is not None:
            on_sample()
    return MonteCarloSpread(values, model.model_value.copy(), seed)


__all__ = ["conductance_sensitivity", "resistance_sensitivity", "grounded_self_resistance",
           "tolerance_spread", "ToleranceSpread", "monte_carlo", "MonteCarloSpread",
           "resistor_candidates"]
