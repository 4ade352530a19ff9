"""``ohmgraph solve NET -o OUT.h5``: read, check, solve, store and summarise a network."""

from __future__ import annotations

import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import replace

from ohmgraph.engine.drop import DEFAULT_THRESHOLDS, supply_drop
from ohmgraph.engine.solve import solve
from ohmgraph.engine.solvers import DEFAULT_RTOL, SOLVERS, SolverFailed
from ohmgraph.io.commands.argtypes import add_memory_budget, finite_float, positive_float
from ohmgraph.io.drop_view import drop_datasets, thresholds_type
from ohmgraph.io.ahead import loading_ahead
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.check_view import format_report, report_to_dict
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK, SolverError, UserError
from ohmgraph.io.formats import HDF5, require_format
from ohmgraph.io.interrupts import checkpoint
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.memory_guard import refuse_if_too_big
from ohmgraph.io.network_file import is_hdf5
from ohmgraph.io.mpi_launch import launched_rank, launched_size
from ohmgraph.engine.variant import apply_changes
from ohmgraph.io.changes import CHANGES_NOTE, change_note, check_from_base, read_changes
from ohmgraph.io.node_table import node_table_by_label, read_node_table
from ohmgraph.io.progress import Feedback, format_seconds
from ohmgraph.io.reader import RATING_COLUMNS, NetworkFile, read_network_file
from ohmgraph.io.setup_store import read_setup
from ohmgraph.io.solution_view import format_solution, solution_summary
from ohmgraph.io.store import (file_sha256, read_solution, read_warm_start, solution_file,
                               voltages_by_label)


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "solve", help="solve a network and store every voltage, current and power in HDF5",
        description="Read a network, check it, solve it by nodal analysis, store the solution "
                    "in a new HDF5 file and print a summary with the residual evidence. If the "
                    "network is not well-posed the check report is printed, nothing is written "
                    "and the exit code is 1.")
    parser.add_argument("network", metavar="NET",
                        help="network file (.csv, .tsv, .parquet, edge list; optionally .gz; or "
                             "an HDF5 network file from 'convert', which a run under mpiexec "
                             "needs)")
    parser.add_argument("-o", "--output", required=True, metavar="OUT.h5",
                        help="HDF5 file to create")
    parser.add_argument("--method", choices=["auto", *SOLVERS], default="auto",
                        help="linear solver (default: auto, the cheaper by predicted cost; "
                             "petsc under mpiexec with more than one process)")
    add_memory_budget(parser)
    parser.add_argument("--rtol", type=positive_float, default=DEFAULT_RTOL,
                        help=f"relative residual target (default {DEFAULT_RTOL:g})")
    parser.add_argument("--ground", default="0", metavar="LABEL",
                        help="reference (0 V) node label (default 0)")
    parser.add_argument("--allow-floating", action="store_true",
                        help="pin one node of every island without a path to the reference at 0 V")
    parser.add_argument("--nodes", metavar="NODES.csv",
                        help="node table: label,x,y and optionally layer (stored with the "
                             "solution, used by 'map' and 'report')")
    parser.add_argument("--nominal", type=finite_float, metavar="VOLTS",
                        help="supply voltage of every net for the drop (default: the potential "
                             "each net's source-held nodes are held at; 0 V for a ground net)")
    parser.add_argument("--drop-thresholds", type=thresholds_type, default=DEFAULT_THRESHOLDS,
                        metavar="LIST", help="drop thresholds to count nodes over, comma-"
                                             "separated, such as 1%%,5%%,10mV (default "
                                             "1%%,2%%,5%%,10%%)")
    parser.add_argument("--changes", metavar="CHANGES.csv",
                        help="change file, a branch table: a row naming a branch of NET sets its "
                             "value (inf opens a resistor) and ratings, a row with a new name "
                             "adds a branch")
    parser.add_argument("--start-from", metavar="BASE.h5",
                        help="stored solution of a nearby network to start the solver from "
                             "(matched by node label; its node table is kept when --nodes is "
                             "not given)")
    parser.add_argument("--keep-setup", action="store_true",
                        help="store the solver's set-up (amg-cg: the multigrid levels) in OUT.h5, "
                             "so that a later --start-from OUT.h5 of the same network, or of "
                             "one with only values changed, skips setting it up again")
    parser.add_argument("--force", action="store_true", help="overwrite OUT.h5 if it exists")
    parser.add_argument("--json", action="store_true", help="print the summary as JSON")
    parser.add_argument("-q", "--quiet", action="store_true",
                        help="no stage messages (they appear only when standard error is a "
                             "terminal, on networks of 100,000 nodes or more)")
    parser.set_defaults(run=run)


