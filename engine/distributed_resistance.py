"""Effective resistance of many node pairs across MPI processes, on a distributed PETSc matrix.

The network is the passive one (voltage sources shorted, current sources removed: the supernodes
of the stored contraction, :class:`~.ordering.NodeUnknowns`), grounded at the reference's
supernode: the matrix ``A`` is the reduced Laplacian of the distributed solve
(:mod:`.distributed`). Each process turns its slice of the resistors into half-edges (an edge
at each end that is an unknown) and sends them to the owners of their rows, so that every
process holds all edges at its rows. Each pair ``(s, t)`` is the right-hand side
``d = e_s - e_t`` (a held end drops out), assembled on the processes owning ``s`` and ``t``; one
KSP (CG + BoomerAMG, :func:`.solvers.petsc.configure_ksp`) is set up once and solves the
columns of each block one after the other: petsc4py 3.18 does not wrap ``KSPMatSolve``, and for
``KSPCG`` that routine loops over the columns too (block Krylov methods need ``KSPHPDDM``).

Value and accuracy are those of the single-process *pair solves*
(:mod:`ohmgraph.engine.resistance.pairs`): the energy estimate ``R~ = 2 d^T x - x^T A x`` whose
error is ``r^T A^{-1} r <= ||r||_1^2 max_i G_ii``, the residual ``r`` and the energy formed edge
by edge from the conductances with their rounding bounded
(:class:`~ohmgraph.engine.resistance.accuracy.ResidualMeter`, the numba kernel
:func:`~ohmgraph.engine.resistance.accuracy.edge_energies`), the partial sums of the processes
added exactly (:func:`math.fsum`, one more rounding counted). ``max_i G_ii`` is bounded by
Rayleigh's monotonicity law by the largest cheapest-path resistance to the ground, computed
here without gathering the graph: each process runs Dijkstra's algorithm on its rows
(:func:`scipy.sparse.csgraph.dijkstra`, from a virtual source standing for the ground and for
the neighbouring processes' nodes at their current distances), then the distances of the nodes
on the boundaries are exchanged, until no distance changes on any process (a Bellman–Ford
iteration whose rounds follow the paths' crossings between processes). Every distance found is
the resistance of a real path, so even an unfinished iteration gives a valid bound.

Every PETSc call is collective: all processes make it, in the same order.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from .distributed import BranchPart, fetch_node_map, to_owners
from .network import RESISTOR
from .ordering import NodeUnknowns
from .resistance.accuracy import (ASSEMBLY, MARGIN, UNIT_ROUNDOFF, ResidualMeter, edge_energies,
                                  gamma)
from .resistance.progress import Tracker, first_then_blocks
from .resistance.sketch import block_columns
from .solvers.petsc import configure_ksp, petsc_module

METHOD = "pair solves"
# Rounds of the distance exchange after which the (valid, maybe loose) bound is kept as it is.
MAX_DISTANCE_ROUNDS = 64


@dataclass
class DistributedPairs:
    """Effective resistances of the pairs (the same on every process).

    Attributes
    ----------
    ohms, accuracy : ndarray of float64
        Each pair's value and relative error bound (0 for a pair inside one supernode).
    solves : int
        Distinct pairs solved.
    iterations : int
        Most CG iterations of a solve.
    relative_residual : float
        Largest ``||d - A x||_2 / ||d||_2`` of a solve (formed edge by edge).
    converged : bool
        Whether every solve met ``rtol``.
    preconditioner : str
    ground_distance : float
        The bound on ``max_i G_ii`` (ohms) and the exchange rounds it took.
    distance_rounds : int
    timings : dict of str to float
        Seconds of this process per stage.
    """

    ohms: np.ndarray
    accuracy: np.ndarray
    solves: int
    iterations: int
    relative_residual: float
    converged: bool
    preconditioner: str
    ground_distance: float
    distance_rounds: int
    timings: dict


class _Rows:
    """The half-edges at this process's rows ``lo:hi`` with local numbering: own rows
    ``0 .. n_own - 1``, then the neighbours' ("ghost") unknowns, then one row for the ground."""

    def __init__(self, rows, cols, conductance, lo: int, hi: int):
        self.lo, self.n_own = lo, hi - lo
        own = (cols >= lo) & (cols < hi)
        self.ghosts = np.unique(cols[(cols >= 0) & ~own])
        self.n_local = self.n_own + self.ghosts.size
        self.ground = self.n_local
        self.row = rows - lo
        self.col = np.where(own, cols - lo, self.ground)
        outside = (cols >= 0) & ~own
        self.col[outside] = self.n_own + np.searchsorted(self.ghosts, cols[outside])
        self.global_row, self.global_col = rows, cols
        self.conductance = conductance
        # Residual at own rows: an edge between two own rows once, every other edge as held.
        once = ~own | (rows < cols)
        self.meter = ResidualMeter(self.row[once], np.where(cols < 0, -1, self.col)[once],
                                   conductance[once], self.n_local)
        # Energy: every edge on exactly one process (the owner of its lower end, or its only one).
        counted = (cols < 0) | (rows < cols)
        self.energy_edges = (np.ascontiguousarray(self.row[counted]),
                             np.ascontiguousarray(self.col[counted]),
                             np.ascontiguousarray(conductance[counted]))
        self.edges = int(counted.sum())      # the caller sets the total over all processes

    def matrix_csr(self, n_unknowns: int) -> sp.csr_matrix:
        """This process's rows of ``A`` (global columns), duplicates summed."""
        live = self.global_col >= 0
        rows = np.concatenate([self.row, self.row[live]])
        cols = np.concatenate([self.global_row, self.global_col[live]])
        values = np.concatenate([self.conductance, -self.conductance[live]])
        local = sp.csr_matrix((values, (rows, cols)), shape=(self.n_own, n_unknowns))
        local.sum_duplicates()
        local.sort_indices()
        return local

    def path_graph(self) -> sp.csr_matrix:
        """Directed edges ``neighbour -> own row`` weighted by the resistance of their parallel
        bundle (conductances summed first, as the single-process bound does)."""
        size = self.n_local + 1
        graph = sp.csr_matrix((self.conductance, (self.col, self.row)), shape=(size, size))
        graph.sum_duplicates()
        graph.data = 1.0 / graph.data
        return graph


