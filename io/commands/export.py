"""``ohmgraph export SOL.h5 --nodes FILE --branches FILE``: tables for other tools."""

from __future__ import annotations

from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.commands.argtypes import whole_number
from ohmgraph.io.errors import EXIT_OK, InputError
from ohmgraph.io.export import (BRANCH_ORDER, NODE_ORDER, branch_frame, check_table_path,
                                node_frame, select, write_table)
from ohmgraph.io.store import read_solution


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "export", help="write nodes and branches of a stored solution to CSV or Parquet",
        description="Write the nodes (label, voltage, net, drop, held, and x, y, layer when "
                    "the solution has a node table) and the branches (name, kind, from, to, "
                    "value, current, voltage, power, and ratings with utilisation when the "
                    "branch table had them) of a stored solution. The extension chooses the "
                    "format: .csv or .parquet.")
    parser.add_argument("solution", metavar="SOL.h5", help="HDF5 file written by 'ohmgraph solve'")
    parser.add_argument("--nodes", metavar="FILE", help="node table to write")
    parser.add_argument("--branches", metavar="FILE", help="branch table to write")
    parser.add_argument("--top", type=whole_number(1), metavar="N",
                        help="only the N rows of largest magnitude (default: every row)")
    parser.add_argument("--node-by", choices=NODE_ORDER, default="drop",
                        help="node quantity --top orders by (default drop)")
    parser.add_argument("--by", choices=BRANCH_ORDER, default="current",
                        help="branch quantity --top orders by (default current)")
    parser.add_argument("--kind", choices=["R", "V", "I"], action="append",
                        help="only branches of this kind (repeat for several)")
    parser.add_argument("--force", action="store_true", help="overwrite existing files")
    parser.set_defaults(run=run)


def run(args) -> int:
    """Run ``export``; return the exit code."""
    outputs = [path for path in (args.nodes, args.branches) if path]
    if not outputs:
        raise InputError("nothing to write: give --nodes FILE and/or --branches FILE")
    if args.nodes and args.branches and args.nodes == args.branches:
        raise InputError(f"{args.nodes}: named for both --nodes and --branches")
    for path in outputs:
        check_table_path(path)
        refuse_input(path, [args.solution])
        refuse_existing(path, args.force)
    stored = read_solution(args.solution)
    written = []
    if args.nodes:
        nodes = select(node_frame(stored), args.node_by, args.top)
        written.append((args.nodes, nodes))
    if args.branches:
        branches = branch_frame(stored)
        if args.by == "utilisation" and "utilisation" not in branches.columns and args.top:
            raise InputError(f"{args.solution}: has no ratings to order by utilisation")
        written.append((args.branches, select(branches, args.by, args.top, args.kind)))
    for path, frame in written:
        write_table(frame, path, args.force)
        print(f"{path}: {len(frame):,} row(s), columns {', '.join(frame.columns)}")
    return EXIT_OK
