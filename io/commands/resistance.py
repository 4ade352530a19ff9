"""``ohmgraph resistance NET``: resistance between nodes, across resistors, Kirchhoff index.

Every value is the resistance a two-point measurement reads with every source zeroed (voltage
sources shorted, current sources removed), with its accuracy stated beside it.
"""

from __future__ import annotations

import math
import sys
from dataclasses import asdict

import numpy as np
from tqdm import tqdm

from ohmgraph.engine.resistance import ResistanceSolver
from ohmgraph.engine.solvers import DEFAULT_RTOL, SOLVERS, SolverFailed
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.commands.argtypes import add_memory_budget, positive_float, whole_number
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK, InputError, SolverError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.pairs import check_table_path, read_pairs, write_table
from ohmgraph.io.reader import read_network

# Batches of at least this many right-hand sides show a progress bar (on a terminal).
PROGRESS_MIN = 32


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "resistance", help="effective resistance between nodes, across resistors, Kirchhoff index",
        description="Effective (two-point) resistance with every source zeroed: voltage sources "
                    "become ideal connections, current sources are removed. Nodes in different "
                    "islands are infinitely far apart. Each value comes with its accuracy.")
    parser.add_argument("network", metavar="NET",
                        help="network file (.csv, .tsv, edge list; optionally .gz)")
    query = parser.add_mutually_exclusive_group(required=True)
    query.add_argument("--between", nargs=2, metavar=("A", "B"),
                       help="resistance between two nodes")
    query.add_argument("--pairs", metavar="PAIRS.csv",
                       help="CSV with columns a,b: one resistance per line")
    query.add_argument("--to-reference", nargs="+", metavar="A",
                       help="driving-point resistance from each node to the reference node")
    query.add_argument("--across-resistors", action="store_true",
                       help="resistance across every resistor (exact when small, else sketched)")
    query.add_argument("--kirchhoff", action="store_true",
                       help="Kirchhoff index: the sum of the resistances of all node pairs")
    parser.add_argument("--ground", default="0", metavar="LABEL",
                        help="reference node label (default 0)")
    parser.add_argument("--method", choices=["auto", *SOLVERS], default="auto",
                        help="linear solver (default auto: chosen for the network and the "
                             "number of solves)")
    add_memory_budget(parser)
    parser.add_argument("--rtol", type=positive_float, default=DEFAULT_RTOL,
                        help=f"relative residual target of iterative solves "
                             f"(default {DEFAULT_RTOL:g})")
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--exact", dest="exact", action="store_const", const=True, default=None,
                      help="--across-resistors/--kirchhoff: exact values (one solve per node)")
    mode.add_argument("--estimate", dest="exact", action="store_const", const=False,
                      help="--across-resistors/--kirchhoff: randomised estimate")
    parser.add_argument("--epsilon", type=positive_float, default=0.1,
                        help="--across-resistors: relative error for all resistors at once; "
                             "sketch size ceil(24 ln n / epsilon^2) (default 0.1)")
    parser.add_argument("--sketch-size", type=whole_number(1), metavar="K",
                        help="--across-resistors: sketch size K (overrides --epsilon)")
    parser.add_argument("--samples", type=whole_number(2), default=200,
                        help="--kirchhoff: Hutchinson samples (default 200)")
    parser.add_argument("--seed", type=whole_number(0), default=0, help="random seed (default 0)")
    parser.add_argument("-o", "--output", metavar="OUT.csv|OUT.h5",
                        help="write the table (--pairs, --to-reference, --across-resistors)")
    parser.add_argument("--force", action="store_true", help="overwrite OUT if it exists")
    parser.add_argument("--json", action="store_true", help="print the result as JSON")
    parser.set_defaults(run=run)


def run(args) -> int:
    """Run ``resistance``; return the exit code (see :mod:`ohmgraph.io.errors`)."""
    if args.output is not None:
        if args.between or args.kirchhoff:
            raise InputError("-o writes a table: use it with --pairs, --to-reference or "
                             "--across-resistors")
        check_table_path(args.output)
        refuse_input(args.output, (args.network, args.pairs))
        refuse_existing(args.output, args.force)
    net = read_network(args.network, ground=args.ground)
    try:
        solver = ResistanceSolver(net, method=args.method, rtol=args.rtol,
                                  memory_budget=args.memory_budget)
    except ValueError as error:
        print(f"ohmgraph resistance: {args.network}: not well-posed: {error}", file=sys.stderr)
        return EXIT_FAILED
    try:
        if args.between:
            return _between(args, net, solver)
        if args.kirchhoff:
            return _kirchhoff(args, solver)
        if args.across_resistors:
            return _across(args, net, solver)
        if args.pairs:
            a_labels, b_labels, a_idx, b_idx = read_pairs(args.pairs, net)
        else:
            a_labels = np.asarray(args.to_reference, dtype=str)
            a_idx = _nodes(args, net, a_labels, "--to-reference")
            b_idx = np.full(a_idx.size, net.reference)
            b_labels = np.full(a_idx.size, net.reference_label)
        return _pairs(args, solver, a_labels, b_labels, a_idx, b_idx)
    except SolverFailed as error:
        raise SolverError(f"{args.network}: {error}") from error


