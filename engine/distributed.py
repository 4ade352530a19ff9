"""The reduced nodal system assembled, solved and verified across MPI processes with PETSc.

Every process holds a contiguous slice of the branches and a contiguous slice of the nodes'
node-to-unknown map from the HDF5 network file (:class:`~.ordering.NodeUnknowns`: unknowns in
reverse Cuthill–McKee order, so PETSc's contiguous row blocks are compact regions of the graph);
the map entries of its branches' endpoints come from their holders by a ``VecScatter``, so no
process holds anything of the size of the whole network. Each process

1. turns its resistors and current sources into matrix entries and right-hand-side terms with
   global indices (the same stamps as :func:`~.formulation.assemble`), sends each entry to the
   process owning its row (``MPI_Alltoallv``), which sums its rows into its block of a PETSc
   distributed (MPIAIJ) matrix and vector;
2. solves with CG + BoomerAMG (:func:`.solvers.petsc.configure_ksp`) and measures the true
   residual ``||b - A x|| / ||b||``;
3. fetches the solution at the nodes it needs (a ``VecScatter``), recovers its branch currents,
   voltages and powers, and adds its currents into a distributed vector of node sums: the KCL
   residual, whose largest entry is found by PETSc, and the power balance (Tellegen's theorem,
   as in :mod:`.solve`) summed by an MPI reduction.

The currents of voltage sources and ideal connections follow from KCL over the spanning forest of
the contraction (:mod:`.recovery`); the first process gathers the node sums at the forest's nodes,
accumulates them and sends the forest currents to all.

Every PETSc call here is collective unless noted: all processes must make it, in the same order.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .network import CURRENT_SOURCE, RESISTOR
from .ordering import NodeUnknowns
from .recovery import forest_currents
from .solvers.petsc import configure_ksp, petsc_module


@dataclass(frozen=True)
class BranchPart:
    """A contiguous slice ``start:stop`` of the branches held by one process."""

    start: int
    kind: np.ndarray
    from_node: np.ndarray
    to_node: np.ndarray
    value: np.ndarray


@dataclass(frozen=True)
class Forest:
    """The spanning forest of the contraction (needed on the first process only).

    Attributes
    ----------
    branches : ndarray of int64
        Network indices of the forest's branches.
    from_node, to_node : ndarray of int64
        Their endpoints.
    roots : ndarray of int64
        Nodes among the endpoints whose supernode potential is their own (contraction roots).
    """

    branches: np.ndarray
    from_node: np.ndarray
    to_node: np.ndarray
    roots: np.ndarray


@dataclass
class DistributedSolution:
    """This process's share of the solution, and the global evidence (same on every process)."""

    branch_current: np.ndarray
    branch_voltage: np.ndarray
    branch_power: np.ndarray
    node_voltage: np.ndarray
    preconditioner: str
    iterations: int
    relative_residual: float
    converged: bool
    kcl_max_residual: float
    kcl_worst_node: int
    power_balance: float
    power_dissipated: float
    power_delivered: float
    power_absorbed_by_sources: float
    finite: bool
    timings: dict


def local_stamps(part: BranchPart, nodes: NodeUnknowns):
    """Matrix entries ``(rows, cols, values)`` and right-hand-side terms ``(index, values)``.

    Resistor ``k`` between unknowns ``a != b`` with conductance ``g`` adds ``g`` at ``(a, a)`` and
    ``(b, b)``, ``-g`` at ``(a, b)`` and ``(b, a)``, and ``-g d`` to ``a``, ``+g d`` to ``b``
    (``d`` the offset difference of its nodes); an end with a held potential ``h`` adds ``g h``
    to the other end instead of a column. A current source moves its value from ``from`` to
    ``to``. Terms at held potentials are dropped.
    """
    unknown, held, offset = nodes.unknown, nodes.held, nodes.offset
    resistive = np.flatnonzero((part.kind == RESISTOR) & (part.value > 0))
    f, t = part.from_node[resistive], part.to_node[resistive]
    a, b = unknown[f], unknown[t]
    external = ((a >= 0) | (b >= 0)) & (a != b)
    f, t, a, b = f[external], t[external], a[external], b[external]
    g = 1.0 / part.value[resistive[external]]
    drive = g * (offset[f] - offset[t])
    both = (a >= 0) & (b >= 0)
    rows = np.concatenate([a, b, a[both], b[both]])
    cols = np.concatenate([a, b, b[both], a[both]])
    values = np.concatenate([g, g, -g[both], -g[both]])
    keep = rows >= 0
    a_only, b_only = (a >= 0) & (b < 0), (b >= 0) & (a < 0)
    sources = np.flatnonzero(part.kind == CURRENT_SOURCE)
    amps = part.value[sources]
    index = np.concatenate([a, b, a[a_only], b[b_only], unknown[part.to_node[sources]],
                            unknown[part.from_node[sources]]])
    terms = np.concatenate([-drive, drive, (g * held[t])[a_only], (g * held[f])[b_only], amps,
                            -amps])
    wanted = index >= 0
    return (rows[keep], cols[keep], values[keep]), (index[wanted], terms[wanted])