def _ground_distance(comm, PETSc, rows: _Rows, ghost_values) -> tuple[float, int]:
    """Largest cheapest-path resistance from an unknown to the ground, and the rounds taken."""
    from mpi4py import MPI

    graph = rows.path_graph()
    known = np.full(rows.ghosts.size, np.inf)
    rounds = 0
    while True:
        rounds += 1
        finite = np.flatnonzero(np.isfinite(known))
        seeds = sp.csr_matrix((known[finite], (np.full(finite.size, rows.ground),
                                               rows.n_own + finite)), shape=graph.shape)
        distance = dijkstra(graph + seeds, directed=True, indices=rows.ground)[:rows.n_own]
        fresh = ghost_values(distance)
        changed = comm.allreduce(bool(np.any(fresh < known)), op=MPI.LOR)
        known = np.minimum(known, fresh)
        if not changed or rounds >= MAX_DISTANCE_ROUNDS:
            break
    largest = comm.allreduce(float(distance.max(initial=0.0)), op=MPI.MAX)
    n = comm.allreduce(rows.n_own, op=MPI.SUM)
    # Margin for the rounding of the path sums, as in the single-process bound.
    return largest * (1.0 + 4.0 * (n + 5) * UNIT_ROUNDOFF) * MARGIN, rounds


def _pair_unknowns(PETSc, part, own_nodes, node_range, n_nodes, a_idx, b_idx):
    """Unknowns of the slice's branch ends and of the pairs' nodes."""
    m, k = part.kind.size, a_idx.size
    ends, compact = np.unique(np.concatenate([part.from_node, part.to_node, a_idx, b_idx]),
                              return_inverse=True)
    unknown = fetch_node_map(PETSc, own_nodes, node_range, n_nodes, ends).unknown[compact]
    return unknown[:m], unknown[m:2 * m], unknown[2 * m:2 * m + k], unknown[2 * m + k:]


