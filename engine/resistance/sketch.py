"""Whole-network resistance quantities: the resistance across every resistor, the Kirchhoff index.

Each comes exact (one solve per unknown, read in blocks, never an ``n x n`` matrix) or as a
randomised estimate with its error stated:

* across every resistor, the random projection of Spielman & Srivastava ("Graph sparsification
  by effective resistances", STOC 2008): ``R_e = ||W^{1/2} B L^+ (e_u - e_v)||^2`` is kept
  to within ``1 ± ε`` for every resistor at once (probability at least ``1 - 1/n``) by the
  Johnson–Lindenstrauss sketch ``Z = Q W^{1/2} B L^+`` with ``Q`` a ``k x m`` matrix of
  ``±1/sqrt(k)`` entries and ``k >= 24 ln n / ε²``; ``Z`` costs ``k`` solves. A single
  resistor's estimate is a sum of ``k`` squared projections: with Gaussian entries it is
  ``R_e χ²_k / k``, of relative standard deviation ``sqrt(2/k)``, and the ±1 entries concentrate
  at least as well (Achlioptas, J. Comput. Syst. Sci. 66, 671–687, 2003);
* the Kirchhoff index ``Kf = Σ_{i<j} R_ij = n trace(L^+)`` (Klein & Randić, J. Math. Chem. 12,
  81–95, 1993), with Hutchinson's trace estimator (Comm. Stat. Simul. Comput. 18, 1059–1076,
  1989): ``trace(M) = E[z^T M z]`` for Rademacher ``z``, the confidence interval being the sample
  mean ± z_{(1+c)/2} · std / sqrt(samples).

The functions take a :class:`~ohmgraph.engine.resistance.ResistanceSolver`, whose one shared
solver does every solve. Nodes merged by ideal connections are counted with their multiplicity
``w_s`` (nodes per supernode): ``Kf = n Σ_s w_s G_ss - w^T G w`` for the grounded Green's function
``G`` of a connected network, which equals ``n trace(W^{1/2} P^T G P W^{1/2})`` with
``P = I - w 1^T / n``; the sampled vectors ``P W^{1/2} z`` carry no net current, so each sample is
independent of the choice of ground.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .accuracy import ASSEMBLY, MARGIN, UNIT_ROUNDOFF
from .progress import Tracker, first_then_blocks

# Unknowns up to which "exact=None" computes exact values (one solve per unknown).
EXACT_UNKNOWN_LIMIT = 3000
# Floats held by one block of right-hand sides (columns x rows); 2**24 is 128 MiB.
BLOCK_FLOATS = 2 ** 24
MAX_BLOCK_COLUMNS = 64
# Relative error for every resistor at once when neither a size, an epsilon nor a budget is given.
DEFAULT_EPSILON = 0.1
# Smallest sketch a time budget may choose (below it the per-resistor spread sqrt(2/k) is > 35%).
MIN_BUDGET_SKETCH = 16


@dataclass(frozen=True)
class ResistorResistances:
    """Effective resistance across every resistor of a network.

    Attributes
    ----------
    branches : ndarray of int64
        Network indices of the resistors.
    ohms : ndarray of float64
        Effective resistance across each (0 for a resistor shorted by ideal connections).
    resistor_ohms : ndarray of float64
        The resistor's own value; ``ohms / resistor_ohms`` is its share of the spanning trees.
    exact : bool
    accuracy : ndarray of float64
        Exact: a relative error bound from the solve residuals. Sketch: the relative standard
        deviation ``sqrt(2/k)`` of each estimate.
    sketch_size : int
        ``k`` (0 when exact).
    epsilon_all : float
        Sketch: ``sqrt(24 ln n / k)``, the relative error every resistor stays within at once
        with probability at least ``1 - 1/n`` (Spielman & Srivastava); 0 when exact.
    solves : int
    seconds : float
    """

    branches: np.ndarray
    ohms: np.ndarray
    resistor_ohms: np.ndarray
    exact: bool
    accuracy: np.ndarray
    sketch_size: int
    epsilon_all: float
    solves: int
    seconds: float


@dataclass(frozen=True)
class KirchhoffIndex:
    """The Kirchhoff index (sum of the effective resistances of all node pairs), in ohms.

    Attributes
    ----------
    value : float
        ``inf`` when the network has more than one island.
    exact : bool
    low, high : float
        Exact: ``value`` ± the error bound; estimate: the confidence interval.
    confidence : float
        Level of the interval (for example 0.95).
    std_error : float
        Standard error of the estimate (0 when exact).
    samples : int
        Hutchinson samples (0 when exact).
    solves : int
    seconds : float
    accuracy : float
        Exact: a relative error bound covering the solves' residuals and the rounding of the
        conductances and the sums (:func:`_exact_kirchhoff`); estimate: 0 (see ``std_error``).
    """

    value: float
    exact: bool
    low: float
    high: float
    confidence: float
    std_error: float
    samples: int
    solves: int
    seconds: float
    accuracy: float = 0.0


def block_columns(rows: int) -> int:
    """Right-hand sides per block (at most :data:`MAX_BLOCK_COLUMNS` and :data:`BLOCK_FLOATS`)."""
    return int(max(1, min(MAX_BLOCK_COLUMNS, BLOCK_FLOATS // max(rows, 1))))


def sketch_size(n: int, epsilon: float) -> int:
    """Sketch size ``k = ceil(24 ln n / ε²)`` for relative error ``ε`` on all resistors at once."""
    return int(math.ceil(24.0 * math.log(max(n, 2)) / epsilon ** 2))


def budget_sketch_size(budget_seconds: float, seconds_per_solve: float) -> int:
    """The sketch size whose solves fit ``budget_seconds`` at the timed rate (at least
    :data:`MIN_BUDGET_SKETCH`)."""
    return max(MIN_BUDGET_SKETCH, int(budget_seconds / max(seconds_per_solve, 1e-9)))


def sketch_epsilon(n: int, k: int) -> float:
    """``sqrt(24 ln n / k)``: the relative error every resistor stays within at once with
    probability at least ``1 - 1/n`` for sketch size ``k`` (inverse of :func:`sketch_size`)."""
    return math.sqrt(24.0 * math.log(max(n, 2)) / k)


def _unknown_blocks(solver, tracker: Tracker):
    """Yield ``(unknowns, X, l1)``: blocks of columns of ``A^{-1}`` (the first one alone, timed),
    with a bound on each column's exact residual ``||r||_1``."""
    n = solver.free.size
    for part in first_then_blocks(n, block_columns(n)):
        tracker.block()
        cols = np.arange(part.start, part.stop)
        rhs = np.zeros((n, cols.size))
        rhs[cols, np.arange(cols.size)] = 1.0
        x = solver.solve_block(rhs)
        yield cols, x, solver.meter.residual_l1(rhs, x)
        tracker.done(cols.size)


