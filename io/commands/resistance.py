"""``ohmgraph resistance NET``: resistance between nodes, across resistors, Kirchhoff index.

Every value is the resistance a two-point measurement reads with every source zeroed (voltage
sources shorted, current sources removed), with its accuracy stated beside it. Only
``--to-reference`` needs a reference node; the other queries ground a node of their own choosing
(``--between A B`` grounds ``A``, which makes the pair one solve with the best-bounded value).
Long queries say what they plan and show a progress bar on a terminal (:mod:`ohmgraph.io.progress`).
"""

from __future__ import annotations

import math
import sys
from dataclasses import asdict

import numpy as np
from ohmgraph.engine.resistance import ResistanceSolver
from ohmgraph.engine.resistance.sketch import DEFAULT_EPSILON, sketch_size
from ohmgraph.engine.solvers import DEFAULT_RTOL, SOLVERS, SolverFailed
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.commands.argtypes import add_memory_budget, positive_float, whole_number
from ohmgraph.io.csv_table import write_csv
from ohmgraph.io.errors import EXIT_OK, InputError, NotWellPosed, SolverError, UserError
from ohmgraph.io.formats import require_format
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.memory_guard import refuse_if_too_big
from ohmgraph.io.mpi_launch import launched_rank, launched_size
from ohmgraph.io.numbers import UNCERTAINTY_DIGITS, digits_for, quantity, significant
from ohmgraph.io.pairs import read_pairs
from ohmgraph.io.progress import Feedback, format_seconds, switch_text
from ohmgraph.io.reader import read_network
from ohmgraph.io.result_store import command_options
from ohmgraph.io.result_table import TABLE_FORMATS, write_result_table

# Reference node of --to-reference when --ground is not given.
DEFAULT_REFERENCE = "0"
# Seconds --across-resistors may spend on a sketch when neither --epsilon nor --sketch-size is given.
DEFAULT_TIME_BUDGET = 60.0

# What the accuracy column means, by the method that produced the values.
EXACT_ACCURACY = ("relative error bound, first order in the solve residuals; covers the rounding "
                  "of the conductances, the residuals and the value")
PAIR_ACCURACY = {
    "pair solves": "relative error bound; covers the rounding of the conductances, the solve, "
                   "the residuals and the value",
    "terminal reduction": EXACT_ACCURACY,
    "factor reach": "relative error bound; covers the rounding of the conductances, the "
                    "factorisation (its backward error in the energy norm), the forward solve "
                    "and the value",
    "trivial": "exact",
}


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "resistance", help="effective resistance between nodes, across resistors, Kirchhoff index",
        description="Effective (two-point) resistance with every source zeroed: voltage sources "
                    "become ideal connections, current sources are removed. Nodes in different "
                    "islands are infinitely far apart. Each value comes with its accuracy.")
    parser.add_argument("network", metavar="NET",
                        help="network file (.csv, .tsv, .parquet, edge list; optionally .gz)")
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
    parser.add_argument("--ground", metavar="LABEL",
                        help=f"reference node label: --to-reference measures to it (default "
                             f"{DEFAULT_REFERENCE}); the other queries need none")
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
    size = parser.add_mutually_exclusive_group()
    size.add_argument("--epsilon", type=positive_float,
                      help="--across-resistors: relative error for all resistors at once; "
                           "sketch size ceil(24 ln n / epsilon^2)")
    size.add_argument("--sketch-size", type=whole_number(1), metavar="K",
                      help="--across-resistors: sketch size K")
    size.add_argument("--time-budget", type=positive_float, metavar="SECONDS",
                      help=f"--across-resistors: without --epsilon or --sketch-size, the sketch "
                           f"size whose solves fit SECONDS (the solver set-up not counted) at "
                           f"the rate of a first timed solve (default {DEFAULT_TIME_BUDGET:g})")
    parser.add_argument("--samples", type=whole_number(2), default=200,
                        help="--kirchhoff: Hutchinson samples (default 200)")
    parser.add_argument("--seed", type=whole_number(0), default=0, help="random seed (default 0)")
    parser.add_argument("-o", "--output", metavar="OUT.csv|OUT.h5",
                        help="write the table (--pairs, --to-reference, --across-resistors)")
    parser.add_argument("--force", action="store_true", help="overwrite OUT if it exists")
    parser.add_argument("--full-precision", action="store_true",
                        help="CSV tables: write every number exactly (shortest round-trip text) "
                             "instead of 12 significant digits")
    parser.add_argument("--json", action="store_true", help="print the result as JSON")
    parser.add_argument("-q", "--quiet", action="store_true",
                        help="no plan messages or progress bars (they appear only when standard "
                             "error is a terminal)")
    parser.set_defaults(run=run)


