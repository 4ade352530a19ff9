"""``ohmgraph compare NET MEAS.csv``: every reading against its model value, within accuracy.

Also holds what the three reading commands (``compare``, ``diagnose``, ``tolerance``) share:
their common arguments, reading the network, building the reading model and writing tables.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

from ohmgraph.engine.readings.model import ReadingModel, build_model, compare
from ohmgraph.engine.solve import NetworkNotSolvable
from ohmgraph.engine.solvers import DEFAULT_RTOL, SOLVERS, SolverFailed
from ohmgraph.io.atomic import atomic_output, refuse_existing, refuse_input
from ohmgraph.io.commands.argtypes import add_memory_budget, positive_float
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK, InputError, SolverError, UserError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.measurement_store import refuse_existing_group, write_results
from ohmgraph.io.measurement_table import UNIT_NAME, accuracy_rules, read_measurements
from ohmgraph.io.reader import read_network

OUTPUT_SUFFIXES = (".csv", ".h5", ".hdf5")
HDF5_SUFFIXES = (".h5", ".hdf5")


class NotWellPosed(UserError):
    """The network (or its passive version, for resistance readings) has no unique solution."""

    exit_code = EXIT_FAILED


def add_network_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments every reading command takes: the network and how to solve it."""
    parser.add_argument("network", metavar="NET",
                        help="network file (.csv, .tsv, edge list; optionally .gz)")
    parser.add_argument("--ground", default="0", metavar="LABEL",
                        help="reference (0 V) node label (default 0)")
    parser.add_argument("--method", choices=["auto", *SOLVERS], default="auto",
                        help="linear solver (default: auto)")
    add_memory_budget(parser)
    parser.add_argument("--rtol", type=positive_float, default=DEFAULT_RTOL,
                        help=f"relative residual target (default {DEFAULT_RTOL:g})")
    parser.add_argument("--allow-floating", action="store_true",
                        help="pin one node of every island without a path to the reference")


def add_output_arguments(parser: argparse.ArgumentParser, suffixes=OUTPUT_SUFFIXES) -> None:
    parser.add_argument("-o", "--output", metavar="OUT",
                        help=f"also write the results to a new file ({', '.join(suffixes)})")
    parser.add_argument("--append", action="store_true",
                        help="add the result group to an existing HDF5 file OUT (for example "
                             "the solution file of 'ohmgraph solve') instead of creating OUT")
    parser.add_argument("--force", action="store_true",
                        help="overwrite OUT if it exists (with --append: replace the group)")
    parser.add_argument("--json", action="store_true", help="print the results as JSON")


def check_output(args, suffixes=OUTPUT_SUFFIXES) -> None:
    """Refuse a bad output name or an existing file before any work is done."""
    if args.output is None:
        if args.append:
            raise InputError("--append needs -o OUT.h5")
        return
    suffix = Path(args.output).suffix.lower()
    if suffix not in suffixes:
        raise InputError(f"-o {args.output}: the name must end in {', '.join(suffixes)}")
    refuse_input(args.output, (args.network, getattr(args, "measurements", None),
                               getattr(args, "tolerances", None)))
    if args.append:
        if suffix not in HDF5_SUFFIXES:
            raise InputError(f"-o {args.output}: --append needs an HDF5 file (.h5, .hdf5)")
        refuse_existing_group(args.output, args.command_group, args.force)
    else:
        refuse_existing(args.output, args.force)


def model_readings(args, net, readings, solution=None) -> ReadingModel:
    """Build the reading model; a network without a unique solution exits with code 1."""
    try:
        return build_model(net, readings, method=args.method, rtol=args.rtol,
                           allow_floating=args.allow_floating, solution=solution,
                           memory_budget=args.memory_budget)
    except NetworkNotSolvable as error:
        from ohmgraph.io.check_view import format_report

        raise NotWellPosed(f"{args.network}: the network is not well-posed\n"
                           + format_report(error.report, net, source=args.network)) from None
    except SolverFailed as error:
        raise SolverError(f"{args.network}: {error}") from None


def write_table(args, columns: dict, *, units=None, attrs=None, matrices=None,
                sources=None) -> None:
    """Write ``columns`` to ``args.output`` as CSV (pandas) or as the command's HDF5 group."""
    if Path(args.output).suffix.lower() == ".csv":
        with atomic_output(args.output, args.force) as temporary:
            pd.DataFrame(columns).to_csv(temporary, index=False, float_format="%.17g")
        return
    write_results(args.output, args.command_group, columns, units=units, attrs=attrs, matrices=matrices,
                  sources=sources, force=args.force, append=args.append)


