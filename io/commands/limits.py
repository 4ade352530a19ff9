"""``ohmgraph limits SOL.h5``: check a stored solution against drop limits and ratings."""

from __future__ import annotations

from ohmgraph.engine.limits import QUANTITIES
from ohmgraph.io.commands.argtypes import whole_number
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK, InputError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.limits_view import (CAUTION, add_limit_arguments, evaluate, format_violations,
                                     has_limits, violation_rows)
from ohmgraph.io.store import read_solution


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "limits", help="check a stored solution against drop limits and branch ratings",
        description="Check every node's supply drop against --max-drop and every branch's "
                    "current and power against its own ratings (the max_current and max_power "
                    "columns of the branch table) and the global --max-current/--max-power. "
                    "Violations are listed worst first with their utilisation (value over "
                    "limit). Exit 1 when any limit is exceeded, 0 when none is. " + CAUTION)
    parser.add_argument("solution", metavar="SOL.h5", help="HDF5 file written by 'ohmgraph solve'")
    add_limit_arguments(parser)
    parser.add_argument("--top", type=whole_number(0), default=20, metavar="N",
                        help="violations to list (default 20)")
    parser.add_argument("--json", action="store_true", help="print the result as JSON")
    parser.set_defaults(run=run)


def run(args) -> int:
    """Run ``limits``; return 1 when a limit is exceeded."""
    stored = read_solution(args.solution)
    if not has_limits(stored, args):
        raise InputError(f"{args.solution}: nothing to check: give --max-drop, --max-current or "
                         "--max-power, or solve a branch table with max_current/max_power "
                         "columns")
    _, violations, _ = evaluate(stored, args.max_drop, args.max_current, args.max_power,
                                args.nominal)
    rows = violation_rows(violations, stored, args.top)
    counts = {quantity: violations.count(quantity) for quantity in QUANTITIES}
    if args.json:
        print(dumps({"solution": str(args.solution), "exceeded": len(violations),
                     "counts": counts, "violations": rows, "caution": CAUTION}))
    else:
        print(f"{args.solution}: " + ("\n".join(format_violations(rows, counts, len(violations)))
                                      if len(violations) else "no limit exceeded"))
        print(CAUTION)
    return EXIT_FAILED if len(violations) else EXIT_OK