def run(args) -> int:
    """Run ``resistance``; return the exit code (see :mod:`ohmgraph.io.errors`).

    Under ``mpiexec`` with more than one process, or ``--pairs`` with ``--method petsc``, the
    query runs on the distributed matrix (:mod:`ohmgraph.io.parallel_resistance`); only the
    first process prints an error.
    """
    size = launched_size()
    if size is not None and (size > 1 or (args.method == "petsc" and args.pairs)):
        try:
            return _run_distributed(args)
        except UserError as error:
            if launched_rank() != 0:
                return error.exit_code
            raise
    if args.output is not None:
        if args.between or args.kirchhoff:
            raise InputError("-o writes a table: use it with --pairs, --to-reference or "
                             "--across-resistors")
        require_format(args.output, TABLE_FORMATS, role="-o")
        refuse_input(args.output, (args.network, args.pairs))
        refuse_existing(args.output, args.force)
    ground = args.ground
    if ground is None and args.to_reference:
        ground = DEFAULT_REFERENCE
    net = read_network(args.network, ground=ground)
    refuse_if_too_big(net, args.method, args.network)
    if args.between and args.ground is None:
        _nodes(args, net, args.between[0], "--between")     # an unknown label: InputError
        net = net.with_reference(args.between[0])
    try:
        # --pairs grounds the strongest node of each island (a tighter factor-reach bound)
        # unless --ground names one; the other queries ground the reference (or --between's A).
        strongest = bool(args.pairs) and args.ground is None
        solver = ResistanceSolver(net, method=args.method, rtol=args.rtol,
                                  memory_budget=args.memory_budget,
                                  ground_at="strongest" if strongest else "reference")
    except ValueError as error:
        raise NotWellPosed(f"{args.network}: not well-posed: {error}") from None
    feedback = Feedback("ohmgraph resistance", args.quiet)
    solver.session.on_switch = lambda why: feedback.message(switch_text(why))
    feedback.stage(f"{solver.free.size} unknowns: setting up the solver ({args.method}) and "
                   "timing a first solve", solver.free.size)
    try:
        with feedback:
            if args.between:
                return _between(args, net, solver)
            if args.kirchhoff:
                return _kirchhoff(args, solver, feedback)
            if args.across_resistors:
                return _across(args, net, solver, feedback)
            if args.pairs:
                a_labels, b_labels, a_idx, b_idx = read_pairs(args.pairs, net)
            else:
                a_labels = np.asarray(args.to_reference, dtype=str)
                a_idx = _nodes(args, net, a_labels, "--to-reference")
                b_idx = np.full(a_idx.size, net.reference)
                b_labels = np.full(a_idx.size, net.reference_label)
            return _pairs(args, solver, a_labels, b_labels, a_idx, b_idx, feedback)
    except SolverFailed as error:
        raise SolverError(f"{args.network}: {error}") from error


def _run_distributed(args) -> int:
    from ohmgraph.io.mpi_launch import mpi_world
    from ohmgraph.io.parallel_resistance import run_distributed_pairs

    def emit(columns, summary):
        return _emit_table(args, columns,
                           {**summary, "accuracy_meaning": PAIR_ACCURACY[summary["method"]]})

    return run_distributed_pairs(args, mpi_world(), emit)