def pairs_distributed(comm, part: BranchPart, own_nodes: NodeUnknowns,
                      node_range: tuple[int, int], n_nodes: int, n_unknowns: int,
                      a_idx: np.ndarray, b_idx: np.ndarray, rtol: float,
                      progress=None, announce=None) -> DistributedPairs:
    """Effective resistance between nodes ``a_idx[k]`` and ``b_idx[k]`` on every process.

    Parameters
    ----------
    comm : mpi4py.MPI.Comm
        The processes taking part (PETSc's ``COMM_WORLD`` must be the same group).
    part : BranchPart
        This process's branches (only resistors count).
    own_nodes, node_range, n_nodes, n_unknowns
        As for :func:`ohmgraph.engine.distributed.solve_distributed`; the stored contraction must
        hold every node's potential to the reference's supernode or an unknown (no floating
        islands).
    a_idx, b_idx : ndarray of int64
        Node indices of the pairs, the same on every process.
    rtol : float
        Relative residual every solve must reach.
    progress, announce : callable, optional
        As for :meth:`ohmgraph.engine.resistance.ResistanceSolver.pairs_by_index` (pass them on
        one process only).
    """
    from mpi4py import MPI

    PETSc = petsc_module()
    world = PETSc.COMM_WORLD
    timings = {}
    start = time.perf_counter()
    ua, ub, pa, pb = _pair_unknowns(PETSc, part, own_nodes, node_range, n_nodes,
                                    np.asarray(a_idx, np.int64), np.asarray(b_idx, np.int64))
    resistive = (part.kind == RESISTOR) & (part.value > 0)
    ua, ub, g = ua[resistive], ub[resistive], 1.0 / part.value[resistive]
    between = ua != ub
    ua, ub, g = ua[between], ub[between], g[between]
    at_a, at_b = ua >= 0, ub >= 0
    size, rank = comm.Get_size(), comm.Get_rank()
    bounds = np.array([n_unknowns * r // size for r in range(size + 1)], np.int64)
    lo, hi = int(bounds[rank]), int(bounds[rank + 1])
    half = to_owners(comm, bounds, np.concatenate([ua[at_a], ub[at_b]]),
                     np.concatenate([ub[at_a], ua[at_b]]), np.concatenate([g[at_a], g[at_b]]))
    rows = _Rows(*half, lo, hi)
    rows.edges = comm.allreduce(rows.energy_edges[0].size, op=MPI.SUM)
    local = rows.matrix_csr(n_unknowns)
    matrix = PETSc.Mat().createAIJ(
        size=((rows.n_own, n_unknowns), (rows.n_own, n_unknowns)),
        csr=(local.indptr.astype(PETSc.IntType), local.indices.astype(PETSc.IntType),
             local.data), comm=world)
    matrix.assemble()
    del local
    rhs, x = matrix.createVecRight(), matrix.createVecLeft()
    ghost_vec = PETSc.Vec().createSeq(rows.ghosts.size, comm=PETSc.COMM_SELF)
    ghost_is = PETSc.IS().createGeneral(rows.ghosts.astype(PETSc.IntType), comm=PETSc.COMM_SELF)
    scatter = PETSc.Scatter().create(x, ghost_is, ghost_vec, None)

    def ghost_values(own: np.ndarray) -> np.ndarray:
        x.setArray(own)
        scatter.scatter(x, ghost_vec, addv=PETSc.InsertMode.INSERT_VALUES,
                        mode=PETSc.ScatterMode.FORWARD)
        return ghost_vec.getArray().copy()

    timings["assemble"] = time.perf_counter() - start
    start = time.perf_counter()
    distance, rounds = _ground_distance(comm, PETSc, rows, ghost_values)
    timings["distances"] = time.perf_counter() - start

    start = time.perf_counter()
    ksp = PETSc.KSP().create(comm=world)
    ksp.setOperators(matrix)
    preconditioner = configure_ksp(ksp, rtol)
    ksp.setUp()
    timings["setup"] = time.perf_counter() - start

    start = time.perf_counter()
    ohms, accuracy = np.zeros(pa.size), np.zeros(pa.size)
    todo = pa != pb
    keys, inverse = np.unique(np.stack([np.minimum(pa, pb)[todo], np.maximum(pa, pb)[todo]]),
                              axis=1, return_inverse=True)
    count = keys.shape[1]
    values, errors = np.empty(count), np.empty(count)
    iterations, worst = 0, 0.0
    tracker = Tracker(count, METHOD, progress, announce)
    for cols in first_then_blocks(count, block_columns(rows.n_local)):
        tracker.block()
        block = keys[:, cols]
        d = np.zeros((rows.n_local, block.shape[1]))
        solved = np.zeros((rows.n_local + 1, block.shape[1]))
        for j, (low, high) in enumerate(block.T):
            if lo <= low < hi:
                d[low - lo, j] = -1.0
            if lo <= high < hi:
                d[high - lo, j] = 1.0
            rhs.setArray(np.ascontiguousarray(d[:rows.n_own, j]))
            ksp.solve(rhs, x)
            iterations = max(iterations, ksp.getIterationNumber())
            solved[:rows.n_own, j] = x.getArray()
            scatter.scatter(x, ghost_vec, addv=PETSc.InsertMode.INSERT_VALUES,
                            mode=PETSc.ScatterMode.FORWARD)
            solved[rows.n_own:rows.n_local, j] = ghost_vec.getArray()
        value, error, relative = _block_values(comm, rows, d, solved, block, distance)
        values[cols], errors[cols] = value, error
        worst = max(worst, relative)
        tracker.done(block.shape[1])
    timings["solve"] = time.perf_counter() - start
    inverse = inverse.reshape(-1)
    ohms[todo], accuracy[todo] = values[inverse], errors[inverse]
    for handle in (scatter, ghost_is, ghost_vec, x, rhs, ksp, matrix):
        handle.destroy()
    return DistributedPairs(ohms=ohms, accuracy=accuracy, solves=count,
                            iterations=int(iterations), relative_residual=float(worst),
                            converged=bool(worst <= rtol), preconditioner=preconditioner,
                            ground_distance=float(distance), distance_rounds=rounds,
                            timings=timings)


def _block_values(comm, rows: _Rows, d: np.ndarray, solved: np.ndarray, block: np.ndarray,
                  distance: float):
    """Energy estimates, their relative error bounds and the largest relative residual of a
    block of solved pairs (collective: the processes' partial sums added exactly)."""
    n_own = rows.n_own
    residual, slack = rows.meter.residual(d, solved[:rows.n_local])
    residual, slack = residual[:n_own], slack[:n_own]
    own_d, own_x = d[:n_own], solved[:n_own]
    partial = np.stack([
        edge_energies(*rows.energy_edges, solved),
        np.einsum("ij,ij->j", own_d, own_x),
        np.einsum("ij,ij->j", np.abs(own_d), np.abs(own_x)),
        (np.abs(residual) + slack).sum(axis=0),
        (residual ** 2).sum(axis=0)])
    everything = comm.allgather(partial)
    energy, dx, dx_size, l1, squares = (
        np.array([math.fsum(column) for column in np.stack([p[row] for p in everything]).T])
        for row in range(partial.shape[0]))
    terms = (block >= 0).sum(axis=0)                 # nonzeros of d: a held end drops out
    energy_rounding = (gamma(4) + 3.0 * UNIT_ROUNDOFF
                       + 4.0 * rows.edges * UNIT_ROUNDOFF ** 2) * MARGIN
    estimate = 2.0 * dx - energy
    linear = (2.0 * gamma(terms) * dx_size + energy_rounding * energy
              + UNIT_ROUNDOFF * np.abs(estimate)) * MARGIN
    quadratic = (l1 * MARGIN) ** 2 * distance * MARGIN
    error = linear + quadratic
    error += ASSEMBLY * (estimate + error) + UNIT_ROUNDOFF * estimate
    relative = float(np.max(np.sqrt(squares) / np.sqrt(terms), initial=0.0))
    return estimate, error / estimate * MARGIN, relative