def read_inputs(args, base, input_sha256) -> tuple[NetworkFile, list, bool]:
    """The network file (network, reader's findings, ratings), the notes saying where it came
    from, and whether it is the very network ``BASE.h5`` was solved from (same SHA-256 — the
    future ``input_sha256`` — same reference node, no change file applied then). That network
    is taken from ``BASE.h5``, which is faster to read than a text file; an HDF5 network file
    (``convert``) is read itself, faster still."""
    same = (base is not None and base.attrs.get("input_sha256") == input_sha256.result()
            and base.attrs["reference"] == args.ground
            and not any(note.startswith(CHANGES_NOTE) for note in base.attrs.get("notes", [])))
    if same and not is_hdf5(args.network):
        ratings = {name: base.extra[f"branches/{name}"] for name in RATING_COLUMNS
                   if f"branches/{name}" in base.extra}
        return (NetworkFile(args.network, base.network, (), ratings),
                [f"network taken from {args.start_from}: {args.network} is unchanged since "
                 "(same SHA-256)"], True)
    return read_network_file(args.network, ground=args.ground), [], same


def read_kept_setup(start_from, notes: list):
    """The solver set-up kept in ``BASE.h5`` (None, with a note, when it holds none or it
    cannot be read) and the seconds its reading took (None without ``--start-from``)."""
    if not start_from:
        return None, None
    start = time.perf_counter()
    kept, note = read_setup(start_from)
    if note is not None:
        notes.append(note)
    return kept, time.perf_counter() - start


def run(args) -> int:
    """Run ``solve``; return the exit code (see :mod:`ohmgraph.io.errors`).

    Under ``mpiexec`` with more than one process, or with ``--method petsc``, the solve is
    distributed (:mod:`ohmgraph.io.parallel_solve`); only the first process prints an error.
    """
    size = launched_size()
    if size is not None and (size > 1 or args.method == "petsc"):
        try:
            from ohmgraph.io.mpi_launch import mpi_world
            from ohmgraph.io.parallel_solve import run_distributed

            return run_distributed(args, mpi_world())
        except UserError as error:
            if launched_rank() != 0:
                return error.exit_code
            raise
    refuse_input(args.output, [args.network, args.nodes, args.changes, args.start_from])
    refuse_existing(args.output, args.force)
    require_format(args.output, (HDF5,), role="-o")
    with loading_ahead(args.network):
        return _solve_here(args)


