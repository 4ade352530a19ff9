"""``ohmgraph tolerance NET (--observe NODE... | --readings MEAS.csv)``: spread of readings from
resistor tolerances (node voltages, or every reading of a measurement table: V, R and I)."""

from __future__ import annotations

import numpy as np
from tqdm import tqdm

from ohmgraph.engine.readings.model import Readings
from ohmgraph.engine.readings.sensitivity import monte_carlo, tolerance_spread
from ohmgraph.io.commands.argtypes import whole_number
from ohmgraph.io.commands.part_options import add_tolerance_arguments, read_part_tolerances
from ohmgraph.io.commands.reading_model import model_readings, write_table
from ohmgraph.io.commands.reading_options import (add_full_precision_argument,
                                                  add_network_arguments, add_output_arguments,
                                                  check_output)
from ohmgraph.io.errors import EXIT_OK, InputError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.measurement_table import UNIT_NAME, read_measurements
from ohmgraph.io.memory_guard import refuse_if_too_big
from ohmgraph.io.numbers import digits_beside, digits_for, significant, uncertainty
from ohmgraph.io.reader import read_network


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "tolerance", help="spread of readings (V, R, I) from resistor tolerances",
        description="Sensitivity of each reading (node voltages with --observe, or every "
                    "reading of a measurement table with --readings: V, R and I) to every "
                    "resistor by the adjoint method (one extra solve per reading), the "
                    "worst-case and root-sum-square spread from the resistor tolerances, the "
                    "largest contributors, and optionally a Monte Carlo check.")
    add_network_arguments(parser)
    what = parser.add_mutually_exclusive_group(required=True)
    what.add_argument("--observe", nargs="+", metavar="NODE",
                      help="node labels whose voltage (against the reference) to analyse")
    what.add_argument("--readings", dest="measurements", metavar="MEAS.csv",
                      help="measurement table (kind,a,b; value and accuracy are not needed)")
    add_tolerance_arguments(parser)
    parser.add_argument("--top", type=whole_number(0), default=5, metavar="N",
                        help="largest contributors listed per reading (default 5)")
    parser.add_argument("--samples", type=whole_number(0), default=0, metavar="N",
                        help="Monte Carlo samples (values uniform within tolerance; default 0)")
    parser.add_argument("--seed", type=whole_number(0), default=0,
                        help="Monte Carlo seed (default 0)")
    add_output_arguments(parser)
    add_full_precision_argument(parser)
    parser.set_defaults(run=run, command_group="tolerance")


def _observations(net, labels) -> Readings:
    unknown = [label for label in labels if label not in net.label_index]
    if unknown:
        raise InputError(f"--observe: unknown node(s) {', '.join(map(repr, unknown))}")
    try:
        return Readings.from_labels(net, ["V"] * len(labels), labels, [""] * len(labels))
    except ValueError as error:
        raise InputError(f"--observe: {error}") from None


def _format(names, units, spread, model, top, carlo, net, rtol) -> str:
    """Solved values (readings, slopes) to the digits of ``rtol``, spreads to two digits."""
    solved = digits_for(rtol)

    lines = []
    for row, (name, unit) in enumerate(zip(names, units)):
        value = model.model_value[row]
        lines.append(f"{name}: {significant(value, solved)} {unit}; worst case "
                     f"±{uncertainty(spread.worst_case[row])} {unit}, root-sum-square "
                     f"±{uncertainty(spread.rss[row])} {unit} (standard deviation "
                     f"{uncertainty(spread.linear_std_uniform[row])} {unit} for values uniform "
                     "within tolerance)")
        if carlo is not None:
            samples = carlo.values.shape[0]
            # relative standard error of a sample standard deviation: 1/sqrt(2(N-1))
            # (normal approximation, common practice)
            std_digits = digits_for(1 / np.sqrt(2 * max(samples - 1, 1)))
            ends = digits_beside(value, carlo.std[row])
            lines.append(f"  Monte Carlo ({samples} samples, seed {carlo.seed}): "
                         f"standard deviation {significant(carlo.std[row], std_digits)} {unit}, "
                         f"range {significant(carlo.low[row], ends)} .. "
                         f"{significant(carlo.high[row], ends)} {unit}")
        for position in spread.top_contributors(row, top):
            contribution = spread.contribution[row, position]
            if contribution == 0:
                break
            branch = spread.resistors[position]
            slope = spread.sensitivity[row, position]
            slope_name = "dV/dR" if unit == "V" else "d/dR"
            lines.append(f"  {net.branch_names[branch]:>12}: {slope_name} "
                         f"{significant(slope, solved, sign=True)} {unit}/ohm, "
                         f"±{uncertainty(abs(contribution))} {unit} at its tolerance")
    return "\n".join(lines)


