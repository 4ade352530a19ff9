"""How ``auto`` picks a back end for a matrix and a number of right-hand sides: by predicted
cost, within a memory budget.

``direct`` is predicted from the symbolic analysis of its own factor
(:func:`.symbolic.column_counts`: the approximate-minimum-degree order the factorisation will
use, the elimination tree and the column counts), so its size ``nnz(L)`` and its work
``Σ colcount²`` are exact; only the seconds per unit of work are calibrated. ``amg-cg`` is
predicted from ``nnz(A)``, a typical iteration count and an estimate of the multigrid operator
complexity (the total entries of every level over ``nnz(A)``). Each prediction is seconds for the
set-up plus every right-hand side, and peak bytes; ``auto`` takes the cheaper in seconds among
those that fit the memory budget.

The analysis itself costs about as much as a fifth of one ``amg-cg`` solve of a lattice. When it
would be a noticeable part of the expected work (few right-hand sides on a large matrix), a
screen estimates the factor first from two nested breadth-first balls of ``n/64`` and ``n/16``
unknowns (their counts, extrapolated along the growth exponent they show); if that estimate,
the analysis included, makes ``direct`` clearly dearer than ``amg-cg``, or clearly too large for
the budget, the analysis is skipped and ``amg-cg`` chosen. When neither back end is predicted to
fit the budget, :class:`~.base.SolverFailed` says so rather than exceed it.

``ac-cg`` (approximate Cholesky + CG, :mod:`.ac_cg`) is a candidate for grounded Laplacians
(nonpositive off-diagonal entries, diagonally dominant rows: what ``assemble`` builds). It is
predicted from ``nnz(A)``: a factorisation cost per entry and, per right-hand side, an iteration
count that grows with the digits asked for (``AC_ITERATIONS_PER_DECADE`` times
``-log10(rtol)``) times a cost per entry and iteration. The iterative candidate is the cheaper of
``amg-cg`` and ``ac-cg`` that fits the budget; it stands against ``direct`` as ``amg-cg`` alone
did before. When ac-cg is predicted cheaper than amg-cg at its floor complexity (its least) and
than the least a factorisation could cost (:func:`direct_floor`: its analysis and per-entry terms),
on at least ``SCREEN_MIN_UNKNOWNS`` unknowns, neither the screen nor the analysis is made.

The choice is a :class:`Choice`: the method, the reason in words and the numbers behind it, so a
caller can show and store why a method was used.

A prediction can miss: an iterative back end's iterations and cost per iteration depend on the
graph more than its entries say. :func:`direct_for_the_rest` therefore re-decides during a long
query, from the iterative back end's MEASURED seconds per right-hand side: when a factorisation
(analysis, factorisation and the remaining solves, by the same calibration) is predicted
``RECONSIDER_MARGIN`` times cheaper than the rest of the query at that pace and fits the budget,
the session switches (:meth:`ohmgraph.engine.session.SolveSession.solve`).

Calibration
-----------
``ac-cg`` (2026-12-03, same machine, process CPU seconds because the load average was 5 to 7):
the three systems of ``benchmarks/bench_peers.py`` (a 1000 x 1000 lattice with log-uniform
conductances, a two-layer mesh, a 3-nearest-neighbour graph; about 10^6 unknowns and 5 x 10^6
entries each) and the small random graphs of ``tests/test_ac_cg.py``: factorisation 185-320 ns
per entry, 5.0-6.6 ns per entry and iteration, 29-31 iterations at rtol 1e-8.

Every constant below was measured on the development machine (2 cores shared with other work,
BLAS on one thread, 2026-12-03) on reduced systems of ``ohmgraph.datasets.generators``: lattices
of 10^4 to 2.5 x 10^5 unknowns, two-layer meshes of 5 x 10^4 and 2 x 10^5, 4-nearest-neighbour
graphs of 2 x 10^4 and 10^5, Watts–Strogatz (k = 4, p = 0.1) and Barabási–Albert (m = 2) graphs
of 5 x 10^3 to 10^5 (least squares on relative error; single timings varied by up to 30 %).
``benchmarks/bench_auto_choice.py`` checks the resulting choices against measured times.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.sparse.csgraph import breadth_first_order

from ..memory import default_memory_budget
from .base import DEFAULT_RTOL, SolverFailed
from .symbolic import FactorAnalysis, column_counts

# direct (SuperLU in the analysed order), seconds and bytes
ANALYSIS_SECONDS_PER_ENTRY = 3.0e-7     # AMD order + column counts, per entry of A (70-460 ns)
FACTOR_SECONDS_PER_FLOP = 1.8e-10       # numeric factorisation per multiply-add Σ colcount²
FACTOR_SECONDS_PER_ENTRY = 2.5e-7       # per entry of A: permutation, SuperLU's own set-up
SOLVE_SECONDS_PER_FACTOR_ENTRY = 8e-10  # per right-hand side: forward and back substitution
SOLVE_SECONDS_PER_UNKNOWN = 2.4e-8      # per right-hand side and unknown (permuting, blocks)
DIRECT_BYTES_PER_FACTOR_ENTRY = 32.0    # peak resident bytes per entry of L: measured 23-32
DIRECT_BYTES_PER_ENTRY = 24.0           # the permuted copy of A and its pattern

# amg-cg (pyamg Ruge–Stüben + CG), per entry of A times the operator complexity. Measured:
# set-up 32-75 ns on lattices, meshes and the random graphs, 170 ns on the k-NN graph (whose
# conductances vary); per CG iteration 3-6 ns, 18 on the k-NN graph. The constants sit between,
# nearer the fast end, so that the uniform lattices still go to amg-cg and the k-NN graphs, whose
# factor hardly fills, to direct.
AMG_SETUP_SECONDS = 1.0e-7
AMG_ITERATION_SECONDS = 8e-9
AMG_ITERATIONS = 12                     # measured 9 to 15 at rtol 1e-10 on all of the above
AMG_BYTES_PER_ENTRY = 20.0              # peak bytes: measured 14-20
# Operator complexity: at least COMPLEXITY_FLOOR (lattices, meshes, k-NN: 2.0-3.2); it grows
# with the factor's mean front F = flops / nnz(L) beyond the planar sqrt(n) and with the spread
# of the row degrees d (delta = n Σd² / nnz(A)²: 1 on a lattice, 3 on a Barabási–Albert graph):
# COMPLEXITY_SLOPE (F / sqrt(n)) delta², which fits the Watts–Strogatz complexities 6-40 and the
# Barabási–Albert ones 38-348 above within a factor of 2.
COMPLEXITY_FLOOR = 2.2
COMPLEXITY_SLOPE = 1.7

# amg-cg is relatively cheaper on matrices of even weights and degrees: ac-cg's prediction is
# divided by min(1, AMG_EVEN_BASE + AMG_EVEN_SLOPE * irregularity) (amg-cg's own, calibrated
# on uniform lattices among others, stays), irregularity = the mean within-row
# standard deviation of log10 conductance + AMG_DEGREE_WEIGHT * (delta - 1) (delta: the degree
# spread above). Measured (CPU seconds per 10^6 entries, rtol 1e-8, one right-hand side): a
# uniform lattice (irregularity 0.01) 0.21, the two-layer mesh (0.21) 0.31, the 3-NN graph
# (0.47) 0.51, the lattice of log-uniform conductances (0.47) 0.49; ac-cg 0.33-0.41 on all four.
AMG_EVEN_BASE = 0.43
AMG_EVEN_SLOPE = 1.22
AMG_DEGREE_WEIGHT = 6.0
VARIATION_ROWS = 50_000                 # rows sampled for the weight variation

# ac-cg (approximate Cholesky + CG), per entry of A
AC_SETUP_SECONDS = 2.2e-7
AC_ITERATION_SECONDS = 4.6e-9
AC_ITERATIONS_PER_DECADE = 3.9          # 29-31 iterations at rtol 1e-8
# Peak bytes: the edge pool, the factor, the permuted matrix and CG's vectors. Engine solve of
# a 700 x 700 lattice: ac-cg added 193 MB, amg-cg 212 MB; scaled to amg-cg's model (44 B per
# entry at the floor complexity).
AC_BYTES_PER_ENTRY = 40.0
# From .ac_split.MIN_UNKNOWNS unknowns, with two threads allowed, ac-cg factors and iterates in
# two threads (one level of nested dissection): measured 0.63 (a 1000 x 1000 lattice of
# log-uniform conductances: 0.998 s against 1.578 s) and 0.67 (a 3-NN graph: 0.969 against
# 1.442 s) of its one-thread time, set-up and solve (2 cores, 2026-12-03); the peak grows by
# about 0.09 GB at 10^6 unknowns, within AC_BYTES_PER_ENTRY's margin.
AC_TWO_THREADS = 0.65

# The screen: used when the analysis would cost more than SCREEN_SHARE of amg-cg's cheapest
# prediction, on at least SCREEN_MIN_UNKNOWNS unknowns; skips the analysis when the sampled
# estimate of direct (its analysis included) is SCREEN_MARGIN times dearer than amg-cg, or
# SCREEN_MARGIN times larger than the budget.
SCREEN_SHARE = 0.1
SCREEN_MIN_UNKNOWNS = 64_000
SCREEN_MARGIN = 1.5
SCREEN_BALLS = (64, 16)

# Re-deciding during a query: the factorisation must be predicted this many times cheaper than
# the rest of the query at the iterative back end's measured pace. Measured at 10^5 unknowns
# (2026-12-03): a first one-column solve took 1.00-1.20x the seconds per column of the blocks
# after it (ac-cg on a lattice, a small world and a scale-free graph; amg-cg on the lattice), and
# direct's prediction came within 5 % of its measured time on the two graphs (117.7 s predicted
# against 112.4 s, 99.9 against 98.3, 1,000 right-hand sides). A wrong switch can therefore cost
# at most about 1.3x; a missed one cost 1.5-1.75x on those graphs.
RECONSIDER_MARGIN = 1.1


@dataclass(frozen=True)
class Choice:
    """A back end chosen for one matrix.

    Attributes
    ----------
    method : str
        A key of :data:`ohmgraph.engine.solvers.SOLVERS`.
    reason : str
        Why, in words.
    predicted : dict
        The numbers behind the reason (predicted seconds and bytes of each back end, factor
        entries and flops, the budget), for the record.
    analysis : FactorAnalysis or None
        The symbolic analysis when one was made (its order serves the factorisation).
    """

    method: str
    reason: str
    predicted: dict = field(default_factory=dict)
    analysis: FactorAnalysis | None = field(default=None, repr=False, compare=False)


def _gb(value: float) -> str:
    return f"{value / 1e9:.3g} GB"


def direct_prediction(matrix, factor_nonzeros: float, flops: float, solves: int) -> tuple:
    """``(seconds, bytes)`` of factorising ``matrix`` with a factor of the given size and work,
    then solving ``solves`` right-hand sides (the analysis not included)."""
    n, entries = matrix.shape[0], matrix.nnz
    seconds = (FACTOR_SECONDS_PER_FLOP * flops + FACTOR_SECONDS_PER_ENTRY * entries
               + solves * (SOLVE_SECONDS_PER_FACTOR_ENTRY * factor_nonzeros
                           + SOLVE_SECONDS_PER_UNKNOWN * n))
    return seconds, DIRECT_BYTES_PER_FACTOR_ENTRY * factor_nonzeros + DIRECT_BYTES_PER_ENTRY * entries


def direct_floor(matrix, solves: int) -> float:
    """The least ``direct`` can cost, its analysis included, whatever the factor: the
    per-entry terms, and per right-hand side a factor of at least ``nnz(A) / 2`` entries."""
    n, entries = matrix.shape[0], matrix.nnz
    return ((ANALYSIS_SECONDS_PER_ENTRY + FACTOR_SECONDS_PER_ENTRY) * entries
            + solves * (SOLVE_SECONDS_PER_FACTOR_ENTRY * entries / 2
                        + SOLVE_SECONDS_PER_UNKNOWN * n))


def operator_complexity(matrix, factor_nonzeros: float | None = None,
                        flops: float | None = None) -> float:
    """Predicted multigrid operator complexity (see the constants above); the floor when the
    factor is not known."""
    n, entries = matrix.shape[0], matrix.nnz
    if not factor_nonzeros or not flops or n == 0:
        return COMPLEXITY_FLOOR
    degree = np.diff(matrix.indptr).astype(np.float64)
    spread = n * float(degree @ degree) / float(entries) ** 2
    front = flops / factor_nonzeros
    return max(COMPLEXITY_FLOOR, COMPLEXITY_SLOPE * front / math.sqrt(n) * spread ** 2)


def amg_prediction(matrix, solves: int, complexity: float) -> tuple:
    """``(seconds, bytes)`` of the amg-cg set-up and ``solves`` right-hand sides."""
    work = matrix.nnz * complexity
    seconds = work * (AMG_SETUP_SECONDS + solves * AMG_ITERATIONS * AMG_ITERATION_SECONDS)
    return seconds, AMG_BYTES_PER_ENTRY * work


def amg_evenness(matrix) -> float:
    """The factor (at most 1) by which amg-cg is cheaper, relative to ac-cg, on a matrix of
    even conductances and degrees (see the constants above)."""
    from .ac_factor import weight_variation_kernel

    n = matrix.shape[0]
    if n == 0:
        return 1.0
    degree = np.diff(matrix.indptr).astype(np.float64) - 1.0
    spread = n * float(degree @ degree) / max(float(degree.sum()) ** 2, 1.0)
    within = weight_variation_kernel(matrix.indptr, matrix.indices, matrix.data,
                                     max(1, n // VARIATION_ROWS))
    irregularity = within + AMG_DEGREE_WEIGHT * max(spread - 1.0, 0.0)
    return min(1.0, AMG_EVEN_BASE + AMG_EVEN_SLOPE * irregularity)


def ac_prediction(matrix, solves: int, rtol: float = DEFAULT_RTOL) -> tuple:
    """``(seconds, bytes)`` of the ac-cg factorisation and ``solves`` right-hand sides (on two
    threads where ac-cg would use them: :data:`AC_TWO_THREADS`)."""
    iterations = AC_ITERATIONS_PER_DECADE * max(-math.log10(max(rtol, 1e-16)), 1.0)
    seconds = matrix.nnz * (AC_SETUP_SECONDS + solves * iterations * AC_ITERATION_SECONDS)
    from .ac_cg import AcCgSolver
    from .ac_split import MIN_UNKNOWNS

    if matrix.shape[0] >= MIN_UNKNOWNS and AcCgSolver.default_threads() > 1:
        seconds *= AC_TWO_THREADS
    return seconds, AC_BYTES_PER_ENTRY * matrix.nnz


def grounded_laplacian(matrix) -> bool:
    """Whether ac-cg applies: nonpositive off-diagonal entries, diagonally dominant rows."""
    from .ac_factor import grounded_laplacian_kernel

    return bool(grounded_laplacian_kernel(matrix.indptr, matrix.indices, matrix.data))


def _iterative(matrix, solves: int, rtol: float, complexity: float, laplacian: bool,
               budget: float, predicted: dict, evenness: float = 1.0) -> tuple:
    """The cheaper of amg-cg and (for a grounded Laplacian) ac-cg among those within the
    budget: ``(method, seconds, bytes)``, their predictions recorded in ``predicted``; the
    smaller in bytes when neither fits (the caller refuses it)."""
    amg_s, amg_b = amg_prediction(matrix, solves, complexity)
    predicted.update(amg_seconds=amg_s, amg_bytes=amg_b, amg_complexity=complexity,
                     amg_evenness=evenness)
    candidates = [("amg-cg", amg_s, amg_b)]
    if laplacian:
        ac_s, ac_b = ac_prediction(matrix, solves, rtol)
        ac_s /= evenness
        predicted.update(ac_seconds=ac_s, ac_bytes=ac_b)
        candidates.append(("ac-cg", ac_s, ac_b))
    fitting = [c for c in candidates if c[2] <= budget]
    if not fitting:
        return min(candidates, key=lambda c: c[2])
    return min(fitting, key=lambda c: c[1])


def sampled_factor(matrix) -> tuple[float, float] | None:
    """Estimated ``(nnz(L), flops)`` of the whole factor from two nested breadth-first balls.

    The balls' unknowns are the first ``n/64`` and ``n/16`` of a breadth-first order from the
    middle unknown; each ball's induced matrix is analysed (:func:`.symbolic.column_counts`) and
    the counts are extrapolated to ``n`` with the exponent the two balls show (between 1 and 2
    for ``nnz(L)``, 1 and 3 for flops). The factor of a ball is part of the factor of the whole
    for the same relative order (fill paths inside the ball are fill paths in the whole; Rose,
    Tarjan & Lueker, SIAM J. Comput. 5(2), 1976), so the counts grow at least linearly. None
    when the start's connected component is too small to sample.
    """
    n = matrix.shape[0]
    reached = breadth_first_order(matrix, n // 2, directed=False, return_predecessors=False)
    sizes = [n // parts for parts in SCREEN_BALLS]
    if reached.size < sizes[-1]:
        return None
    counts = []
    for size in sizes:
        ball = reached[:size]
        analysis = column_counts(matrix[ball][:, ball])
        counts.append((analysis.factor_nonzeros, analysis.flops))
    growth = math.log(sizes[1] / sizes[0])
    scale = n / sizes[1]
    (small_l, small_f), (large_l, large_f) = counts
    beta_l = min(max(math.log(large_l / small_l) / growth, 1.0), 2.0)
    beta_f = min(max(math.log(large_f / small_f) / growth, 1.0), 3.0)
    return large_l * scale ** beta_l, large_f * scale ** beta_f


def _budget(memory_budget: float | None) -> float:
    """The budget in bytes: the default when None, infinite when that cannot be read."""
    budget = default_memory_budget() if memory_budget is None else memory_budget
    return math.inf if budget is None else float(budget)


def _refuse_over_budget(predicted: dict, iterative: tuple, budget: float) -> None:
    """Raise :class:`~.base.SolverFailed` when the iterative back end, the only candidate
    left, is predicted over the budget too."""
    method, _, needed = iterative
    if needed > budget:
        raise SolverFailed(f"neither back end fits the memory budget of {_gb(budget)}: direct "
                           f"would need about {_gb(predicted['direct_bytes'])}, {method} about "
                           f"{_gb(needed)}; raise the budget (--memory-budget)")


def choose(matrix, solves: int = 1, memory_budget: float | None = None,
           analysis: FactorAnalysis | None = None, rtol: float = DEFAULT_RTOL) -> Choice:
    """Pick ``direct``, ``amg-cg`` or ``ac-cg`` for ``matrix`` and ``solves`` right-hand sides.

    Parameters
    ----------
    matrix : sparse matrix, shape (n, n)
        Symmetric positive definite (CSR).
    solves : int
        Right-hand sides the caller expects to solve with one set-up.
    memory_budget : float, optional
        Bytes the set-up may use; None for the default (half the available memory,
        :func:`ohmgraph.engine.memory.default_memory_budget`).
    analysis : FactorAnalysis, optional
        The symbolic analysis of ``matrix`` from an earlier choice, reused.
    rtol : float
        The relative residual asked for (ac-cg's iterations grow with its digits).

    Raises
    ------
    SolverFailed
        When no back end is predicted to fit the memory budget.
    """
    n, entries = matrix.shape[0], matrix.nnz
    solves = max(int(solves), 1)
    budget = _budget(memory_budget)
    if n == 0:
        return Choice("direct", "an empty system", {"unknowns": 0})
    predicted = {"unknowns": n, "matrix_nonzeros": entries, "solves": solves,
                 "memory_budget_bytes": budget if math.isfinite(budget) else None}
    laplacian = grounded_laplacian(matrix)
    evenness = amg_evenness(matrix)
    _, cheapest, _ = _iterative(matrix, solves, rtol, COMPLEXITY_FLOOR, laplacian, math.inf, {},
                                evenness)
    floor = direct_floor(matrix, solves)
    if analysis is None and n >= SCREEN_MIN_UNKNOWNS:
        quick = dict(predicted, direct_floor_seconds=floor)
        iterative = _iterative(matrix, solves, rtol, COMPLEXITY_FLOOR, laplacian, budget, quick,
                               evenness)
        method, seconds, needed = iterative
        # amg-cg at the floor complexity is its least; only ac-cg's prediction is final here
        if method == "ac-cg" and seconds < floor and needed <= budget:
            return Choice(method, f"predicted {seconds:.3g} s for {solves} right-hand side(s), "
                          f"less than a factorisation's least ({floor:.3g} s: its analysis and "
                          "a pass over the matrix)", quick)
    if (analysis is None and ANALYSIS_SECONDS_PER_ENTRY * entries > SCREEN_SHARE * cheapest
            and n >= SCREEN_MIN_UNKNOWNS):
        sample = sampled_factor(matrix)
        if sample is not None:
            factor_nonzeros, flops = sample
            direct_s, direct_b = direct_prediction(matrix, factor_nonzeros, flops, solves)
            direct_s += ANALYSIS_SECONDS_PER_ENTRY * entries
            complexity = operator_complexity(matrix, factor_nonzeros, flops)
            screened = dict(predicted, sampled=True, factor_nonzeros=factor_nonzeros,
                            factor_flops=flops, direct_seconds=direct_s, direct_bytes=direct_b)
            iterative = _iterative(matrix, solves, rtol, complexity, laplacian, budget, screened,
                                   evenness)
            method, seconds, _ = iterative
            if direct_s > SCREEN_MARGIN * seconds or direct_b > SCREEN_MARGIN * budget:
                _refuse_over_budget(screened, iterative, budget)
                return Choice(method, f"sampled factor estimate: direct about {direct_s:.3g} s "
                              f"and {_gb(direct_b)}, {method} {seconds:.3g} s for {solves} "
                              "right-hand side(s)", screened)
    if analysis is None:
        analysis = column_counts(matrix)
    direct_s, direct_b = direct_prediction(matrix, analysis.factor_nonzeros, analysis.flops,
                                           solves)
    complexity = operator_complexity(matrix, analysis.factor_nonzeros, analysis.flops)
    predicted.update(sampled=False, factor_nonzeros=analysis.factor_nonzeros,
                     factor_flops=analysis.flops, direct_seconds=direct_s, direct_bytes=direct_b)
    iterative = _iterative(matrix, solves, rtol, complexity, laplacian, budget, predicted,
                           evenness)
    method, seconds, _ = iterative
    if direct_b > budget:
        _refuse_over_budget(predicted, iterative, budget)
        return Choice(method, f"the factor ({analysis.factor_nonzeros} entries) would need "
                      f"{_gb(direct_b)}, over the memory budget of {_gb(budget)}", predicted,
                      analysis)
    if direct_s <= seconds:
        return Choice("direct", f"predicted {direct_s:.3g} s against {seconds:.3g} s for "
                      f"{method} ({solves} right-hand side(s), factor of "
                      f"{analysis.factor_nonzeros} entries, {_gb(direct_b)})", predicted, analysis)
    return Choice(method, f"predicted {seconds:.3g} s against {direct_s:.3g} s for direct "
                  f"({solves} right-hand side(s), factor of {analysis.factor_nonzeros} entries)",
                  predicted, analysis)


def direct_for_the_rest(matrix, measured_seconds: float, remaining: int,
                        memory_budget: float | None = None,
                        analysis: FactorAnalysis | None = None) -> tuple:
    """Whether a factorisation should take over the rest of a query from an iterative back end.

    Parameters
    ----------
    matrix : sparse matrix, shape (n, n)
    measured_seconds : float
        The rest of the query at the iterative back end's measured pace: its seconds per
        right-hand side so far times ``remaining``.
    remaining : int
        Right-hand sides the query still has to solve.
    memory_budget : float, optional
        As :func:`choose`.
    analysis : FactorAnalysis, optional
        The symbolic analysis, when one was made; otherwise it is made here, but only when
        even a factorisation's least cost (:func:`direct_floor`) is below the measured pace.

    Returns
    -------
    switch : bool
    reason : str
        The numbers behind a switch (empty when there is none).
    predicted : dict
        Those numbers for the record (empty when the floor ruled a switch out).
    analysis : FactorAnalysis or None
        The analysis given or made here.
    """
    remaining = max(int(remaining), 0)
    if remaining == 0:
        return False, "", {}, analysis
    if analysis is None:           # made only when a factorisation could possibly win
        if RECONSIDER_MARGIN * direct_floor(matrix, remaining) >= measured_seconds:
            return False, "", {}, analysis
        analysis = column_counts(matrix)
    direct_s, direct_b = direct_prediction(matrix, analysis.factor_nonzeros, analysis.flops,
                                           remaining)
    predicted = {"reconsidered_remaining": remaining,
                 "measured_iterative_seconds": measured_seconds,
                 "direct_seconds_for_the_rest": direct_s, "direct_bytes": direct_b}
    if direct_b > _budget(memory_budget) or RECONSIDER_MARGIN * direct_s >= measured_seconds:
        return False, "", predicted, analysis
    return (True, f"the iterative solves so far take {measured_seconds:.3g} s at their measured "
            f"pace for the remaining {remaining} right-hand side(s); direct is predicted "
            f"{direct_s:.3g} s (factor of {analysis.factor_nonzeros} entries, "
            f"{_gb(direct_b)})", predicted, analysis)


def direct_fallback_allowed(matrix, memory_budget: float | None = None,
                            analysis: FactorAnalysis | None = None) -> tuple:
    """Whether a factorisation may replace an iterative solve that missed its target.

    Returns
    -------
    allowed : bool
    why : str
        When not allowed: the predicted factor size against the memory budget.
    analysis : FactorAnalysis
        The symbolic analysis (given or computed), whose order the factorisation uses.
    """
    budget = _budget(memory_budget)
    if analysis is None:
        analysis = column_counts(matrix)
    _, needed = direct_prediction(matrix, analysis.factor_nonzeros, analysis.flops, 1)
    if needed > budget:
        return (False, f"the direct fallback's factor ({analysis.factor_nonzeros} entries) would "
                f"need {_gb(needed)}, over the memory budget of {_gb(budget)}", analysis)
    return True, "", analysis