def _solve_here(args) -> int:
    """``solve`` on this one process."""
    checkpoint("read")
    start = time.perf_counter()
    # The input's SHA-256 (provenance, and whether NET is BASE.h5's network) in another thread:
    # hashlib releases the interpreter lock. Without BASE.h5 it waits for the solve, as the
    # text reader keeps both cores busy; with one it runs beside BASE.h5's reading.
    hashing = ThreadPoolExecutor(1)
    input_sha256 = hashing.submit(file_sha256, args.network) if args.start_from else None
    base = None
    if args.start_from:
        # NET in HDF5 is read itself, so only what a warm start needs is read from BASE.h5;
        # a text NET may be the file BASE.h5 was solved from, whose network BASE.h5 holds
        base = (read_warm_start(args.start_from) if is_hdf5(args.network)
                else read_solution(args.start_from, branch_results=False))
    read, notes, same_as_base = read_inputs(args, base, input_sha256)
    change_file = None
    if args.changes:
        change_file = read_changes(args.changes, read.network)
        original = read.network
        read = replace(read, network=apply_changes(read.network, change_file.changes),
                       ratings=change_file.changed_ratings(read.network, read.ratings))
        notes.append(change_note(args.changes, change_file.changes))
    net, ratings = read.network, read.ratings
    nodes = read_node_table(args.nodes, net) if args.nodes else None
    start_voltage = None
    if base is not None:
        start_voltage, matched = voltages_by_label(base, net)
        notes.append(f"started from {args.start_from} ({matched:,} of {net.n_nodes:,} nodes "
                     "matched by label)")
        if nodes is None:
            nodes = node_table_by_label(base, net)
    read_seconds = time.perf_counter() - start
    kept, kept_seconds = read_kept_setup(args.start_from, notes)
    refuse_if_too_big(net, args.method, args.network)
    feedback = Feedback("ohmgraph solve", args.quiet)
    feedback.stage(f"read {net.n_branches:,} branches in {format_seconds(read_seconds)}; "
                   "checking", net.n_nodes)

    checkpoint("check")
    start = time.perf_counter()
    # NET is the very network BASE.h5 was solved from: its stored check may serve
    report = (check_from_base(base.findings, base.check_summary, original, change_file.changes,
                              net)
              if change_file is not None and same_as_base else None)
    if report is None:
        report = read.check(allow_floating=args.allow_floating)
    else:
        notes.append(f"check of {args.start_from} kept: only values changed (resistance "
                     "spread recomputed)")
    check_seconds = time.perf_counter() - start
    if not report.solvable:
        print(dumps(report_to_dict(report, net, args.network)) if args.json
              else format_report(report, net, source=args.network))
        return EXIT_FAILED

    checkpoint("solve")
    if input_sha256 is None:            # the file is still in the page cache
        input_sha256 = hashing.submit(file_sha256, args.network)
    hashing.shutdown(wait=False)
    feedback.stage(f"checked in {format_seconds(check_seconds)}; assembling, choosing the solver "
                   f"({args.method}), setting it up and solving", net.n_nodes)
    # What the solve does not change goes into the output file meanwhile, in a third thread
    known = {**{f"branches/{k}": v for k, v in ratings.items()},
             **(nodes.datasets() if nodes else {})}
    with solution_file(args.output, net, report, force=args.force, extra=known,
                       after=input_sha256) as output:
        try:
            solution = solve(net, method=args.method, rtol=args.rtol,
                             allow_floating=args.allow_floating, report=report,
                             start_voltage=start_voltage, memory_budget=args.memory_budget,
                             kept_setup=kept)
        except SolverFailed as error:
            raise SolverError(f"{args.network}: {error}") from error
        solution.timings = {"read": read_seconds, **solution.timings, "check": check_seconds}
        if kept_seconds is not None:
            solution.timings["read_setup"] = kept_seconds
        setup = solution.kept_setup() if args.keep_setup else None
        if args.keep_setup and setup is None:
            notes.append(f"--keep-setup: the {solution.method} set-up cannot be kept (only "
                         "amg-cg's can: ask for it with --method amg-cg)")
        solution.notes += notes
        solution.release_solver()           # nothing here solves again: free it before storing
        start = time.perf_counter()
        drop = supply_drop(net, solution.node_voltage, nominal=args.nominal,
                           thresholds=args.drop_thresholds)
        solution.timings["drop"] = time.perf_counter() - start
        feedback.stage(f"solved ({solution.method}, relative residual "
                       f"{solution.relative_residual:.1e}); writing {args.output}", net.n_nodes)
        store_seconds = output.finish(solution, input_path=args.network,
                                      extra=drop_datasets(drop), input_sha256=input_sha256,
                                      setup=setup)
    summary = solution_summary(solution, {"store": store_seconds}, drop)
    if args.json:
        print(dumps({"output": str(args.output), **summary}))
    else:
        print(f"{args.network} -> {args.output}")
        print(format_solution(summary))
    return EXIT_OK