def _nodes(args, net, labels, option) -> np.ndarray:
    """Node indices of command-line labels, or :class:`InputError` naming the unknown one."""
    try:
        return net.node_index(labels)
    except KeyError as error:
        raise InputError(f"{args.network}: {option}: {error.args[0]} (not a node of the "
                         "network)") from None


def _solver_summary(solver) -> dict:
    return asdict(solver.stats)


def _solver_attributes(stats: dict | None) -> dict:
    """The solve session's statistics as flat ``solver_*`` attributes for the stored table:
    the back end, why it was used, its notes (joined by "; ") and its numbers."""
    flat = {}
    for key, value in (stats or {}).items():
        if isinstance(value, list):
            value = "; ".join(map(str, value))
        if isinstance(value, (int, float, str, bool)):
            flat[f"solver_{key}"] = value
    return flat


def _between(args, net, solver) -> int:
    a_idx = _nodes(args, net, [args.between[0]], "--between")
    b_idx = _nodes(args, net, [args.between[1]], "--between")
    result = solver.pairs_by_index(a_idx, b_idx)
    ohms, accuracy = float(result.ohms[0]), float(result.accuracy[0])
    a, b = args.between
    if args.json:
        print(dumps({"a": a, "b": b, "ohms": ohms, "accuracy": accuracy,
                     "connected": math.isfinite(ohms), "solver": _solver_summary(solver)}))
    elif not math.isfinite(ohms):
        print(f"{a} and {b} are in different islands: no path of resistors joins them, "
              "so the resistance between them is infinite")
    else:
        print(f"R({a}, {b}) = {quantity(ohms, 'ohm', digits_for(accuracy))}  (relative error "
              f"at most {accuracy:.1e}, rounding included; "
              f"{solver.stats.method}, {result.solves} solve{'s' if result.solves != 1 else ''})")
    return EXIT_OK


def _pairs(args, solver, a_labels, b_labels, a_idx, b_idx, feedback) -> int:
    result = solver.pairs_by_index(a_idx, b_idx, progress=feedback.progress,
                                   announce=feedback.announce)
    accuracy = _bound_up(result.accuracy)
    columns = {"a": a_labels, "b": b_labels, "ohms": result.ohms, "accuracy": accuracy}
    summary = {"pairs": int(a_idx.size), "method": result.method, "solves": result.solves,
               "seconds": result.seconds, "infinite": int(np.isinf(result.ohms).sum()),
               "max_accuracy": float(accuracy.max(initial=0.0)),
               "accuracy_meaning": PAIR_ACCURACY[result.method],
               **({"factor_delta": solver.factor_delta} if result.method == "factor reach"
                  else {}),
               "solver": _solver_summary(solver)}
    return _emit_table(args, columns, summary)


def _bound_up(values: np.ndarray) -> np.ndarray:
    """Error bounds rounded UP to :data:`UNCERTAINTY_DIGITS` significant digits: still bounds,
    without the noise digits (0 and inf kept)."""
    out = np.array(values, dtype=np.float64)
    live = np.isfinite(out) & (out > 0)
    scale = 10.0 ** (np.floor(np.log10(out[live])) - (UNCERTAINTY_DIGITS - 1))
    rounded = np.ceil(out[live] / scale * (1.0 - 1e-12)) * scale
    out[live] = np.where(rounded >= out[live], rounded, np.nextafter(rounded, np.inf))
    return out