def _subject(args, net):
    """The readings, their names and units, and the table columns that say which they are."""
    if args.observe is not None:
        readings = _observations(net, args.observe)
        return (readings, [f"node {label}" for label in args.observe], ["V"] * readings.n,
                {"node": np.array(args.observe)}, "_V")
    table = read_measurements(args.measurements, net, values=False)
    kinds = table.readings.kind
    names = [f"line {line} {kind} {a}{' ' + b if b else ''}"
             for line, kind, a, b in zip(table.lines, kinds, table.a, table.b)]
    return (table.readings, names, [UNIT_NAME[k] for k in kinds],
            {"line": table.lines, "kind": kinds, "a": table.a, "b": table.b}, "")


def run(args) -> int:
    """Run ``tolerance``; exit 0 after the analysis."""
    check_output(args)
    if args.tolerances is None and args.default is None:
        raise InputError("give --tolerances FILE, --default PCT, or both")
    net = read_network(args.network, ground=args.ground)
    refuse_if_too_big(net, args.method, args.network)
    tolerance = read_part_tolerances(args, net)
    readings, names, units, where, suffix = _subject(args, net)
    model = model_readings(args, net, readings)
    spread = tolerance_spread(model, tolerance)
    carlo = None
    if args.samples:
        with tqdm(total=args.samples, desc="Monte Carlo", unit="solve", leave=False,
                  disable=None) as bar:
            carlo = monte_carlo(model, tolerance, args.samples, args.seed, on_sample=bar.update,
                                method=args.method, rtol=args.rtol)
    columns = {**where, f"nominal{suffix}": model.model_value,
               f"worst_case{suffix}": spread.worst_case, f"rss{suffix}": spread.rss,
               f"linear_std{suffix}": spread.linear_std_uniform}
    if carlo is not None:
        columns.update({f"monte_carlo_std{suffix}": carlo.std,
                        f"monte_carlo_low{suffix}": carlo.low,
                        f"monte_carlo_high{suffix}": carlo.high})
    attrs = {"samples": args.samples, "seed": args.seed, "timings_s": model.timings,
             "distribution": "uniform within tolerance"}
    unit = "V" if suffix else "V|ohm|A by kind"
    if args.output:
        numeric = [key for key in columns if key not in where]
        write_table(args, columns, attrs=attrs,
                    units={key: unit for key in numeric}
                    | {"sensitivity": f"{unit} per ohm"},
                    matrices={"sensitivity": spread.sensitivity,
                              "resistor": net.branch_names[spread.resistors]},
                    sources={"network": args.network,
                             **({"readings": args.measurements} if args.measurements else {}),
                             **({"tolerances": args.tolerances} if args.tolerances else {})})
    if args.json:
        entries = []
        for row in range(readings.n):
            entry = {key: values[row] for key, values in columns.items()}
            entry["top_contributors"] = [
                {"branch": str(net.branch_names[spread.resistors[p]]),
                 ("dV_dR" if suffix else "d_dR"): spread.sensitivity[row, p],
                 ("at_tolerance_V" if suffix else "at_tolerance"): spread.contribution[row, p]}
                for p in spread.top_contributors(row, args.top)]
            entries.append(entry)
        print(dumps({"summary": attrs, ("nodes" if suffix else "readings"): entries}))
    else:
        print(_format(names, units, spread, model, args.top, carlo, net, args.rtol))
    return EXIT_OK
