"""``ohmgraph solve NET.h5 -o OUT.h5`` under ``mpiexec``: every process reads its slice, PETSc
solves, the processes write the solution file in turns.

Process ``r`` of ``N`` reads branches ``m r / N`` to ``m (r + 1) / N`` and nodes ``n r / N`` to
``n (r + 1) / N`` of the node-to-unknown map from the HDF5 network file
(:mod:`ohmgraph.io.network_file`); the first also reads the contraction's spanning forest. :func:`ohmgraph.engine.distributed.solve_distributed` does the
rest of the computation. The solution file has the layout of :mod:`ohmgraph.io.store`: the first
process creates it under a temporary name (the columns copied from the network file, the result
columns empty), then each process in rank order writes its rows of the branch and node results,
and the first renames it into place; no process ever holds every branch's values. A failure on
any process ends every process with the same exit code and leaves no file.
"""

from __future__ import annotations

import os
import time
from datetime import datetime, timezone
from pathlib import Path

import h5py
import numpy as np

from ohmgraph.engine.distributed import BranchPart, Forest, solve_distributed
from ohmgraph.engine.ordering import NodeUnknowns
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.errors import EXIT_OK, InputError, OutputRefused, SolverError, UserError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.mpi_launch import LaunchError, agree, idle_barrier
from ohmgraph.io.network_file import StoredNetwork, is_hdf5
from ohmgraph.io.hdf5_integrity import FILE_OPTIONS, dataset_options, seal_attributes
from ohmgraph.io.layout import LAYOUT_VERSION
from ohmgraph.io.store import DESCRIPTIONS, UNITS, file_sha256, tool_version

METHOD = "petsc"


def share(total: int, rank: int, size: int) -> tuple[int, int]:
    """Rows ``lo:hi`` of ``total`` held by process ``rank`` of ``size`` (contiguous, balanced)."""
    return total * rank // size, total * (rank + 1) // size


def require_network_file(path) -> None:
    """Refuse (:class:`LaunchError`) any network file but an HDF5 one from ``convert``."""
    if Path(path).is_file() and not is_hdf5(path):
        raise LaunchError(f"{path}: a run under mpiexec reads an HDF5 network file; "
                          f"write one with 'ohmgraph convert {path} -o NET.h5'")


def read_slice(stored: StoredNetwork, rank: int, size: int):
    """Process ``rank``'s branches and its nodes' map: ``(part, own_nodes, node_range)``."""
    lo, hi = share(stored.n_branches, rank, size)
    rows = stored.branches(lo, hi)
    part = BranchPart(lo, rows.kind, rows.from_node, rows.to_node, rows.value)
    node_range = share(stored.n_nodes, rank, size)
    own_nodes = NodeUnknowns(*(stored.column(f"nodes/{name}", *node_range)
                               for name in ("unknown", "held", "offset")))
    return part, own_nodes, node_range


def _read(args, rank: int, size: int):
    """This process's slice, the node map and (first process) the forest; checks the launch."""
    require_network_file(args.network)
    with StoredNetwork(args.network) as stored:
        if str(args.ground) != stored.reference_label:
            raise InputError(f"{args.network}: the file was converted with reference node "
                             f"{stored.reference_label!r}; convert again with --ground "
                             f"{args.ground}")
        if bool(args.allow_floating) != stored.allow_floating:
            raise InputError(f"{args.network}: the file was converted "
                             f"{'with' if stored.allow_floating else 'without'} "
                             "--allow-floating; convert again to change it")
        part, own_nodes, node_range = read_slice(stored, rank, size)
        forest = _forest(stored) if rank == 0 else None
        return stored.n_nodes, stored.unknowns, part, own_nodes, node_range, forest


def _forest(stored: StoredNetwork) -> Forest:
    """The contraction's spanning forest: its branches, their endpoints and the roots among them."""
    tree = stored.column("contraction/tree").astype(bool)
    branches = np.sort(stored.column("contraction/source_branches")[tree]).astype(np.int64)
    frm = stored.rows("branches/from", branches).astype(np.int64)
    to = stored.rows("branches/to", branches).astype(np.int64)
    ends = np.unique(np.concatenate([frm, to]))
    roots = ends[stored.rows("nodes/root", ends) == ends]
    return Forest(branches, frm, to, roots)