def across_resistors(solver, exact=None, epsilon: float | None = None, k: int | None = None,
                     seed: int = 0, progress=None, announce=None,
                     time_budget: float | None = None) -> ResistorResistances:
    """Effective resistance across every resistor.

    Parameters
    ----------
    solver : ResistanceSolver
    exact : bool, optional
        ``None`` chooses: exact when the unknowns are at most :data:`EXACT_UNKNOWN_LIMIT` or no
        more than the sketch size ``k``.
    epsilon : float, optional
        Target relative error for every resistor at once; sets ``k = ceil(24 ln n / ε²)``.
    k : int, optional
        Sketch size, overriding ``epsilon`` and ``time_budget``.
    seed : int
        Seed of the random projection.
    progress : callable, optional
        Called with the number of right-hand sides solved after each block.
    announce : callable, optional
        Called once with the :class:`~ohmgraph.engine.resistance.progress.Plan`, after the
        first timed solve.
    time_budget : float, optional
        Seconds the sketch may take, used when neither ``k`` nor ``epsilon`` is given: one
        projection is solved and timed first, and ``k`` is what fits the budget at that rate
        (:func:`budget_sketch_size`); :attr:`ResistorResistances.epsilon_all` says which
        accuracy that gives. Without any of the three, ``epsilon`` is
        :data:`DEFAULT_EPSILON`.
    """
    start = time.perf_counter()
    before = solver.stats.solves
    branches, a, b, resistor_ohms = solver.resistor_endpoints()
    n_unknowns, n = solver.free.size, solver.graph.n_supernodes
    if k is not None:
        k = int(k)
        if k < 1:
            raise ValueError("the sketch size must be at least 1")
    elif epsilon is not None or time_budget is None:
        k = sketch_size(n, DEFAULT_EPSILON if epsilon is None else epsilon)
    if exact is None and n_unknowns <= EXACT_UNKNOWN_LIMIT:
        exact = True
    live = (a != b) & (resistor_ohms > 0)
    projection = _Projection(solver, a[live], b[live], resistor_ohms[live], seed)
    rate = None
    if exact is not True and k is None:              # a budget: time one projection first
        solver.prepare(min(n_unknowns, sketch_size(n, DEFAULT_EPSILON)))
        clock = time.perf_counter()
        projection.add(1)
        rate = time.perf_counter() - clock
        k = budget_sketch_size(time_budget, rate)
    if exact is None:
        exact = n_unknowns <= k
    ohms = np.zeros(branches.size)
    accuracy = np.zeros(branches.size)
    if exact:
        solver.prepare(n_unknowns)
        tracker = Tracker(n_unknowns, "exact: one solve per unknown", progress, announce)
        ohms[live], accuracy[live] = _exact_across(solver, a[live], b[live], tracker)
        k_used, epsilon_all = 0, 0.0
    else:
        solver.prepare(k)
        tracker = Tracker(k, "sketch", progress, announce, seconds_per_solve=rate)
        tracker.start()
        if projection.columns:
            tracker.done(projection.columns)
        projection.add(k - projection.columns, tracker)
        ohms[live] = projection.values()
        accuracy[live] = math.sqrt(2.0 / k)
        k_used, epsilon_all = k, sketch_epsilon(n, k)
    return ResistorResistances(branches, ohms, resistor_ohms, bool(exact), accuracy, k_used,
                               epsilon_all, solver.stats.solves - before,
                               time.perf_counter() - start)


