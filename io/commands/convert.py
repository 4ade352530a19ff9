"""``ohmgraph convert NET -o NET.h5``: check a network and store it as an HDF5 network file.

The file (:mod:`ohmgraph.io.network_file`) holds the branch table as columns, the check findings
and the contraction with its node-to-unknown numbering, so a distributed solve can read it in
slices without parsing text. Exit codes as for ``solve``: 1 (and no file) when the network is not
well-posed.
"""

from __future__ import annotations

import time

from ohmgraph.engine.checks import check
from ohmgraph.engine.formulation import assemble
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.check_view import format_report
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK
from ohmgraph.io.network_file import write_network_file
from ohmgraph.io.reader import read_network


def register(subparsers) -> None:
    """Add the ``convert`` parser."""
    parser = subparsers.add_parser(
        "convert", help="store a network as an HDF5 network file, readable in slices",
        description="Read a network, check it and write an HDF5 network file with its branch "
                    "columns, check findings and the contraction (node to unknown). Every "
                    "command accepts the file as NET; a run under mpiexec needs one. If the "
                    "network is not well-posed the check report is printed, nothing is written "
                    "and the exit code is 1.")
    parser.add_argument("network", metavar="NET",
                        help="network file (.csv, .tsv, edge list; optionally .gz)")
    parser.add_argument("-o", "--output", required=True, metavar="NET.h5",
                        help="HDF5 network file to create")
    parser.add_argument("--ground", default="0", metavar="LABEL",
                        help="reference (0 V) node label (default 0)")
    parser.add_argument("--allow-floating", action="store_true",
                        help="pin one node of every island without a path to the reference at 0 V")
    parser.add_argument("--force", action="store_true", help="overwrite NET.h5 if it exists")
    parser.set_defaults(run=run)


def run(args) -> int:
    """Run ``convert``; return the exit code (see :mod:`ohmgraph.io.errors`)."""
    refuse_input(args.output, [args.network])
    refuse_existing(args.output, args.force)
    start = time.perf_counter()
    net = read_network(args.network, ground=args.ground)
    report = check(net, allow_floating=args.allow_floating)
    if not report.solvable:
        print(format_report(report, net, source=args.network))
        return EXIT_FAILED
    system = assemble(net, report.contraction, report.pinned_nodes)
    write_network_file(args.output, net, report, system, allow_floating=args.allow_floating,
                       input_path=args.network, force=args.force)
    print(f"{args.network} -> {args.output}: {net.n_nodes} nodes, {net.n_branches} branches, "
          f"{system.n_unknowns} unknowns ({time.perf_counter() - start:.2f} s)")
    return EXIT_OK
