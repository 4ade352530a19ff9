"""``ohmgraph verify SOL.h5 [NET]``: recompute a stored solution's evidence from its arrays.

The checks and their tolerances are those of :mod:`ohmgraph.engine.evidence`; with ``NET`` the
file must also belong to that network: the input's SHA-256 and every branch (name, kind, end
labels, value) as stored.
"""

from __future__ import annotations

from ohmgraph.engine.evidence import claims, network_differences, recompute
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.reader import read_network
from ohmgraph.io.store import file_sha256, read_solution

FIRST_ROWS = 5


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "verify", help="recompute a stored solution's evidence and check it against its network",
        description="Read an HDF5 file written by 'ohmgraph solve' and recompute, from the "
                    "stored arrays alone, every branch voltage, Ohm's law on every resistor, "
                    "the source values, every branch power, KCL at every node and the power "
                    "balance, each against a tolerance derived from the stored rtol and the "
                    "values' magnitudes. With NET, also check that the file was computed from "
                    "it (SHA-256 of the file and every branch). Exit 0 when everything holds, "
                    "1 with the first failing rows when not.")
    parser.add_argument("solution", metavar="SOL.h5", help="HDF5 file written by 'ohmgraph solve'")
    parser.add_argument("network", metavar="NET", nargs="?",
                        help="the network file the solution should come from")
    parser.add_argument("--json", action="store_true", help="print the results as JSON")
    parser.set_defaults(run=run)


def _row_label(stored, check, position) -> str:
    row = int(check.rows[position])
    net = stored.network
    if check.over == "node":
        return f"node {net.node_labels[row]}"
    if check.over == "branch":
        return (f"branch {net.branch_names[row]} ({net.node_labels[net.from_node[row]]} -> "
                f"{net.node_labels[net.to_node[row]]})")
    return "network"


def _evidence(stored) -> list[dict]:
    attrs = stored.attrs
    checks = recompute(stored.network, stored.node_voltage, stored.branch_current,
                       stored.branch_voltage, stored.branch_power, attrs["rtol"],
                       attrs["relative_residual"])
    checks += claims(checks, attrs["kcl_max_residual"], attrs["power_balance"])
    results = []
    for check in checks:
        failing = check.failing
        results.append({
            "check": check.name, "key": check.key, "rows": int(check.rows.size),
            "over": check.over,
            "failed": int(failing.size), "worst_error_to_tolerance": check.worst_ratio,
            "first_failures": [{"row": _row_label(stored, check, k),
                                "stored": float(check.stored[k]),
                                "expected": float(check.expected[k]),
                                "error": float(check.error[k]),
                                "tolerance": float(check.tolerance[k])}
                               for k in failing[:FIRST_ROWS]]})
    return results


def _belongs(stored, path) -> list[dict]:
    given = read_network(path, ground=stored.attrs["reference"])
    recorded = stored.attrs.get("input_sha256")
    digest = file_sha256(path)
    same_file = {"check": f"input file SHA-256 matches {path}", "rows": 1, "over": "file",
                 "failed": int(recorded != digest), "first_failures": [] if recorded == digest
                 else [{"row": "file", "stored": recorded or "(none recorded)",
                        "expected": digest}]}
    differences = network_differences(stored.network, given)
    same_network = {"check": f"every branch matches {path}", "rows": stored.network.n_branches,
                    "over": "branch", "failed": len(differences),
                    "first_failures": [{"row": text} for text in differences[:FIRST_ROWS]]}
    return [same_file, same_network]


def _format(path, results: list[dict]) -> str:
    lines = [f"{path}:"]
    for result in results:
        status = "FAIL" if result["failed"] else "pass"
        line = f"  {status}  {result['check']} ({result['rows']:,} {result['over']} row(s))"
        if "worst_error_to_tolerance" in result:
            line += f", worst error {result['worst_error_to_tolerance']:.3g} x tolerance"
        lines.append(line)
        for failure in result["first_failures"]:
            detail = ", ".join(f"{key} {value:.17g}" if isinstance(value, float)
                               else f"{key} {value}"
                               for key, value in failure.items() if key != "row")
            lines.append(f"        {failure['row']}" + (f": {detail}" if detail else ""))
        if result["failed"] > len(result["first_failures"]):
            lines.append(f"        ... {result['failed']:,} failing row(s) in all")
    failed = sum(1 for result in results if result["failed"])
    lines.append("verified: every check holds" if not failed
                 else f"NOT verified: {failed} of {len(results)} checks fail")
    return "\n".join(lines)


def run(args) -> int:
    """Run ``verify``; return 0 when every check holds, 1 otherwise."""
    stored = read_solution(args.solution)
    results = _evidence(stored)
    if args.network is not None:
        results += _belongs(stored, args.network)
    verified = not any(result["failed"] for result in results)
    if args.json:
        print(dumps({"file": str(args.solution), "verified": verified, "checks": results}))
    else:
        print(_format(args.solution, results))
    return EXIT_OK if verified else EXIT_FAILED