def run_distributed(args, comm) -> int:
    """Run a multi-process ``solve``; every process returns the same exit code.

    Raises
    ------
    UserError
        On every process, with the first process's message, when any process fails.
    """
    rank, size = comm.Get_rank(), comm.Get_size()
    start = time.perf_counter()
    error = None
    try:
        if args.method not in ("auto", METHOD):
            raise LaunchError(f"a run under mpiexec solves with --method {METHOD}, not "
                              f"{args.method}")
        if rank == 0:
            refuse_input(args.output, [args.network])
            refuse_existing(args.output, args.force)
        n_nodes, n_unknowns, part, own_nodes, node_range, forest = _read(args, rank, size)
    except UserError as failure:
        error = failure
    agree(comm, error)
    read_seconds = comm.allreduce(time.perf_counter() - start, op=_max())

    result = solve_distributed(comm, part, own_nodes, node_range, n_nodes, n_unknowns, forest,
                               args.rtol)
    if not result.finite:
        raise SolverError(f"{args.network}: the solution overflows double precision (IEEE 754 "
                          "binary64): rescale the values, for example to other units")
    if not result.converged:
        raise SolverError(f"{args.network}: {METHOD} solve ended at relative residual "
                          f"{result.relative_residual:.3g} (rtol {args.rtol:g})")
    timings = {"read": read_seconds,
               **{stage: comm.allreduce(seconds, op=_max())
                  for stage, seconds in result.timings.items()}}
    store_seconds = write_in_turns(comm, args, part, node_range, result, n_unknowns, timings)
    if rank == 0:
        summary = {"output": str(args.output), "ranks": size, "method": METHOD,
                   "preconditioner": result.preconditioner, "unknowns": n_unknowns,
                   "iterations": result.iterations, "rtol": args.rtol,
                   "relative_residual": result.relative_residual,
                   "kcl_max_residual_A": result.kcl_max_residual,
                   "power_balance_W": result.power_balance,
                   "power_dissipated_W": result.power_dissipated,
                   "timings_s": {**timings, "store": store_seconds}}
        print(dumps(summary) if args.json else _text(args, summary))
    return EXIT_OK


def _text(args, summary: dict) -> str:
    """The summary as lines of text."""
    return "\n".join([
        f"{args.network} -> {args.output}",
        f"{summary['ranks']} process(es), method {METHOD} (CG + {summary['preconditioner']}), "
        f"{summary['unknowns']} unknowns, {summary['iterations']} iterations, relative residual "
        f"{summary['relative_residual']:.3g}",
        f"KCL max residual {summary['kcl_max_residual_A']:.3g} A, power balance "
        f"{summary['power_balance_W']:.3g} W (dissipated {summary['power_dissipated_W']:.6g} W)",
        "time (s)  " + "  ".join(f"{stage} {seconds:.3g}"
                                 for stage, seconds in summary["timings_s"].items())])


def _max():
    from mpi4py import MPI

    return MPI.MAX


def _create(group, name: str, shape: int, dtype, source: h5py.Dataset | None = None):
    """An empty dataset of the solution layout (chunked and checksummed like the store's,
    :func:`ohmgraph.io.hdf5_integrity.dataset_options`; compressed unless it holds solved
    float64 values, which the single-process store also leaves uncompressed)."""
    options = dataset_options(np.empty(shape, dtype=dtype), probe=False)
    options.pop("maxshape", None)
    if np.dtype(dtype) == np.float64:   # solved values: gzip does not pay (hdf5_integrity notes)
        for key in ("compression", "compression_opts", "shuffle"):
            options.pop(key, None)
    dataset = group.create_dataset(name, shape=(shape,), dtype=dtype, **options)
    key = f"{group.name.strip('/')}/{name}"
    if key in UNITS:
        dataset.attrs["units"] = UNITS[key]
    if key in DESCRIPTIONS:
        dataset.attrs["description"] = DESCRIPTIONS[key]
    return dataset


