"""``ohmgraph solve NET -o OUT.h5``: read, check, solve, store and summarise a network."""

from __future__ import annotations

import time

from ohmgraph.engine.checks import check
from ohmgraph.engine.solve import solve
from ohmgraph.engine.solvers import DEFAULT_RTOL, SOLVERS, SolverFailed
from ohmgraph.io.commands.argtypes import add_memory_budget, positive_float
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.check_view import format_report, report_to_dict
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK, SolverError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.reader import read_network
from ohmgraph.io.solution_view import format_solution, solution_summary
from ohmgraph.io.store import write_solution


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "solve", help="solve a network and store every voltage, current and power in HDF5",
        description="Read a network, check it, solve it by nodal analysis, store the solution "
                    "in a new HDF5 file and print a summary with the residual evidence. If the "
                    "network is not well-posed the check report is printed, nothing is written "
                    "and the exit code is 1.")
    parser.add_argument("network", metavar="NET", help="network file (.csv, .tsv, edge list; "
                                                       "optionally .gz)")
    parser.add_argument("-o", "--output", required=True, metavar="OUT.h5",
                        help="HDF5 file to create")
    parser.add_argument("--method", choices=["auto", *SOLVERS], default="auto",
                        help="linear solver (default: auto, the cheaper by predicted cost)")
    add_memory_budget(parser)
    parser.add_argument("--rtol", type=positive_float, default=DEFAULT_RTOL,
                        help=f"relative residual target (default {DEFAULT_RTOL:g})")
    parser.add_argument("--ground", default="0", metavar="LABEL",
                        help="reference (0 V) node label (default 0)")
    parser.add_argument("--allow-floating", action="store_true",
                        help="pin one node of every island without a path to the reference at 0 V")
    parser.add_argument("--force", action="store_true", help="overwrite OUT.h5 if it exists")
    parser.add_argument("--json", action="store_true", help="print the summary as JSON")
    parser.set_defaults(run=run)


def run(args) -> int:
    """Run ``solve``; return the exit code (see :mod:`ohmgraph.io.errors`)."""
    refuse_input(args.output, [args.network])
    refuse_existing(args.output, args.force)
    start = time.perf_counter()
    net = read_network(args.network, ground=args.ground)
    read_seconds = time.perf_counter() - start

    start = time.perf_counter()
    report = check(net, allow_floating=args.allow_floating)
    check_seconds = time.perf_counter() - start
    if not report.solvable:
        print(dumps(report_to_dict(report, net, args.network)) if args.json
              else format_report(report, net, source=args.network))
        return EXIT_FAILED

    try:
        solution = solve(net, method=args.method, rtol=args.rtol,
                         allow_floating=args.allow_floating, report=report,
                         memory_budget=args.memory_budget)
    except SolverFailed as error:
        raise SolverError(f"{args.network}: {error}") from error
    solution.timings = {"read": read_seconds, **solution.timings, "check": check_seconds}
    store_seconds = write_solution(args.output, solution, input_path=args.network,
                                   force=args.force)
    summary = solution_summary(solution, {"store": store_seconds})
    if args.json:
        print(dumps({"output": str(args.output), **summary}))
    else:
        print(f"{args.network} -> {args.output}")
        print(format_solution(summary))
    return EXIT_OK
