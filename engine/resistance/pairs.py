"""Effective (two-point) resistance: pairs, batches, driving-point, every resistor, Kirchhoff index.

The effective resistance between nodes ``a`` and ``b`` is the voltage between them when 1 A is
driven in at ``a`` and out at ``b`` with every independent source zeroed
(:meth:`~ohmgraph.engine.network.Network.passive`): ``R_ab = d^T L^+ d`` with ``d = e_a - e_b``
and ``L`` the weighted Laplacian (Klein & Randić, J. Math. Chem. 12, 81–95, 1993). Nodes joined
by ideal connections are merged into supernodes first (0 ohm between them); nodes in different
islands are infinitely far apart.

:class:`ResistanceSolver` sets up ONE solver per network: the Laplacian of the supernode graph is
grounded at one supernode per island (the island holding the reference node is grounded there),
which leaves a symmetric positive-definite matrix ``A`` whose inverse ``G`` is the grounded
Green's function, ``R_ab = G_aa + G_bb - 2 G_ab`` within an island. Every query reuses that
solver, with many right-hand sides solved as blocks.

Accuracy
--------
Every ``accuracy`` is a relative error bound against the resistance of the network as given
(its float64 resistances taken as exact), covering the rounding of the conductances ``1/R``, the
solve, the residual and the value itself, except where it says it is an estimate.

*Pair solves* (one right-hand side per pair, :meth:`ResistanceSolver.pairs_by_index`). With a
computed solution ``x`` of ``A x = d`` and its residual ``r = d - A x``, the value is the energy
estimate ``R~ = d^T x + x^T r``, whose error is exactly ``R - R~ = r^T A^{-1} r >= 0``
(substitute ``x = A^{-1} (d - r)``): quadratic in the residual, so even a loose iterative solve
gives a precise value. Because ``A^{-1}`` of a grounded Laplacian is entrywise non-negative with
its largest entry on the diagonal (maximum principle), ``r^T A^{-1} r <= ||r||_1^2 max_i G_ii``,
and by Rayleigh's monotonicity law ``G_ii`` (the resistance from ``i`` to ground) is at most the
resistance of the cheapest path from ``i`` to ground, found once by Dijkstra's algorithm. The
estimate is formed as ``2 d^T x - x^T A x`` with the energy ``x^T A x`` summed edge by edge
from the conductances by compensated summation, and the residual edge by edge too
(:mod:`ohmgraph.engine.resistance.accuracy`), each with its rounding bounded and added; a
float64 residual of the assembled matrix would be wrong by about ``eps |A| |x|`` and enter
``x^T r`` linearly (on a 60 x 80 lattice, a relative 1e-12 reported as 2.2e-16). Added: the
float64 conductances (a relative ``u = eps/2``, by Rayleigh's law) and the final rounding.

*Terminal reduction* and *exact values across every resistor* read ``G_ii + G_jj - 2 G_ij`` from
solved columns; their bound is first order in the columns' residuals
(:meth:`ResistanceSolver.first_order_bounds`), plus the rounding of the combination, of the
conductances and of the value. With a factorisation it is typically 1e-11 to 1e-10 on 10^4
nodes; with an iterative solve it follows ``rtol``.

*Factor reach* values (:meth:`ResistanceSolver.factor_pairs`) have no residual of their own:
their bound combines the factor's backward error in the energy norm, bounded once per
factorisation (``δ``, one solve), with each forward solve's own rounding
(:mod:`ohmgraph.engine.resistance.factor_bound`); about 2e-9 on a 10^6-node lattice grounded
through 100 pads.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components, dijkstra

from ..checks import SMALLEST_RESISTANCE
from ..contraction import contract
from ..formulation import grounded_matrix, supernode_graph
from ..network import RESISTOR, Network
from ..session import SolveSession
from ..solvers import DEFAULT_RTOL
from .accuracy import ASSEMBLY, MARGIN, UNIT_ROUNDOFF, ResidualMeter
from .factor_bound import assembly_rho, factor_rho, loewner_delta, pair_bounds
from .kron import kron_reduction
from .progress import Tracker, first_then_blocks
from .reach import FactorPairs
from .sketch import across_resistors, block_columns, kirchhoff_index

# Terminal reduction in pairs(): used when there are at most this many distinct terminals and
# fewer terminals than distinct pairs (one solve per terminal instead of one per pair).
KRON_TERMINAL_LIMIT = 2000
# A sparse forward solve from the factor (engine/resistance/reach.py) costs at most about this fraction of a
# full solve (measured 0.06-0.3 on 10^5- to 10^6-node lattices); terminal reduction must beat it.
REACH_COST = 0.3
# Pairs per call of the sparse-forward-solve kernel (progress is reported between calls).
REACH_BATCH = 256
# Largest relative difference tolerated between a factor-reach value and a full solve at set-up.
REACH_CHECK_LIMIT = 1e-9


@dataclass(frozen=True)
class PairResistances:
    """Effective resistances of a batch of node pairs.

    Attributes
    ----------
    ohms : ndarray of float64
        Effective resistance of each pair; ``inf`` across islands, 0 for one node (or two nodes
        joined by ideal connections).
    accuracy : ndarray of float64
        Relative error bound of each value (see the module notes); 0 where the value is exact.
    method : str
        ``"pair solves"`` (one right-hand side per distinct pair), ``"factor reach"`` (one
        sparse forward solve per distinct pair, :mod:`ohmgraph.engine.resistance.reach`), ``"terminal
        reduction"`` (one solve per distinct terminal) or ``"trivial"`` (nothing to solve).
    solves : int
        Right-hand sides solved (full or sparse forward solves).
    seconds : float
    """

    ohms: np.ndarray
    accuracy: np.ndarray
    method: str
    solves: int
    seconds: float


class ResistanceSolver:
    """Effective resistances of one network, with one solver set up and reused for every query.

    Parameters
    ----------
    net : Network
        Any network; its sources are zeroed (:meth:`Network.passive`). Resistances must be
        finite and non-negative (as :func:`ohmgraph.engine.check` requires).
    method : str
        ``"auto"`` or a back end of :data:`ohmgraph.engine.solvers.SOLVERS`. Every solve goes
        through one :class:`~ohmgraph.engine.session.SolveSession` (:attr:`session`), set up at
        the first query knowing how many right-hand sides it needs; with ``auto`` a later,
        larger query may switch it to a factorisation
        (:func:`ohmgraph.engine.solvers.choice.choose`).
    rtol : float
        Relative residual every solve must reach.
    memory_budget : float, optional
        Bytes the solver's set-up may use (None: the default, :mod:`ohmgraph.engine.memory`).
    ground_at : {"reference", "strongest"}
        Which supernode of each island is grounded (no resistance depends on it):
        ``"reference"``, the reference's in its island and the first elsewhere; ``"strongest"``,
        the one with the largest total conductance in each island (on a supply mesh, the pads
        merged by their zeroed sources), which keeps the factor-reach bound small
        (:mod:`ohmgraph.engine.resistance.factor_bound`: it grows with the distance to ground).

    Raises
    ------
    ValueError
        On a negative or non-finite resistance, or one too small for a finite conductance.
    """

    def __init__(self, net: Network, method: str = "auto", rtol: float = DEFAULT_RTOL, *,
                 memory_budget: float | None = None, ground_at: str = "reference"):
        start = time.perf_counter()
        passive = net.passive()
        resistors = passive.kind == RESISTOR
        ohms = passive.value[resistors]
        if not np.all(np.isfinite(ohms)) or np.any(ohms < 0):
            raise ValueError("resistances must be finite and non-negative")
        if np.any((ohms > 0) & (ohms < SMALLEST_RESISTANCE)):
            raise ValueError(f"a resistance below {SMALLEST_RESISTANCE:.2g} ohm has no finite "
                             "conductance; write 0 for an ideal connection")
        self.network = net
        self.contraction = contract(passive)
        self.graph = supernode_graph(passive, self.contraction)
        self.supernode = self.contraction.supernode
        n_super = self.graph.n_supernodes
        self.supernode_size = np.bincount(self.supernode, minlength=n_super)

        conductance = sp.csr_matrix((self.graph.conductance, (self.graph.a, self.graph.b)),
                                    shape=(n_super, n_super))
        conductance = (conductance + conductance.T).tocsr()   # parallel conductances add up
        self.n_islands, self.island = connected_components(conductance, directed=False)
        if ground_at not in ("reference", "strongest"):
            raise ValueError(f"ground_at must be 'reference' or 'strongest', not {ground_at!r}")
        self.ground = self._grounds(net.reference, conductance if ground_at == "strongest"
                                    else None)
        unknown_of = np.full(n_super, -1, np.int64)
        grounded = np.zeros(n_super, bool)
        grounded[self.ground] = True
        free = np.flatnonzero(~grounded)
        unknown_of[free] = np.arange(free.size)
        self.free, self.unknown_of = free, unknown_of
        self.matrix = grounded_matrix(self.graph, free, unknown_of)
        self.meter = ResidualMeter(unknown_of[self.graph.a], unknown_of[self.graph.b],
                                   self.graph.conductance, free.size)
        self.ground_distance = self._ground_distance(conductance)
        self.rtol = float(rtol)
        self.method = method
        self.session = SolveSession(self.matrix, method, rtol,   # set up at the first query
                                    memory_budget=memory_budget)
        self.preparation_seconds = time.perf_counter() - start
        self._factor_pairs = None          # built on first use (see factor_pairs)
        self._factor_checked = False
        # δ of the factor (engine/resistance/factor_bound.py), set by the first factor-reach query
        self.factor_delta = float("nan")

    # ------------------------------------------------------------------ set-up helpers
    def _grounds(self, reference: int, conductance=None) -> np.ndarray:
        """One grounded supernode per island: the reference's in its island, else the first;
        with ``conductance`` (the supernode conductance matrix), the one with the largest total
        conductance in each island."""
        n_super = self.graph.n_supernodes
        first = np.full(self.n_islands, n_super, np.int64)
        np.minimum.at(first, self.island, np.arange(n_super))
        if conductance is not None:
            total = np.asarray(conductance.sum(axis=1)).ravel()
            order = np.lexsort((np.arange(n_super), -total, self.island))   # strongest first
            starts = np.searchsorted(self.island[order], np.arange(self.n_islands))
            return order[starts]
        ref = self.supernode[reference]
        first[self.island[ref]] = ref
        return first

    def _ground_distance(self, conductance) -> np.ndarray:
        """Per island, the largest cheapest-path resistance from a supernode to its ground.

        By Rayleigh's monotonicity law it bounds every driving-point resistance to ground in the
        island (bundles of parallel resistors count as their parallel combination). The margin
        covers the rounding of the path sums (at most one rounding per supernode on a path and
        two per bundle).
        """
        resistance = conductance.copy()
        resistance.data = 1.0 / resistance.data
        distance = dijkstra(resistance, directed=False, indices=self.ground, min_only=True)
        worst = np.zeros(self.n_islands)
        np.maximum.at(worst, self.island, distance)
        return worst * (1.0 + 4.0 * (self.graph.n_supernodes + 4) * UNIT_ROUNDOFF) * MARGIN

    # ------------------------------------------------------------------ solving
    @property
    def n_nodes(self) -> int:
        return self.network.n_nodes

    @property
    def stats(self):
        """The session's :class:`~ohmgraph.engine.session.SessionStats` (every query so far)."""
        return self.session.stats

    def prepare(self, solves: int) -> None:
        """Set the session up for a query of ``solves`` right-hand sides
        (:meth:`SolveSession.expect`)."""
        self.session.expect(solves)

    def solve_block(self, rhs: np.ndarray) -> np.ndarray:
        """Solve ``A X = rhs`` (columns over the unknowns) through the session: every returned
        column meets ``rtol``.

        Raises
        ------
        SolverFailed
            When no allowed back end reaches the target.
        """
        return self.session.solve(rhs)

    def residual_energy_bound(self, magnitude: np.ndarray) -> np.ndarray:
        """Upper bound of ``r^T A^{-1} r`` for each column, given elementwise bounds
        ``|r| <= magnitude``: the sum over islands of ``||magnitude_island||_1^2`` times the
        island's ground distance."""
        magnitude = magnitude.reshape(magnitude.shape[0], -1)
        island = self.island[self.free]
        per_island = np.zeros((self.n_islands, magnitude.shape[1]))
        np.add.at(per_island, island, magnitude)
        return (per_island ** 2 * self.ground_distance[:, None]).sum(axis=0) * MARGIN

    def first_order_bounds(self, values, l1_i, l1_j, g_ii, g_jj, g_ij, islands) -> np.ndarray:
        """Relative error bounds of values ``G_ii + G_jj - 2 G_ij`` read from solved columns.

        With columns ``x_i = A^{-1} (e_i - r_i)``, the value's error is ``y^T (r_i - r_j)`` for
        ``y = A^{-1} (e_i - e_j)``; by Cauchy–Schwarz in the ``A^{-1}`` inner product it is at
        most ``sqrt(R D) (||r_i||_1 + ||r_j||_1)`` (``D`` the island's ground distance; ``R``
        taken as the value, exact to first order). Added: the rounding of the combination
        (four roundings of terms at most ``|G_ii| + |G_jj| + 2 |G_ij|``), of the float64
        conductances (:data:`~ohmgraph.engine.resistance.accuracy.ASSEMBLY`) and of the value.
        """
        with np.errstate(divide="ignore", invalid="ignore"):
            solve = (l1_i + l1_j) * np.sqrt(self.ground_distance[islands] / values)
            combine = 4.0 * UNIT_ROUNDOFF * (np.abs(g_ii) + np.abs(g_jj) + 2.0 * np.abs(g_ij))
            bounds = (solve + combine / values + ASSEMBLY + UNIT_ROUNDOFF) * MARGIN
        return np.where(values > 0, bounds, np.inf)

    def _injection_block(self, sources: np.ndarray, sinks: np.ndarray) -> np.ndarray:
        """Right-hand sides driving 1 A from supernode ``sources[j]`` to ``sinks[j]``."""
        rhs = np.zeros((self.free.size, sources.size))
        columns = np.arange(sources.size)
        into, out = self.unknown_of[sources], self.unknown_of[sinks]
        rhs[into[into >= 0], columns[into >= 0]] += 1.0
        rhs[out[out >= 0], columns[out >= 0]] -= 1.0
        return rhs

    # ------------------------------------------------------------------ node arguments
    def node_indices(self, labels) -> np.ndarray:
        """Node indices of ``labels`` (a ``str`` or a sequence of them).

        Raises
        ------
        TypeError
            When a label is not a ``str``: an integer is never guessed to be an index.
        KeyError
            Naming the first label that is not a node.
        """
        return self.network.node_index(labels)

    def checked_indices(self, nodes) -> np.ndarray:
        """``nodes`` as node indices (integers in ``0 .. n_nodes - 1``), one-dimensional.

        Raises
        ------
        TypeError
            When ``nodes`` are not integers (labels go to the label-taking functions).
        IndexError
            Naming the first index out of range.
        """
        array = np.asarray(nodes)
        if array.size and array.dtype.kind not in "iu":
            raise TypeError(f"node indices must be integers, not {array.dtype} "
                            f"({array.reshape(-1)[0]!r}); labels go to pair, pairs, "
                            "to_reference and kron_reduction")
        array = array.astype(np.int64).reshape(-1)
        bad = np.flatnonzero((array < 0) | (array >= self.n_nodes))
        if bad.size:
            raise IndexError(f"node index {int(array[bad[0]])} is out of range (the network "
                             f"has {self.n_nodes} nodes, indices 0 .. {self.n_nodes - 1})")
        return array

    # ------------------------------------------------------------------ pair queries
    def pair(self, a: str, b: str) -> tuple[float, float]:
        """Effective resistance between the nodes labelled ``a`` and ``b``: ``(ohms, accuracy)``.

        Raises
        ------
        TypeError
            When a label is not a ``str`` (use :meth:`pair_by_index` for indices).
        KeyError
            Naming a label that is not a node.
        """
        result = self.pairs_by_index(self.node_indices(a), self.node_indices(b))
        return float(result.ohms[0]), float(result.accuracy[0])

    def pair_by_index(self, i: int, j: int) -> tuple[float, float]:
        """Effective resistance between node indices ``i`` and ``j``: ``(ohms, accuracy)``."""
        result = self.pairs_by_index(self.checked_indices([i]), self.checked_indices([j]))
        return float(result.ohms[0]), float(result.accuracy[0])

    def to_reference(self, labels) -> PairResistances:
        """Driving-point resistance from each labelled node to the network's reference node."""
        return self.to_reference_by_index(self.node_indices(labels))

    def to_reference_by_index(self, nodes) -> PairResistances:
        """Driving-point resistance from each node index to the network's reference node."""
        nodes = self.checked_indices(nodes)
        return self.pairs_by_index(nodes, np.full(nodes.size, self.network.reference))

    def pairs(self, labels_a, labels_b, progress=None, announce=None) -> PairResistances:
        """Effective resistances between the nodes labelled ``labels_a[k]`` and ``labels_b[k]``
        (sequences of ``str``); see :meth:`pairs_by_index`.

        Raises
        ------
        TypeError
            When a label is not a ``str``.
        KeyError
            Naming the first label that is not a node.
        """
        return self.pairs_by_index(self.node_indices(labels_a), self.node_indices(labels_b),
                                   progress, announce)

    def pairs_by_index(self, a_idx, b_idx, progress=None, announce=None) -> PairResistances:
        """Effective resistances between node indices ``a_idx[k]`` and ``b_idx[k]``.

        Repeated and reversed pairs are solved once. When the distinct terminals are few
        (at most :data:`KRON_TERMINAL_LIMIT`, and fewer than the distinct pairs times the
        relative cost of a pair), the network is reduced onto them once
        (:meth:`_terminal_green`) and every pairwise value is read from the reduced matrix.
        Otherwise each distinct pair costs one sparse forward solve from the factor
        (:meth:`factor_pairs`, when the solver is direct and there is more than one pair) or one
        full right-hand side, solved in blocks.

        Parameters
        ----------
        a_idx, b_idx : array_like of int
            Node indices (``0 .. n_nodes - 1``).
        progress : callable, optional
            Called with the number of right-hand sides just solved, after each block.
        announce : callable, optional
            Called once, after the first (timed) solve, with the
            :class:`~ohmgraph.engine.resistance.progress.Plan` of the query.

        Raises
        ------
        TypeError, IndexError
            On non-integer or out-of-range indices.
        """
        start = time.perf_counter()
        a_idx, b_idx = self.checked_indices(a_idx), self.checked_indices(b_idx)
        if a_idx.shape != b_idx.shape:
            raise ValueError("a_idx and b_idx must have the same length")
        sa, sb = self.supernode[a_idx], self.supernode[b_idx]
        ohms = np.zeros(a_idx.size)
        accuracy = np.zeros(a_idx.size)
        apart = self.island[sa] != self.island[sb]
        ohms[apart] = np.inf
        todo = ~apart & (sa != sb)
        low, high = np.minimum(sa, sb)[todo], np.maximum(sa, sb)[todo]
        if low.size == 0:
            return PairResistances(ohms, accuracy, "trivial", 0, time.perf_counter() - start)
        keys, inverse = np.unique(np.stack([low, high]), axis=1, return_inverse=True)
        terminals = np.unique(keys)
        before = self.stats.solves
        self.prepare(min(keys.shape[1], terminals.size))
        reach = self.factor_pairs() if keys.shape[1] > 1 else None
        pair_cost = REACH_COST if reach is not None else 1.0
        if terminals.size <= KRON_TERMINAL_LIMIT and terminals.size < pair_cost * keys.shape[1]:
            method, planned = "terminal reduction", int(np.count_nonzero(
                self.unknown_of[terminals] >= 0))
        elif reach is not None:
            method, planned = "factor reach", keys.shape[1]
        else:
            method, planned = "pair solves", keys.shape[1]
        tracker = Tracker(planned, method, progress, announce)
        if method == "terminal reduction":
            values, bounds = self._pairs_by_reduction(keys, terminals, tracker)
        elif method == "factor reach":
            values, bounds = self._pairs_by_reach(reach, keys, tracker)
        else:
            values, bounds = self._pairs_by_solves(keys, tracker)
        inverse = inverse.reshape(-1)
        ohms[todo] = values[inverse]
        accuracy[todo] = bounds[inverse]
        return PairResistances(ohms, accuracy, method, self.stats.solves - before,
                               time.perf_counter() - start)

    def _pairs_by_solves(self, keys: np.ndarray, tracker: Tracker | None = None):
        """One right-hand side per distinct supernode pair (columns of ``keys``), valued by the
        energy estimate with its bound (module notes)."""
        count = keys.shape[1]
        tracker = tracker if tracker is not None else Tracker(count, "pair solves")
        values, bounds = np.empty(count), np.empty(count)
        for cols in first_then_blocks(count, block_columns(self.free.size)):
            tracker.block()
            rhs = self._injection_block(keys[0, cols], keys[1, cols])
            x = self.solve_block(rhs)
            estimate, linear = self.meter.energy_estimates(rhs, x)
            residual, slack = self.meter.residual(rhs, x)
            quadratic = self.residual_energy_bound(np.abs(residual) + slack)
            error = linear + quadratic
            error += ASSEMBLY * (estimate + error) + UNIT_ROUNDOFF * estimate
            values[cols] = estimate
            bounds[cols] = error / estimate * MARGIN
            tracker.done(cols.stop - cols.start)
        return values, bounds

    def factor_pairs(self):
        """The sparse-forward-solve shortcut (:class:`~ohmgraph.engine.resistance.reach.FactorPairs`), or None.

        Available when the shared solver is a direct factorisation in LDLᵀ form. On first use it
        is checked against a full solve of one pair; the first query it serves bounds the
        factor's backward error in the energy norm (:attr:`factor_delta`, one more solve;
        :mod:`ohmgraph.engine.resistance.factor_bound`).
        """
        if self.session.factors is None or self.free.size < 2:
            return None
        if self._factor_checked:
            return self._factor_pairs
        self._factor_checked = True
        try:
            reach = FactorPairs(self.session.factors)
        except ValueError as error:
            self.stats.notes.append(f"pair values by full solves: {error}")
            return None
        into, out = np.array([0]), np.array([self.free.size - 1])
        rhs = np.zeros((self.free.size, 1))
        rhs[into, 0], rhs[out, 0] = 1.0, -1.0
        x = self.solve_block(rhs)
        full = float(self.meter.energy_estimates(rhs, x)[0][0])
        shortcut = float(reach.forward(into, out, dense=False)[0][0])
        if abs(shortcut - full) > REACH_CHECK_LIMIT * abs(full):
            self.stats.notes.append(f"factor reach disagreed with a full solve ({shortcut!r} vs "
                                    f"{full!r}); pair values by full solves")
            return None
        self._factor_pairs = reach
        return reach

    def _loewner_delta(self, reach) -> float:
        """``δ`` with ``(1-δ) A ⪯ L D Lᵀ ⪯ (1+δ) A`` for the factors in use
        (:mod:`ohmgraph.engine.resistance.factor_bound`): ``ρ`` from the factors and the
        assembly, one solve of ``A x = ρ`` and its residual."""
        rho = factor_rho(reach.lower, self.session.factors.U.tocsc(),
                         reach.pivot)[reach.position]
        rho += assembly_rho(self.matrix, self.meter.rounding)
        rhs = rho[:, None]
        x = self.solve_block(rhs)
        return loewner_delta(float(x.max()), float(self.meter.residual_l1(rhs, x)[0]),
                             float(self.ground_distance.max()))

    def _pairs_by_reach(self, reach, keys, tracker: Tracker):
        """Each distinct pair by one sparse forward solve from the factor
        (engine/resistance/reach.py), with the rigorous bound of
        :func:`~ohmgraph.engine.resistance.factor_bound.pair_bounds`."""
        if not self.factor_delta >= 0.0:                   # once per factorisation
            self.factor_delta = self._loewner_delta(reach)
        count = keys.shape[1]
        values, rounding = np.empty(count), np.empty(count)
        visited = np.empty(count, np.int64)
        into, out = self.unknown_of[keys[0]], self.unknown_of[keys[1]]
        for part in first_then_blocks(count, REACH_BATCH):
            tracker.block()
            values[part], rounding[part], visited[part] = reach.forward(into[part], out[part])
            self.stats.solves += part.stop - part.start
            tracker.done(part.stop - part.start)
        distance = self.ground_distance[self.island[keys[0]]]
        return values, pair_bounds(values, rounding, visited, self.factor_delta, distance)

    def _terminal_green(self, terminals: np.ndarray, tracker: Tracker | None = None):
        """The grounded Green's function among ``terminals`` (supernode indices).

        ``(A^{-1})_TT`` is the inverse of the Schur complement of ``A`` onto the terminals, the
        Kron-reduced grounded Laplacian (Dörfler & Bullo, IEEE TCAS-I 60(1), 150–163, 2013);
        it is computed with one solve per terminal of the network's shared solver, so no new
        factorisation is needed. Grounded terminals have a zero row and column.

        Returns
        -------
        green : ndarray, shape (t, t)
        residual_l1 : ndarray, shape (t,)
            A bound on ``||r||_1`` of each terminal's solve (edge-by-edge residual plus its
            rounding bound), 0 for grounded ones.
        """
        t = terminals.size
        green = np.zeros((t, t))
        residual_l1 = np.zeros(t)
        unknowns = self.unknown_of[terminals]
        live = np.flatnonzero(unknowns >= 0)
        for part in first_then_blocks(live.size, block_columns(self.free.size)):
            if tracker is not None:
                tracker.block()
            cols = live[part]
            rhs = np.zeros((self.free.size, cols.size))
            rhs[unknowns[cols], np.arange(cols.size)] = 1.0
            x = self.solve_block(rhs)
            green[np.ix_(live, cols)] = x[unknowns[live]]
            residual_l1[cols] = self.meter.residual_l1(rhs, x)
            if tracker is not None:
                tracker.done(cols.size)
        return 0.5 * (green + green.T), residual_l1

    def _pairs_by_reduction(self, keys, terminals, tracker: Tracker):
        """All requested pairs read from the Green's function among the distinct terminals."""
        green, residual_l1 = self._terminal_green(terminals, tracker)
        i = np.searchsorted(terminals, keys[0])
        j = np.searchsorted(terminals, keys[1])
        values = green[i, i] + green[j, j] - 2.0 * green[i, j]
        bounds = self.first_order_bounds(values, residual_l1[i], residual_l1[j], green[i, i],
                                         green[j, j], green[i, j], self.island[keys[0]])
        return values, bounds

    # ------------------------------------------------------------------ whole-network queries
    def resistor_endpoints(self):
        """Resistors of the network and their end supernodes: ``(branches, a, b, ohms)``."""
        net = self.network
        branches = np.flatnonzero(net.kind == RESISTOR)
        return (branches, self.supernode[net.from_node[branches]],
                self.supernode[net.to_node[branches]], net.value[branches])

    def across_resistors(self, exact=None, epsilon=None, k=None, seed: int = 0,
                         progress=None, announce=None, time_budget=None):
        """Effective resistance across every resistor (see
        :func:`ohmgraph.engine.resistance.sketch.across_resistors`)."""
        return across_resistors(self, exact, epsilon, k, seed, progress, announce, time_budget)

    def kirchhoff_index(self, exact=None, samples: int = 200, seed: int = 0,
                        confidence: float = 0.95, progress=None, announce=None):
        """The Kirchhoff index (see :func:`ohmgraph.engine.resistance.sketch.kirchhoff_index`)."""
        return kirchhoff_index(self, exact, samples, seed, confidence, progress, announce)

    def kron_reduction(self, labels) -> tuple[np.ndarray, np.ndarray]:
        """The network reduced onto the labelled nodes (Kron reduction); see
        :meth:`kron_reduction_by_index`.

        Raises
        ------
        TypeError
            When a label is not a ``str``.
        KeyError
            Naming the first label that is not a node.
        """
        return self.kron_reduction_by_index(self.node_indices(labels))

    def kron_reduction_by_index(self, nodes) -> tuple[np.ndarray, np.ndarray]:
        """The network reduced onto the supernodes of node indices ``nodes`` (Kron reduction).

        Returns
        -------
        supernodes : ndarray of int64
            The distinct terminal supernodes, in order of first appearance in ``nodes``.
        reduced : ndarray, shape (t, t)
            Their Kron-reduced Laplacian (:func:`ohmgraph.engine.resistance.kron.kron_reduction`).
        """
        supers = self.supernode[self.checked_indices(nodes)]
        _, first = np.unique(supers, return_index=True)
        supers = supers[np.sort(first)]
        return supers, kron_reduction(self.graph.laplacian(), supers, self.method,
                                      self.rtol)