def _start_file(temporary: Path, args, result, n_unknowns: int, size: int) -> None:
    """First process: the file with its copied columns, empty result columns and attributes."""
    with (h5py.File(args.network, "r") as source,
          h5py.File(temporary, "w", track_order=True, **FILE_OPTIONS) as h5):
        labels = source["nodes/label"]
        worst = labels[result.kcl_worst_node].decode("utf-8")
        h5.attrs.update({
            "layout": "ohmgraph solution", "layout_version": LAYOUT_VERSION,
            "tool_version": tool_version(),
            "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "reference": source.attrs["reference"], "method": METHOD, "ranks": size,
            "preconditioner": result.preconditioner, "rtol": float(args.rtol),
            "iterations": result.iterations, "relative_residual": result.relative_residual,
            "kcl_max_residual": result.kcl_max_residual, "kcl_worst_node": worst,
            "power_balance": result.power_balance, "power_delivered": result.power_delivered,
            "power_absorbed_by_sources": result.power_absorbed_by_sources,
            "power_dissipated": result.power_dissipated,
            "notes": np.array([], dtype=h5py.string_dtype()), "unknowns": n_unknowns,
            "input_file": Path(args.network).name, "input_sha256": file_sha256(args.network)})
        nodes = h5.create_group("nodes")
        source.copy(labels, nodes, "label")
        _create(nodes, "voltage", labels.shape[0], np.float64)
        branches = h5.create_group("branches")
        for name in ("name", "kind", "from", "to", "value"):
            source.copy(source[f"branches/{name}"], branches, name)
        m = source["branches/from"].shape[0]
        for name in ("current", "voltage", "power"):
            _create(branches, name, m, np.float64)
        determined = _create(branches, "current_determined", m, bool)
        determined[...] = True
        determined[np.sort(source["contraction/undetermined"][...])] = False
        source.copy(source["checks"], h5, "checks")


def write_in_turns(comm, args, part: BranchPart, node_range, result, n_unknowns: int,
                   timings: dict) -> float:
    """Write the solution file: created by the first process, filled by each in rank order.

    Returns the seconds spent (the slowest process).
    """
    rank, size = comm.Get_rank(), comm.Get_size()
    start = time.perf_counter()
    idle_barrier(comm)
    temporary = comm.bcast(Path(args.output).with_name(f".{Path(args.output).name}."
                                                       f"{os.getpid()}.tmp")
                           if rank == 0 else None, root=0)
    error = None
    try:
        if rank == 0:
            _start_file(temporary, args, result, n_unknowns, size)
    except (OSError, UserError) as failure:
        error = failure if isinstance(failure, UserError) else OutputRefused(
            f"{args.output}: cannot be written ({failure})")
    for turn in range(size):
        if error is None and rank == turn:
            try:
                with h5py.File(temporary, "r+") as h5:
                    lo, hi = part.start, part.start + part.kind.size
                    h5["branches/current"][lo:hi] = result.branch_current
                    h5["branches/voltage"][lo:hi] = result.branch_voltage
                    h5["branches/power"][lo:hi] = result.branch_power
                    h5["nodes/voltage"][node_range[0]:node_range[1]] = result.node_voltage
            except OSError as failure:
                error = OutputRefused(f"{args.output}: cannot be written ({failure})")
        idle_barrier(comm)
        failed = comm.allreduce(error is not None)
        if failed:
            break
    try:
        idle_barrier(comm)
        seconds = comm.allreduce(time.perf_counter() - start, op=_max())
        if rank == 0 and error is None and not failed:
            with h5py.File(temporary, "r+") as h5:
                group = h5.create_group("timings", track_order=True)
                group.attrs["units"] = "s"
                for stage, value in {**timings, "store": seconds}.items():
                    group.attrs[stage] = float(value)
                seal_attributes(h5)
            os.replace(temporary, args.output)
    except OSError as failure:
        error = OutputRefused(f"{args.output}: cannot be written ({failure})")
    finally:
        if rank == 0 and temporary.exists():
            temporary.unlink()
    agree(comm, error)
    return seconds
