"""``ohmgraph check NET``: is the network well-posed, and if not, which nodes and branches are at
fault.

Exit codes: 0 when the network has exactly one solution, 1 when a check finds an error, 2 when
the file cannot be read.
"""

from __future__ import annotations

from ohmgraph.io.check_view import format_report, report_to_dict
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.reader import read_network_file


def register(subparsers) -> None:
    """Add the ``check`` parser."""
    parser = subparsers.add_parser(
        "check", help="check that a network is well-posed",
        description="Read a network file and report whether it has exactly one solution: "
                    "KVL across loops of voltage sources, KCL across cut sets of current "
                    "sources, floating islands, bad values. Exit 0 when solvable, 1 when not, "
                    "2 when the file cannot be read.")
    parser.add_argument("network", metavar="NET",
                        help="branch table (.csv or .tsv, optionally .gz, or .parquet) or "
                             "whitespace edge list (from to ohms, or from to for 1 ohm)")
    parser.add_argument("--ground", default="0", metavar="LABEL",
                        help="label of the reference (0 V) node (default: 0)")
    parser.add_argument("--allow-floating", action="store_true",
                        help="pin one node of each island without a path to the reference at "
                             "0 V instead of reporting an error")
    parser.add_argument("--json", action="store_true",
                        help="print the report as JSON")
    parser.set_defaults(run=run)


def run(args) -> int:
    """Read, check and report; return the exit code."""
    read = read_network_file(args.network, ground=args.ground)
    net = read.network
    report = read.check(allow_floating=args.allow_floating)
    if args.json:
        print(dumps(report_to_dict(report, net, source=args.network)))
    else:
        print(format_report(report, net, source=args.network))
    return EXIT_OK if report.solvable else EXIT_FAILED
