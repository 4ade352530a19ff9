"""``ohmgraph diagnose NET MEAS.csv``: which single resistor fault best explains the readings."""

from __future__ import annotations

import numpy as np

from ohmgraph.engine.readings.diagnosis import SHORT_RATIO, diagnose
from ohmgraph.engine.readings.model import compare
from ohmgraph.io.commands.argtypes import fraction, whole_number
from ohmgraph.io.commands.reading_model import model_readings, read_inputs, write_table
from ohmgraph.io.commands.reading_options import (add_full_precision_argument,
                                                  add_network_arguments, add_output_arguments,
                                                  add_reading_arguments)
from ohmgraph.io.errors import EXIT_OK, InputError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.numbers import quantity, significant

CHI2_DIGITS = 4


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "diagnose", help="rank single-resistor faults (open, short, value) that explain readings",
        description="Rank single-resistor fault hypotheses (open, short, value change with its "
                    "estimated resistance) by weighted least squares against the readings' "
                    "accuracy bands, using rank-one (Sherman-Morrison) updates of the solved "
                    "network and one adjoint solve per reading. Resistors the readings cannot "
                    "tell apart are listed as one group. Exit 0 after a diagnosis.")
    add_network_arguments(parser)
    add_reading_arguments(parser)
    parser.add_argument("--top", type=whole_number(1), default=10, metavar="K",
                        help="number of hypotheses to rank (default 10)")
    parser.add_argument("--short-ratio", type=fraction, default=SHORT_RATIO, metavar="F",
                        help=f"a short is the resistance times F (default {SHORT_RATIO:g})")
    add_output_arguments(parser)
    add_full_precision_argument(parser)
    parser.set_defaults(run=run, command_group="diagnosis")


def hypothesis_columns(net, result) -> dict:
    """One row per member of every ranked group."""
    rows = {"rank": [], "branch": [], "kind": [], "nominal_ohms": [], "estimated_ohms": [],
            "chi2": [], "group_size": [], "explains_all": []}
    for rank, hypothesis in enumerate(result.hypotheses, start=1):
        for member, branch in enumerate(hypothesis.branches):
            rows["rank"].append(rank)
            rows["branch"].append(str(net.branch_names[branch]))
            rows["kind"].append(hypothesis.kinds[member])
            rows["nominal_ohms"].append(float(hypothesis.nominal_ohms[member]))
            rows["estimated_ohms"].append(float(hypothesis.estimated_ohms[member]))
            rows["chi2"].append(hypothesis.chi2)
            rows["group_size"].append(int(hypothesis.branches.size))
            rows["explains_all"].append(hypothesis.explains_all)
    return {key: np.array(values) for key, values in rows.items()}


def _describe(kind: str, nominal: float, estimated: float) -> str:
    if kind == "open":
        return f"open (model {quantity(nominal, 'ohm')})"
    if kind == "short":
        return f"short (model {quantity(nominal, 'ohm')})"
    return (f"{quantity(estimated, 'ohm')} instead of {quantity(nominal, 'ohm')} "
            f"({estimated / nominal - 1:+.1%})")


def _format(net, result, failed: int, readings: int) -> str:
    lines = [f"{failed} of {readings} reading(s) outside their accuracy; chi-square of the "
             f"model as it is: {significant(result.baseline_chi2, CHI2_DIGITS)} over "
             f"{result.readings_used.size} reading(s)"]
    if not failed:
        lines.append("every reading is within accuracy: no fault is indicated; the ranking "
                     "below is for information only")
    lines.append(f"{'rank':>4} {'chi2':>10} {'fits':>4}  hypothesis")
    for rank, hypothesis in enumerate(result.hypotheses, start=1):
        fits = "yes" if hypothesis.explains_all else "no"
        for member, branch in enumerate(hypothesis.branches):
            head = (f"{rank:>4} {significant(hypothesis.chi2, CHI2_DIGITS):>10} {fits:>4}  "
                    if member == 0
                    else " " * 22)
            lines.append(head + f"{net.branch_names[branch]}: "
                         + _describe(hypothesis.kinds[member], hypothesis.nominal_ohms[member],
                                     hypothesis.estimated_ohms[member]))
        if hypothesis.branches.size > 1:
            lines.append(" " * 22 + f"(the readings cannot tell these {hypothesis.branches.size} "
                                    "apart)")
    tied = result.tied_with_best()
    if tied > 1:
        lines.append(f"caution: {tied} hypotheses fit within chi2 + 1 of the best; at this "
                     "accuracy the readings do not single out the first")
    lines.append(f"'fits': every reading within its band once the fault is assumed. "
                 f"{result.candidates} resistor(s) screened, {result.evaluated} evaluated "
                 f"exactly; {result.solves['adjoint']} adjoint and "
                 f"{result.solves['self_resistance']} self-resistance solve(s); ranking "
                 + ("proven exact" if result.exact else "NOT proven exact"))
    lines += [f"note: {note}" for note in result.notes]
    return "\n".join(lines)


def run(args) -> int:
    """Run ``diagnose``; exit 0 once a diagnosis is printed."""
    net, table = read_inputs(args)
    # An infinite (open-circuit) resistance reading takes no part in the fit; its band may be 0.
    zero = np.flatnonzero((table.readings.band <= 0) & np.isfinite(table.readings.measured))
    if zero.size:
        raise InputError(f"{table.path}:{table.lines[zero[0]]}: column 'accuracy': the allowed "
                         "band is 0; diagnose weighs readings by their accuracy, which must be "
                         "positive")
    model = model_readings(args, net, table.readings)
    comparison = compare(model)
    result = diagnose(model, top=args.top, short_ratio=args.short_ratio)
    failed = int((~comparison.passed).sum())
    columns = hypothesis_columns(net, result)
    attrs = {"baseline_chi2": result.baseline_chi2, "readings": int(model.readings.n),
             "readings_failed": failed, "readings_used": int(result.readings_used.size),
             "candidates": result.candidates, "evaluated_exactly": result.evaluated,
             "ranking_exact": result.exact, "short_ratio": result.short_ratio,
             "tied_with_best": result.tied_with_best(),
             "solves": result.solves, "timings_s": {**model.timings, **result.timings},
             "notes": model.notes + result.notes}
    if args.output:
        write_table(args, columns,
                    units={"nominal_ohms": "ohm", "estimated_ohms": "ohm"}, attrs=attrs,
                    sources={"network": args.network, "measurements": args.measurements})
    if args.json:
        rows = [dict(zip(columns, values)) for values in zip(*columns.values())]
        print(dumps({"summary": attrs, "hypotheses": rows}))
    else:
        print(_format(net, result, failed, model.readings.n))
    return EXIT_OK