def gather(PETSc, vector, indices: np.ndarray) -> np.ndarray:
    """Values of a distributed vector at global ``indices`` (collective: a VecScatter)."""
    local = PETSc.Vec().createSeq(indices.size, comm=PETSc.COMM_SELF)
    where = PETSc.IS().createGeneral(indices.astype(PETSc.IntType), comm=PETSc.COMM_SELF)
    scatter = PETSc.Scatter().create(vector, where, local, None)
    scatter.scatter(vector, local, addv=PETSc.InsertMode.INSERT_VALUES,
                    mode=PETSc.ScatterMode.FORWARD)
    values = local.getArray().copy()
    for handle in (scatter, where, local):
        handle.destroy()
    return values


def solve_distributed(comm, part: BranchPart, own_nodes: NodeUnknowns, node_range: tuple[int, int],
                      n_nodes: int, n_unknowns: int, forest: Forest | None, rtol: float
                      ) -> DistributedSolution:
    """Assemble, solve and verify the reduced system across the processes of ``comm``.

    Parameters
    ----------
    comm : mpi4py.MPI.Comm
        The processes taking part (PETSc's ``COMM_WORLD`` must be the same group).
    part : BranchPart
        This process's branches.
    own_nodes : NodeUnknowns
        The node-to-unknown map of nodes ``node_range`` only; the entries for the endpoints of
        ``part`` are fetched from their owners.
    node_range : (int, int)
        The nodes ``lo:hi`` this process holds the map of and returns the voltages of
        (contiguous, in rank order, covering all nodes).
    n_nodes, n_unknowns : int
    forest : Forest or None
        The contraction's spanning forest on the first process; None elsewhere.
    rtol : float
        Relative residual target.
    """
    PETSc = petsc_module()
    world = PETSc.COMM_WORLD
    timings = {}

    start = time.perf_counter()
    # The map entries of this slice's endpoints, numbered compactly.
    m = part.kind.size
    ends, compact = np.unique(np.concatenate([part.from_node, part.to_node]), return_inverse=True)
    nodes = fetch_node_map(PETSc, own_nodes, node_range, n_nodes, ends)
    local_part = BranchPart(part.start, part.kind, compact[:m], compact[m:], part.value)
    (rows, cols, values), (index, terms) = local_stamps(local_part, nodes)
    size, rank = comm.Get_size(), comm.Get_rank()
    bounds = np.array([n_unknowns * r // size for r in range(size + 1)], np.int64)
    lo, hi = bounds[rank], bounds[rank + 1]
    rows, cols, values = to_owners(comm, bounds, rows, cols, values)
    local = sp.csr_matrix((values, (rows - lo, cols)), shape=(hi - lo, n_unknowns))
    local.sum_duplicates()
    local.sort_indices()
    matrix = PETSc.Mat().createAIJ(
        size=((hi - lo, n_unknowns), (hi - lo, n_unknowns)),
        csr=(local.indptr.astype(PETSc.IntType), local.indices.astype(PETSc.IntType),
             local.data), comm=world)
    matrix.assemble()
    index, terms = to_owners(comm, bounds, index, terms)
    rhs, x = matrix.createVecRight(), matrix.createVecLeft()
    rhs.setArray(np.bincount(index - lo, terms, minlength=hi - lo).astype(np.float64))
    timings["assemble"] = time.perf_counter() - start

    start = time.perf_counter()
    ksp = PETSc.KSP().create(comm=world)
    ksp.setOperators(matrix)
    preconditioner = configure_ksp(ksp, rtol)
    ksp.setUp()
    timings["setup"] = time.perf_counter() - start
    start = time.perf_counter()
    ksp.solve(rhs, x)
    timings["solve"] = time.perf_counter() - start
    iterations = ksp.getIterationNumber()
    residual = rhs.duplicate()
    matrix.mult(x, residual)
    residual.aypx(-1.0, rhs)                       # b - A x
    b_norm = rhs.norm()
    relative = residual.norm() / b_norm if b_norm > 0 else residual.norm()

    start = time.perf_counter()
    # Potentials of the slice's endpoints and of this process's own nodes.
    unknown_at = np.concatenate([nodes.unknown, own_nodes.unknown])
    needed, position = np.unique(unknown_at, return_inverse=True)
    at_needed = np.full(needed.size, np.nan)
    at_needed[needed >= 0] = gather(PETSc, x, needed[needed >= 0])
    potential = np.where(unknown_at >= 0, at_needed[position],
                         np.concatenate([nodes.held, own_nodes.held]))
    voltage_at = potential + np.concatenate([nodes.offset, own_nodes.offset])
    branch_voltage = voltage_at[compact[:m]] - voltage_at[compact[m:]]
    node_voltage = voltage_at[ends.size:]
    del unknown_at, position, potential, voltage_at
    current = np.zeros(m)
    resistive = (part.kind == RESISTOR) & (part.value > 0)
    current[resistive] = branch_voltage[resistive] / part.value[resistive]
    sources = part.kind == CURRENT_SOURCE
    current[sources] = part.value[sources]

    # Node sums of the known currents; the forest accumulates them on the first process.
    sums = PETSc.Vec().createMPI((node_range[1] - node_range[0], n_nodes), comm=world)
    sums.set(0.0)
    _add_node_sums(PETSc, sums, part.from_node, part.to_node, current)
    forest_nodes = (np.unique(np.concatenate([forest.from_node, forest.to_node]))
                    if forest is not None else np.empty(0, np.int64))
    excess = gather(PETSc, sums, forest_nodes)
    if forest is not None:
        local = np.searchsorted(forest_nodes, np.concatenate([forest.from_node, forest.to_node]))
        k = forest.branches.size
        tree_current = forest_currents(forest_nodes.size, local[:k], local[k:],
                                       np.searchsorted(forest_nodes, forest.roots), excess)
        shared = (forest.branches, tree_current)
        _add_node_sums(PETSc, sums, forest.from_node, forest.to_node, tree_current)
    else:
        shared = None
        _add_node_sums(PETSc, sums, np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0))
    tree_branches, tree_current = comm.bcast(shared, root=0)
    mine = (tree_branches >= part.start) & (tree_branches < part.start + m)
    current[tree_branches[mine] - part.start] = tree_current[mine]
    sums.abs()
    worst, kcl = sums.max()
    power = branch_voltage * current
    source_power = power[part.kind != RESISTOR]
    from mpi4py import MPI

    totals = comm.allreduce(np.array([power.sum(), power[part.kind == RESISTOR].sum(),
                                      -source_power[source_power < 0].sum(),
                                      source_power[source_power > 0].sum()]), op=MPI.SUM)
    finite = comm.allreduce(bool(np.isfinite(node_voltage).all() and np.isfinite(power).all()
                                 and np.isfinite(current).all()), op=MPI.LAND)
    timings["recover"] = time.perf_counter() - start
    for handle in (sums, residual, x, rhs, ksp, matrix):
        handle.destroy()
    return DistributedSolution(
        branch_current=current, branch_voltage=branch_voltage, branch_power=power,
        node_voltage=node_voltage, preconditioner=preconditioner, iterations=int(iterations),
        relative_residual=float(relative), converged=bool(relative <= rtol),
        kcl_max_residual=float(kcl), kcl_worst_node=int(worst), power_balance=float(totals[0]),
        power_dissipated=float(totals[1]), power_delivered=float(totals[2]),
        power_absorbed_by_sources=float(totals[3]), finite=finite, timings=timings)


def fetch_node_map(PETSc, own: NodeUnknowns, node_range, n_nodes: int,
                    wanted: np.ndarray) -> NodeUnknowns:
    """The map entries of the ``wanted`` nodes from the processes holding them (collective).

    Each process holds the map of its contiguous ``node_range``; three distributed vectors
    (unknown indices as doubles, exact below 2^53) are scattered to the wanted nodes.
    """
    fetched = []
    for values in (own.unknown.astype(np.float64), own.held, own.offset):
        vector = PETSc.Vec().createMPI((node_range[1] - node_range[0], n_nodes),
                                       comm=PETSc.COMM_WORLD)
        vector.setArray(values)
        fetched.append(gather(PETSc, vector, wanted))
        vector.destroy()
    return NodeUnknowns(fetched[0].astype(np.int64), fetched[1], fetched[2])


def to_owners(comm, bounds: np.ndarray, rows: np.ndarray, *columns: np.ndarray):
    """Send every entry to the process owning its row (``bounds[r] <= row < bounds[r + 1]``).

    Collective (``MPI_Alltoallv``). Returns the received ``rows`` and ``columns`` in the same order.
    """
    from mpi4py import MPI

    owner = np.searchsorted(bounds, rows, side="right") - 1
    # A stable sort of 16-bit keys is a radix sort in NumPy: linear in the number of entries.
    order = np.argsort(owner.astype(np.uint16) if comm.Get_size() <= 1 << 16 else owner,
                       kind="stable")
    counts = np.bincount(owner, minlength=comm.Get_size()).astype(np.int64)
    received = np.empty_like(counts)
    comm.Alltoall(counts, received)
    offsets = np.concatenate([[0], np.cumsum(counts)[:-1]])
    arrived = np.concatenate([[0], np.cumsum(received)[:-1]])
    out = []
    for array in (rows, *columns):
        array = np.ascontiguousarray(array[order])
        kind = MPI.INT64_T if array.dtype == np.int64 else MPI.DOUBLE
        buffer = np.empty(int(received.sum()), array.dtype)
        comm.Alltoallv([array, (counts, offsets), kind], [buffer, (received, arrived), kind])
        out.append(buffer)
    return out


def _add_node_sums(PETSc, sums, from_node, to_node, current) -> None:
    """Add the current leaving ``from`` and entering ``to`` into the node sums (collective)."""
    sums.setValues(np.concatenate([from_node, to_node]).astype(PETSc.IntType),
                   np.concatenate([current, -current]), addv=PETSc.InsertMode.ADD_VALUES)
    sums.assemble()