def _exact_across(solver, a, b, tracker: Tracker):
    """``G_aa + G_bb - 2 G_ab`` from the columns of ``A^{-1}`` (grounded entries are 0), with
    the first-order bounds of :meth:`ResistanceSolver.first_order_bounds`."""
    ua, ub = solver.unknown_of[a], solver.unknown_of[b]
    n = solver.free.size
    diagonal, residual_l1 = np.zeros(n + 1), np.zeros(n + 1)   # slot n: grounded, stays 0
    cross = np.zeros(a.size)
    for cols, x, l1 in _unknown_blocks(solver, tracker):
        diagonal[cols] = x[cols, np.arange(cols.size)]
        residual_l1[cols] = l1
        hit = np.flatnonzero((ua >= cols[0]) & (ua <= cols[-1]) & (ub >= 0))
        cross[hit] = x[ub[hit], ua[hit] - cols[0]]
    values = diagonal[ua] + diagonal[ub] - 2.0 * cross        # index -1 reads slot n
    bounds = solver.first_order_bounds(values, residual_l1[ua], residual_l1[ub], diagonal[ua],
                                       diagonal[ub], cross, solver.island[a])
    return values, bounds


class _Projection:
    """Spielman–Srivastava sums ``Σ_i (z_i[a] - z_i[b])^2`` with ``z_i = G B^T W^{1/2} q_i``,
    accumulated a block of random projections ``q_i`` at a time."""

    def __init__(self, solver, a, b, resistor_ohms, seed):
        self.solver, self.a, self.b = solver, a, b
        self.rng = np.random.default_rng(seed)
        m, n_super = a.size, solver.graph.n_supernodes
        edges = np.arange(m)
        self.incidence_t = sp.csr_matrix(
            (np.concatenate([np.ones(m), -np.ones(m)]),
             (np.concatenate([a, b]), np.concatenate([edges, edges]))), shape=(n_super, m))
        self.scale = np.sqrt(1.0 / resistor_ohms)
        self.sums = np.zeros(m)
        self.columns = 0

    def add(self, count: int, tracker: Tracker | None = None) -> None:
        """Solve ``count`` more projections."""
        solver = self.solver
        ua, ub = solver.unknown_of[self.a], solver.unknown_of[self.b]
        step = block_columns(max(solver.free.size, self.a.size))
        for part in first_then_blocks(count, step):
            if tracker is not None:
                tracker.block()
            cols = part.stop - part.start
            signs = self.rng.integers(0, 2, size=(self.a.size, cols), dtype=np.int8) * 2.0 - 1.0
            rhs = (self.incidence_t @ (signs * self.scale[:, None]))[solver.free]
            z = np.vstack([solver.solve_block(rhs), np.zeros((1, cols))])   # last row: ground
            self.sums += ((z[ua] - z[ub]) ** 2).sum(axis=1)
            self.columns += cols
            if tracker is not None:
                tracker.done(cols)

    def values(self) -> np.ndarray:
        """The estimates ``R_e`` (the sums over ``k`` projections divided by ``k``)."""
        return self.sums / self.columns