def _across(args, net, solver, feedback) -> int:
    budget = args.time_budget
    if budget is None and args.epsilon is None and args.sketch_size is None:
        budget = DEFAULT_TIME_BUDGET
    result = solver.across_resistors(exact=args.exact, epsilon=args.epsilon,
                                     k=args.sketch_size, seed=args.seed,
                                     progress=feedback.progress, announce=feedback.announce,
                                     time_budget=budget)
    feedback.close()
    if not result.exact and budget is not None and args.sketch_size is None:
        feedback.message(f"sketch size {result.sketch_size} chosen to fit the time budget of "
                         f"{format_seconds(budget)}: each value within a relative standard "
                         f"deviation of {math.sqrt(2 / result.sketch_size):.2g}, all at once "
                         f"within epsilon {result.epsilon_all:.2g} (probability 1 - 1/n); "
                         f"--epsilon {DEFAULT_EPSILON:g} would need "
                         f"{sketch_size(solver.graph.n_supernodes, DEFAULT_EPSILON)} solves")
    branches = result.branches
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(result.resistor_ohms > 0, result.ohms / result.resistor_ohms, 0.0)
    columns = {"name": net.branch_names[branches],
               "from": net.node_labels[net.from_node[branches]],
               "to": net.node_labels[net.to_node[branches]],
               "resistor_ohms": result.resistor_ohms, "ohms": result.ohms, "share": share,
               "accuracy": result.accuracy}
    summary = {"resistors": int(branches.size), "exact": result.exact,
               "accuracy_meaning": (EXACT_ACCURACY if result.exact
                                    else "relative standard deviation of each estimate"),
               "sketch_size": result.sketch_size, "epsilon_all": result.epsilon_all,
               "time_budget": budget if budget is not None and not result.exact else 0.0,
               "share_sum": float(share.sum()), "solves": result.solves,
               "seconds": result.seconds, "solver": _solver_summary(solver)}
    return _emit_table(args, columns, summary)


def _kirchhoff(args, solver, feedback) -> int:
    result = solver.kirchhoff_index(exact=args.exact, samples=args.samples, seed=args.seed,
                                    progress=feedback.progress, announce=feedback.announce)
    feedback.close()
    if args.json:
        print(dumps({**asdict(result), "solver": _solver_summary(solver)}))
    elif not math.isfinite(result.value):
        print("Kirchhoff index: infinite (the network has more than one island)")
    elif result.exact:
        print(f"Kirchhoff index = {quantity(result.value, 'ohm', digits_for(result.accuracy))} "
              f"(relative error at most {result.accuracy:.1e}, rounding included; exact method, "
              f"{result.solves} solves)")
    else:
        half = (result.high - result.low) / 2
        digits = digits_for(half / abs(result.value) if result.value else None)
        print(f"Kirchhoff index = {quantity(result.value, 'ohm', digits)}, "
              f"{significant(100 * result.confidence, UNCERTAINTY_DIGITS)}% confidence interval "
              f"[{significant(result.low, digits)}, {significant(result.high, digits)}] "
              f"(Hutchinson, {result.samples} samples)")
    return EXIT_OK


def _emit_table(args, columns: dict, summary: dict) -> int:
    """Write the table to ``-o`` (summary to standard output) or print it as CSV."""
    if args.output is not None:
        attributes = {k: v for k, v in summary.items() if isinstance(v, (int, float, str, bool))}
        attributes.update(_solver_attributes(summary.get("solver")))
        write_result_table(args.output, "resistance", columns, full_precision=args.full_precision,
                           force=args.force, attrs=attributes,
                           sources={"network": args.network,
                                    **({"pairs": args.pairs} if args.pairs else {})},
                           command="resistance", options=command_options(args))
        summary = {"output": str(args.output), **summary}
        sketch = (f" (sketch of {summary['sketch_size']} projections: relative standard "
                  f"deviation {math.sqrt(2 / summary['sketch_size']):.2g} per value, epsilon "
                  f"{summary['epsilon_all']:.2g} for all at once)"
                  if summary.get("sketch_size") else "")
        print(dumps(summary) if args.json else
              f"wrote {len(next(iter(columns.values())))} rows to {args.output}{sketch}")
    elif args.json:
        print(dumps({**summary, "rows": [dict(zip(columns, row))
                                         for row in zip(*columns.values())]}))
    else:
        write_csv(sys.stdout, columns, full_precision=args.full_precision)
    return EXIT_OK