def add_reading_arguments(parser) -> None:
    """The measurement table and the global accuracy (compare, diagnose)."""
    parser.add_argument("measurements", metavar="MEAS.csv",
                        help="measurement table: kind,a,b,value[,accuracy]")
    parser.add_argument("--accuracy", action="append", metavar="SPEC",
                        help="global instrument accuracy ±(percent of reading + absolute), e.g. "
                             "0.5%%+1mV; repeat once per unit (V, A, ohm); a row's own "
                             "accuracy wins")


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "compare", help="compare readings of a built network with the model",
        description="Compute the model value of every reading in MEAS.csv (V: node voltage, R: "
                    "two-point resistance with sources zeroed, I: branch current), its deviation "
                    "and the band the instrument's accuracy allows. Exit 0 when every reading "
                    "passes, 1 when any fails.")
    add_network_arguments(parser)
    add_reading_arguments(parser)
    parser.add_argument("--failures-only", action="store_true",
                        help="list only the readings that fail")
    add_output_arguments(parser)
    parser.set_defaults(run=run, command_group="comparison")


def reading_columns(table, model: ReadingModel, result) -> dict:
    """One row per reading: where it is, what was measured and what the model says."""
    readings = model.readings
    status = np.where(result.passed, "pass", np.where(result.usable, "FAIL", "undetermined"))
    return {
        "line": table.lines, "kind": readings.kind, "a": table.a, "b": table.b,
        "measured": readings.measured, "model": model.model_value,
        "deviation": result.deviation, "band": readings.band, "accuracy": table.accuracy,
        "deviation_in_bands": result.normalized, "status": status,
    }


def _format(columns: dict, summary: dict, failures_only: bool) -> str:
    lines = [f"{'line':>5} {'kind':4} {'a':>12} {'b':>12} {'measured':>14} {'model':>14} "
             f"{'deviation':>12} {'±band':>11} status"]
    for row in range(len(columns["line"])):
        if failures_only and columns["status"][row] == "pass":
            continue
        unit = UNIT_NAME[columns["kind"][row]]
        lines.append(
            f"{columns['line'][row]:>5} {columns['kind'][row]:4} {columns['a'][row]:>12} "
            f"{columns['b'][row] or '-':>12} {columns['measured'][row]:>12.6g} {unit:<1} "
            f"{columns['model'][row]:>12.6g} {unit:<1} {columns['deviation'][row]:>+12.4g} "
            f"{columns['band'][row]:>11.4g} {columns['status'][row]}")
    lines.append(f"{summary['passed']} of {summary['readings']} reading(s) within accuracy, "
                 f"{summary['failed']} outside"
                 + (f" ({summary['unusable']} with no unique model value)"
                    if summary["unusable"] else ""))
    if summary["worst_line"] is not None and summary["failed"]:
        lines.append(f"worst: line {summary['worst_line']}, "
                     f"{summary['worst_normalized_deviation']:+.3g} bands")
    return "\n".join(lines)


def read_inputs(args):
    """Refuse a bad output first, then read the network and its measurement table."""
    check_output(args)
    rules = accuracy_rules(args.accuracy)
    net = read_network(args.network, ground=args.ground)
    return net, read_measurements(args.measurements, net, rules)


def run(args) -> int:
    """Run ``compare``; exit 0 when every reading passes, 1 when any fails."""
    net, table = read_inputs(args)
    model = model_readings(args, net, table.readings)
    result = compare(model)
    columns = reading_columns(table, model, result)
    summary = result.summary()
    worst = summary.pop("worst_reading")
    summary = {**summary, "worst_line": None if worst is None else int(table.lines[worst]),
               "timings_s": model.timings, "notes": model.notes}
    if args.output:
        units = {"measured": "V|ohm|A by kind", "model": "V|ohm|A by kind",
                 "deviation": "V|ohm|A by kind", "band": "V|ohm|A by kind"}
        write_table(args, columns, units=units, attrs=summary,
                    sources={"network": args.network, "measurements": args.measurements})
    if args.json:
        rows = [dict(zip(columns, values)) for values in zip(*columns.values())]
        print(dumps({"summary": summary, "readings": rows}))
    else:
        print(_format(columns, summary, args.failures_only))
        for note in model.notes:
            print(f"note: {note}")
    return EXIT_OK if result.all_passed else EXIT_FAILED
