"""``ohmgraph compare NET MEAS.csv``: every reading against its model value, within accuracy."""

from __future__ import annotations

import numpy as np

from ohmgraph.engine.readings.model import ReadingModel, compare
from ohmgraph.io.commands.reading_model import model_readings, read_inputs, write_table
from ohmgraph.io.commands.reading_options import (add_full_precision_argument,
                                                  add_network_arguments, add_output_arguments,
                                                  add_reading_arguments)
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.measurement_table import UNIT_NAME
from ohmgraph.io.numbers import UNCERTAINTY_DIGITS, digits_beside, significant, uncertainty


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
    add_full_precision_argument(parser)
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
        band = columns["band"][row]
        measured, model = columns["measured"][row], columns["model"][row]
        lines.append(
            f"{columns['line'][row]:>5} {columns['kind'][row]:4} {columns['a'][row]:>12} "
            f"{columns['b'][row] or '-':>12} "
            f"{significant(measured, digits_beside(measured, band)):>12} {unit:<1} "
            f"{significant(model, digits_beside(model, band)):>12} {unit:<1} "
            f"{significant(columns['deviation'][row], UNCERTAINTY_DIGITS + 1, sign=True):>12} "
            f"{uncertainty(band):>11} {columns['status'][row]}")
    lines.append(f"{summary['passed']} of {summary['readings']} reading(s) within accuracy, "
                 f"{summary['failed']} outside"
                 + (f" ({summary['unusable']} with no unique model value)"
                    if summary["unusable"] else ""))
    if summary["worst_line"] is not None and summary["failed"]:
        lines.append(f"worst: line {summary['worst_line']}, "
                     f"{significant(summary['worst_normalized_deviation'], 3, sign=True)} bands")
    return "\n".join(lines)


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
