"""``ohmgraph resistance NET.h5 --pairs PAIRS.csv`` under ``mpiexec``: every process reads its
slice of the HDF5 network file, the pairs are solved on the distributed matrix
(:func:`ohmgraph.engine.distributed_resistance.pairs_distributed`), and the first process writes
the table (one row per pair: no process needs more than the pairs) through the command's own
writer, atomically.

The pairs file is read by the first process and its labels sent to all; each process looks them
up among the labels of its own slice of the nodes, and an MPI reduction gives every process the
node index of every pair, so no process holds every label. A failure on any process ends every
process with the same exit code and a message on the first (:func:`~ohmgraph.io.mpi_launch.agree`).
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

from ohmgraph.engine.distributed_resistance import METHOD, pairs_distributed
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.errors import EXIT_OK, InputError, SolverError, UserError
from ohmgraph.io.formats import require_format
from ohmgraph.io.mpi_launch import LaunchError, agree
from ohmgraph.io.network_file import StoredNetwork
from ohmgraph.io.pairs import read_pair_labels, resolve_pair_labels
from ohmgraph.io.parallel_solve import read_slice, require_network_file
from ohmgraph.io.progress import Feedback
from ohmgraph.io.result_table import TABLE_FORMATS

BACK_END = "petsc"


def _checked_launch(args, rank: int):
    """The launch's options and output (first process) and the pairs' labels (first process)."""
    if not args.pairs:
        raise LaunchError("a run of 'resistance' under mpiexec answers --pairs; run the other "
                          "queries on one process")
    if args.method not in ("auto", BACK_END):
        raise LaunchError(f"a run under mpiexec solves with --method {BACK_END}, not "
                          f"{args.method}")
    require_network_file(args.network)
    if rank != 0:
        return None
    if args.output is not None:
        require_format(args.output, TABLE_FORMATS, role="-o")
        refuse_input(args.output, (args.network, args.pairs))
        refuse_existing(args.output, args.force)
    return read_pair_labels(args.pairs)


def _node_indices(comm, stored: StoredNetwork, node_range, labels) -> np.ndarray:
    """Node index of every label (-1 where no process has it): each process looks in its slice."""
    from mpi4py import MPI

    found = pd.Index(stored.column("nodes/label", *node_range)).get_indexer(labels)
    found = np.where(found >= 0, found + node_range[0], -1).astype(np.int64)
    comm.Allreduce(MPI.IN_PLACE, found, op=MPI.MAX)
    return found


def run_distributed_pairs(args, comm, emit) -> int:
    """Run a multi-process ``resistance --pairs``; every process returns the same exit code.

    Parameters
    ----------
    args : argparse.Namespace
        The ``resistance`` command's options.
    comm : mpi4py.MPI.Comm
    emit : callable
        ``emit(columns, summary)`` writes or prints the table (called on the first process).

    Raises
    ------
    UserError
        On every process, with the first failing process's message.
    """
    rank, size = comm.Get_rank(), comm.Get_size()
    start = time.perf_counter()
    error, labels, stored = None, None, None
    try:
        labels = _checked_launch(args, rank)
        stored = StoredNetwork(args.network)
        if stored.allow_floating:
            raise LaunchError(f"{args.network}: the file was converted with --allow-floating; "
                              "a run under mpiexec measures networks without floating islands: "
                              "run this query on one process")
        part, own_nodes, node_range = read_slice(stored, rank, size)
    except UserError as failure:
        error = failure
    try:
        agree(comm, error)
        labels = comm.bcast(labels, root=0)
        found = _node_indices(comm, stored, node_range, np.concatenate(labels))
        n_nodes, n_unknowns = stored.n_nodes, stored.unknowns
    finally:
        if stored is not None:
            stored.close()
    k = labels[0].size
    if rank == 0:
        known = {label: index for label, index in zip(np.concatenate(labels).tolist(),
                                                      found.tolist()) if index >= 0}
        try:
            resolve_pair_labels(args.pairs, labels, known)
        except InputError as failure:
            error = failure
    agree(comm, error)

    feedback = Feedback("ohmgraph resistance", args.quiet or rank != 0)
    feedback.stage(f"{n_unknowns} unknowns on {size} process(es): assembling, bounding the "
                   f"distances to the ground and setting up CG + multigrid", n_unknowns)
    with feedback:
        result = pairs_distributed(comm, part, own_nodes, node_range, n_nodes, n_unknowns,
                                   found[:k], found[k:], args.rtol, progress=feedback.progress,
                                   announce=feedback.announce)
    if not result.converged:
        raise SolverError(f"{args.network}: {BACK_END} solves ended at relative residual "
                          f"{result.relative_residual:.3g} (rtol {args.rtol:g})")
    seconds = comm.allreduce(time.perf_counter() - start, op=_max())
    timings = {stage: comm.allreduce(value, op=_max()) for stage, value in result.timings.items()}
    if rank == 0:
        columns = {"a": labels[0], "b": labels[1], "ohms": result.ohms,
                   "accuracy": result.accuracy}
        summary = {"pairs": int(k), "method": METHOD, "solves": result.solves,
                   "seconds": seconds, "infinite": 0,
                   "max_accuracy": float(result.accuracy.max(initial=0.0)),
                   "back_end": BACK_END, "ranks": size,
                   "solver": {"method": BACK_END, "preconditioner": result.preconditioner,
                              "ranks": size, "rtol": args.rtol,
                              "iterations": result.iterations,
                              "relative_residual": result.relative_residual,
                              "ground_distance_ohm": result.ground_distance,
                              "distance_rounds": result.distance_rounds,
                              "timings_s": timings}}
        try:
            emit(columns, summary)
        except UserError as failure:
            error = failure
    agree(comm, error)
    return EXIT_OK


def _max():
    from mpi4py import MPI

    return MPI.MAX