def _nodes(args, net, labels, option) -> np.ndarray:
    """Node indices of command-line labels, or :class:`InputError` naming the unknown one."""
    try:
        return net.node_index(labels)
    except KeyError as error:
        raise InputError(f"{args.network}: {option}: {error.args[0]} (not a node of the "
                         "network)") from None


def _progress(total: int, unit: str):
    """A tqdm bar on standard error (shown on a terminal for batches of PROGRESS_MIN or more)."""
    return tqdm(total=total, unit=unit, file=sys.stderr, leave=False,
                disable=None if total >= PROGRESS_MIN else True)


def _solver_summary(solver) -> dict:
    return asdict(solver.stats)


def _between(args, net, solver) -> int:
    a_idx = _nodes(args, net, [args.between[0]], "--between")
    b_idx = _nodes(args, net, [args.between[1]], "--between")
    result = solver.pairs(a_idx, b_idx)
    ohms, accuracy = float(result.ohms[0]), float(result.accuracy[0])
    a, b = args.between
    if args.json:
        print(dumps({"a": a, "b": b, "ohms": ohms, "accuracy": accuracy,
                     "connected": math.isfinite(ohms), "solver": _solver_summary(solver)}))
    elif not math.isfinite(ohms):
        print(f"{a} and {b} are in different islands: no path of resistors joins them, "
              "so the resistance between them is infinite")
    else:
        print(f"R({a}, {b}) = {ohms:.10g} ohm  (relative error at most {accuracy:.1e}; "
              f"{solver.stats.method}, {result.solves} solve{'s' if result.solves != 1 else ''})")
    return EXIT_OK


def _pairs(args, solver, a_labels, b_labels, a_idx, b_idx) -> int:
    with _progress(a_idx.size, "solve") as bar:
        result = solver.pairs(a_idx, b_idx, progress=bar.update)
    columns = {"a": a_labels, "b": b_labels, "ohms": result.ohms, "accuracy": result.accuracy}
    summary = {"pairs": int(a_idx.size), "method": result.method, "solves": result.solves,
               "seconds": result.seconds, "infinite": int(np.isinf(result.ohms).sum()),
               "max_accuracy": float(result.accuracy.max(initial=0.0)),
               "solver": _solver_summary(solver)}
    return _emit_table(args, columns, summary)


def _across(args, net, solver) -> int:
    steps = solver.free.size if args.exact is not False else (args.sketch_size or 0)
    with _progress(steps, "solve") as bar:
        result = solver.across_resistors(exact=args.exact, epsilon=args.epsilon,
                                         k=args.sketch_size, seed=args.seed,
                                         progress=bar.update)
    branches = result.branches
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(result.resistor_ohms > 0, result.ohms / result.resistor_ohms, 0.0)
    columns = {"name": net.branch_names[branches],
               "from": net.node_labels[net.from_node[branches]],
               "to": net.node_labels[net.to_node[branches]],
               "resistor_ohms": result.resistor_ohms, "ohms": result.ohms, "share": share,
               "accuracy": result.accuracy}
    summary = {"resistors": int(branches.size), "exact": result.exact,
               "accuracy_meaning": ("relative error bound" if result.exact
                                    else "relative standard deviation of each estimate"),
               "sketch_size": result.sketch_size, "epsilon_all": result.epsilon_all,
               "share_sum": float(share.sum()), "solves": result.solves,
               "seconds": result.seconds, "solver": _solver_summary(solver)}
    return _emit_table(args, columns, summary)


def _kirchhoff(args, solver) -> int:
    total = solver.free.size if args.exact is not False else args.samples
    with _progress(total, "solve") as bar:
        result = solver.kirchhoff_index(exact=args.exact, samples=args.samples, seed=args.seed,
                                        progress=bar.update)
    if args.json:
        print(dumps({**asdict(result), "solver": _solver_summary(solver)}))
    elif not math.isfinite(result.value):
        print("Kirchhoff index: infinite (the network has more than one island)")
    elif result.exact:
        print(f"Kirchhoff index = {result.value:.10g} ohm (exact, {result.solves} solves)")
    else:
        print(f"Kirchhoff index = {result.value:.6g} ohm, {100 * result.confidence:g}% "
              f"confidence interval [{result.low:.6g}, {result.high:.6g}] "
              f"(Hutchinson, {result.samples} samples)")
    return EXIT_OK


def _emit_table(args, columns: dict, summary: dict) -> int:
    """Write the table to ``-o`` (summary to standard output) or print it as CSV."""
    if args.output is not None:
        attributes = {k: v for k, v in summary.items() if isinstance(v, (int, float, str, bool))}
        write_table(args.output, columns, force=args.force, attributes=attributes)
        summary = {"output": str(args.output), **summary}
        print(dumps(summary) if args.json else
              f"wrote {len(next(iter(columns.values())))} rows to {args.output}")
    elif args.json:
        print(dumps({**summary, "rows": [dict(zip(columns, row))
                                         for row in zip(*columns.values())]}))
    else:
        import pandas as pd

        pd.DataFrame(columns).to_csv(sys.stdout, index=False, float_format="%.12g")
    return EXIT_OK