def kirchhoff_index(solver, exact=None, samples: int = 200, seed: int = 0,
                    confidence: float = 0.95, progress=None, announce=None) -> KirchhoffIndex:
    """The Kirchhoff index of the network (all node pairs, ideal connections counted as 0 ohm).

    Parameters
    ----------
    solver : ResistanceSolver
    exact : bool, optional
        ``None`` chooses exact when the unknowns are at most :data:`EXACT_UNKNOWN_LIMIT` or no
        more than ``samples``.
    samples : int
        Hutchinson samples (right-hand sides) for the estimate.
    seed : int
    confidence : float
        Level of the reported confidence interval (normal approximation).
    progress, announce : callable, optional
        As for :func:`across_resistors`.
    """
    start = time.perf_counter()
    before = solver.stats.solves
    if solver.n_islands > 1:
        return KirchhoffIndex(math.inf, True, math.inf, math.inf, confidence, 0.0, 0, 0,
                              time.perf_counter() - start)
    n_unknowns = solver.free.size
    if exact is None:
        exact = n_unknowns <= EXACT_UNKNOWN_LIMIT or n_unknowns <= samples
    solver.prepare(n_unknowns + 1 if exact else samples)
    if exact:
        tracker = Tracker(n_unknowns + 1, "exact: one solve per unknown", progress, announce)
        value, bound = _exact_kirchhoff(solver, tracker)
        return KirchhoffIndex(value, True, value - bound, value + bound, confidence, 0.0, 0,
                              solver.stats.solves - before, time.perf_counter() - start,
                              bound / value if value > 0 else 0.0)
    if samples < 2:
        raise ValueError("Hutchinson's estimate needs at least 2 samples")
    tracker = Tracker(samples, "Hutchinson samples", progress, announce)
    values = _hutchinson_samples(solver, samples, seed, tracker)
    mean = float(values.mean())
    std_error = float(values.std(ddof=1) / math.sqrt(samples))
    from scipy.stats import norm     # here: scipy.stats takes 0.3 s to import

    half = float(norm.ppf(0.5 + confidence / 2.0)) * std_error
    return KirchhoffIndex(mean, False, mean - half, mean + half, confidence, std_error, samples,
                          solver.stats.solves - before, time.perf_counter() - start)


def _exact_kirchhoff(solver, tracker: Tracker) -> tuple[float, float]:
    """``Kf = n Σ_s w_s G_ss - w^T G w`` over the free supernodes (weights ``w``: nodes per
    supernode), and a bound on its absolute error.

    Each ``G_ss`` is read from the solve of ``e_s``, ``x = A^{-1} (e_s - r)``; its error
    ``(A^{-1} r)_s`` is at most ``D ||r||_1`` (entries of ``A^{-1}`` are at most the ground
    distance ``D``). ``w^T G w`` is the energy estimate of the solve of ``w`` (error: its rounding
    plus ``||r||_1^2 D``). Both sums are correctly rounded (:func:`math.fsum`, each product
    adding one rounding); the conductances move ``Kf``, a sum of resistances, by at most a
    relative :data:`~ohmgraph.engine.resistance.accuracy.ASSEMBLY`.
    """
    n = solver.n_nodes
    weight = solver.supernode_size[solver.free].astype(np.float64)
    diagonal, residual_l1 = np.zeros(weight.size), np.zeros(weight.size)
    for cols, x, l1 in _unknown_blocks(solver, tracker):
        diagonal[cols] = x[cols, np.arange(cols.size)]
        residual_l1[cols] = l1
    tracker.block()
    rhs = weight[:, None]
    green_w = solver.solve_block(rhs)
    tracker.done(1)
    quadratic, linear = solver.meter.energy_estimates(rhs, green_w)
    residual, slack = solver.meter.residual(rhs, green_w)
    quadratic_error = linear[0] + solver.residual_energy_bound(np.abs(residual) + slack)[0]
    products = weight * diagonal
    first = n * math.fsum(products.tolist())
    value = first - float(quadratic[0])
    distance = solver.ground_distance[0]            # one island
    error = (n * distance * float(weight @ residual_l1)
             + 2.0 * UNIT_ROUNDOFF * abs(first) + quadratic_error
             + (ASSEMBLY + UNIT_ROUNDOFF) * abs(value))
    return value, error * MARGIN


def _hutchinson_samples(solver, samples, seed, tracker: Tracker):
    """Samples ``n v^T G v`` with ``v = P W^{1/2} z``, ``z`` Rademacher over the supernodes."""
    rng = np.random.default_rng(seed)
    n = solver.n_nodes
    root_w = np.sqrt(solver.supernode_size.astype(np.float64))
    weight = solver.supernode_size.astype(np.float64)
    out = np.empty(samples)
    for part in first_then_blocks(samples, block_columns(solver.free.size)):
        tracker.block()
        cols = part.stop - part.start
        z = rng.integers(0, 2, size=(root_w.size, cols), dtype=np.int8) * 2.0 - 1.0
        v = root_w[:, None] * z
        v -= weight[:, None] * (v.sum(axis=0) / n)
        rhs = v[solver.free]
        x = solver.solve_block(rhs)
        out[part] = n * np.einsum("ij,ij->j", rhs, x)
        tracker.done(cols)
    return out
