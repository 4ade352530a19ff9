"""``ohmgraph tolerance NET --observe NODE...``: node-voltage spread from resistor tolerances."""

from __future__ import annotations

import argparse

import numpy as np
from tqdm import tqdm

from ohmgraph.engine.readings.model import Readings
from ohmgraph.engine.readings.sensitivity import monte_carlo, tolerance_spread
from ohmgraph.io.commands.argtypes import whole_number
from ohmgraph.io.commands.reading_model import model_readings, write_table
from ohmgraph.io.commands.reading_options import (add_network_arguments, add_output_arguments,
                                                  check_output)
from ohmgraph.io.formats import HDF5
from ohmgraph.io.errors import EXIT_OK, InputError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.measurement_table import parse_percent, read_tolerances
from ohmgraph.io.memory_guard import refuse_if_too_big
from ohmgraph.io.numbers import digits_beside, digits_for, significant, uncertainty
from ohmgraph.io.reader import read_network


def _percent(text: str) -> float:
    try:
        return parse_percent(text)
    except ValueError as error:
        raise argparse.ArgumentTypeError(str(error)) from None


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "tolerance", help="spread of node voltages from resistor tolerances",
        description="Sensitivity of each observed node voltage to every resistor by the adjoint "
                    "method (one extra solve per observed node), the worst-case and "
                    "root-sum-square spread from the resistor tolerances, the largest "
                    "contributors, and optionally a Monte Carlo check.")
    add_network_arguments(parser)
    parser.add_argument("--observe", nargs="+", required=True, metavar="NODE",
                        help="node labels whose voltage (against the reference) to analyse")
    parser.add_argument("--tolerances", metavar="FILE",
                        help="CSV branch,tolerance (percent) for individual resistors")
    parser.add_argument("--default", type=_percent, metavar="PCT",
                        help="tolerance of every resistor not in FILE, e.g. 1%%")
    parser.add_argument("--top", type=whole_number(0), default=5, metavar="N",
                        help="largest contributors listed per node (default 5)")
    parser.add_argument("--samples", type=whole_number(0), default=0, metavar="N",
                        help="Monte Carlo samples (values uniform within tolerance; default 0)")
    parser.add_argument("--seed", type=whole_number(0), default=0,
                        help="Monte Carlo seed (default 0)")
    add_output_arguments(parser, (HDF5,))
    parser.set_defaults(run=run, command_group="tolerance")


def _observations(net, labels) -> Readings:
    unknown = [label for label in labels if label not in net.label_index]
    if unknown:
        raise InputError(f"--observe: unknown node(s) {', '.join(map(repr, unknown))}")
    try:
        return Readings.from_labels(net, ["V"] * len(labels), labels, [""] * len(labels))
    except ValueError as error:
        raise InputError(f"--observe: {error}") from None


def _format(net, labels, spread, model, top, carlo, rtol) -> str:
    """Solved values (voltage, slopes) to the digits of ``rtol``, spreads to two digits."""
    solved = digits_for(rtol)

    lines = []
    for row, label in enumerate(labels):
        volts = model.model_value[row]
        lines.append(f"node {label}: {significant(volts, solved)} V; worst case "
                     f"±{uncertainty(spread.worst_case[row])} V, root-sum-square "
                     f"±{uncertainty(spread.rss[row])} V (standard deviation "
                     f"{uncertainty(spread.linear_std_uniform[row])} V for values uniform "
                     "within tolerance)")
        if carlo is not None:
            samples = carlo.values.shape[0]
            # relative standard error of a sample standard deviation: 1/sqrt(2(N-1))
            # (normal approximation, common practice)
            std_digits = digits_for(1 / np.sqrt(2 * max(samples - 1, 1)))
            ends = digits_beside(volts, carlo.std[row])
            lines.append(f"  Monte Carlo ({samples} samples, seed {carlo.seed}): "
                         f"standard deviation {significant(carlo.std[row], std_digits)} V, range "
                         f"{significant(carlo.low[row], ends)} .. "
                         f"{significant(carlo.high[row], ends)} V")
        for position in spread.top_contributors(row, top):
            contribution = spread.contribution[row, position]
            if contribution == 0:
                break
            branch = spread.resistors[position]
            slope = spread.sensitivity[row, position]
            lines.append(f"  {net.branch_names[branch]:>12}: dV/dR "
                         f"{significant(slope, solved, sign=True)} V/ohm, "
                         f"±{uncertainty(abs(contribution))} V at its tolerance")
    return "\n".join(lines)


def run(args) -> int:
    """Run ``tolerance``; exit 0 after the analysis."""
    check_output(args)
    if args.tolerances is None and args.default is None:
        raise InputError("give --tolerances FILE, --default PCT, or both")
    net = read_network(args.network, ground=args.ground)
    refuse_if_too_big(net, args.method, args.network)
    tolerance = (read_tolerances(args.tolerances, net, args.default or 0.0)
                 if args.tolerances else np.full(net.n_branches, args.default))
    observed = _observations(net, args.observe)
    model = model_readings(args, net, observed)
    spread = tolerance_spread(model, tolerance)
    carlo = None
    if args.samples:
        with tqdm(total=args.samples, desc="Monte Carlo", unit="solve", leave=False,
                  disable=None) as bar:
            carlo = monte_carlo(model, tolerance, args.samples, args.seed, on_sample=bar.update)
    columns = {"node": np.array(args.observe), "nominal_V": model.model_value,
               "worst_case_V": spread.worst_case, "rss_V": spread.rss,
               "linear_std_V": spread.linear_std_uniform}
    if carlo is not None:
        columns.update({"monte_carlo_std_V": carlo.std, "monte_carlo_low_V": carlo.low,
                        "monte_carlo_high_V": carlo.high})
    attrs = {"samples": args.samples, "seed": args.seed, "timings_s": model.timings,
             "distribution": "uniform within tolerance"}
    if args.output:
        write_table(args, columns, attrs=attrs,
                    units={key: "V" for key in columns if key.endswith("_V")}
                    | {"sensitivity": "V/ohm"},
                    matrices={"sensitivity": spread.sensitivity,
                              "resistor": net.branch_names[spread.resistors]},
                    sources={"network": args.network,
                             **({"tolerances": args.tolerances} if args.tolerances else {})})
    if args.json:
        nodes = []
        for row in range(len(args.observe)):
            entry = {key: values[row] for key, values in columns.items()}
            entry["top_contributors"] = [
                {"branch": str(net.branch_names[spread.resistors[p]]),
                 "dV_dR": spread.sensitivity[row, p], "at_tolerance_V": spread.contribution[row, p]}
                for p in spread.top_contributors(row, args.top)]
            nodes.append(entry)
        print(dumps({"summary": attrs, "nodes": nodes}))
    else:
        print(_format(net, args.observe, spread, model, args.top, carlo, args.rtol))
    return EXIT_OK
