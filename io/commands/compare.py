"""``ohmgraph compare NET MEAS.csv``: every reading against its model value, within accuracy."""

from __future__ import annotations

import html

from ohmgraph.engine.readings.model import compare
from ohmgraph.io.commands.part_options import (add_band_arguments, band_rule_text, model_bands,
                                               read_part_tolerances)
from ohmgraph.io.commands.reading_model import (model_readings, read_inputs, reading_columns,
                                                write_table)
from ohmgraph.io.commands.reading_options import (add_full_precision_argument,
                                                  add_network_arguments, add_output_arguments,
                                                  add_reading_arguments)
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK
from ohmgraph.io.html_summary import add_html_argument, page, reading_table_html, write_page
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.measurement_table import UNIT_NAME
from ohmgraph.io.numbers import UNCERTAINTY_DIGITS, digits_beside, significant, uncertainty
from ohmgraph.io.provenance import provenance_record


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "compare", help="compare readings of a built network with the model",
        description="Compute the model value of every reading in MEAS.csv (V: node voltage, R: "
                    "two-point resistance with sources zeroed, I: branch current), its deviation "
                    "and the band the instrument's accuracy allows, widened by the spread of the "
                    "parts when their tolerances are given (GUM root-sum-square with a coverage "
                    "factor, or worst case). Exit 0 when every reading passes, 1 when any fails.")
    add_network_arguments(parser)
    add_reading_arguments(parser)
    add_band_arguments(parser)
    parser.add_argument("--failures-only", action="store_true",
                        help="list only the readings that fail")
    add_output_arguments(parser)
    add_full_precision_argument(parser)
    add_html_argument(parser)
    parser.set_defaults(run=run, command_group="comparison")


def _format(columns: dict, summary: dict, failures_only: bool) -> str:
    parts = "parts_band" in columns
    lines = [f"{'line':>5} {'kind':4} {'a':>12} {'b':>12} {'measured':>14} {'model':>14} "
             f"{'deviation':>12} {'±band':>11} "
             + (f"{'instrument':>11} {'parts':>11} " if parts else "") + "status"]
    for row in range(len(columns["line"])):
        if failures_only and columns["status"][row] == "pass":
            continue
        unit = UNIT_NAME[columns["kind"][row]]
        band = columns["band"][row]
        measured, model = columns["measured"][row], columns["model"][row]
        shares = (f"{uncertainty(columns['instrument_band'][row]):>11} "
                  f"{uncertainty(columns['parts_band'][row]):>11} " if parts else "")
        lines.append(
            f"{columns['line'][row]:>5} {columns['kind'][row]:4} {columns['a'][row]:>12} "
            f"{columns['b'][row] or '-':>12} "
            f"{significant(measured, digits_beside(measured, band)):>12} {unit:<1} "
            f"{significant(model, digits_beside(model, band)):>12} {unit:<1} "
            f"{significant(columns['deviation'][row], UNCERTAINTY_DIGITS + 1, sign=True):>12} "
            f"{uncertainty(band):>11} {shares}{columns['status'][row]}")
    return "\n".join(lines + _summary_lines(summary, parts))


def _summary_lines(summary: dict, parts: bool) -> list:
    """The band rule (with parts), the counts and the worst reading."""
    lines = [summary["band_rule"]] if parts else []
    lines.append(f"{summary['passed']} of {summary['readings']} reading(s) within "
                 + ("their band" if parts else "accuracy") + f", {summary['failed']} outside"
                 + (f" ({summary['unusable']} with no unique model value)"
                    if summary["unusable"] else ""))
    if summary["worst_line"] is not None and summary["failed"]:
        lines.append(f"worst: line {summary['worst_line']}, "
                     f"{significant(summary['worst_normalized_deviation'], 3, sign=True)} bands")
    return lines


def run(args) -> int:
    """Run ``compare``; exit 0 when every reading passes, 1 when any fails."""
    net, table = read_inputs(args)
    tolerance = read_part_tolerances(args, net)
    model = model_readings(args, net, table.readings)
    bands, _ = model_bands(args, model, tolerance)
    result = compare(model, None if bands is None else bands.band)
    columns = reading_columns(table, model, result, bands)
    sources = {"network": args.network, "measurements": args.measurements,
               **({"tolerances": args.tolerances} if args.tolerances else {})}
    summary = result.summary()
    worst = summary.pop("worst_reading")
    summary = {**summary, "worst_line": None if worst is None else int(table.lines[worst]),
               **({} if bands is None else {"band_rule": band_rule_text(bands),
                                            "coverage_factor": bands.coverage}),
               "timings_s": model.timings, "notes": model.notes}
    if args.output:
        units = {name: "V|ohm|A by kind" for name in ("measured", "model", "deviation", "band",
                                                       "instrument_band", "parts_band")}
        write_table(args, columns, units=units, attrs=summary, sources=sources)
    text = _format(columns, summary, args.failures_only)
    if args.html:
        write_page(args.html, args.force, page(
            "Readings against the model", provenance_record("comparison", sources, summary),
            [("Result", "<pre>" + html.escape("\n".join(
                _summary_lines(summary, bands is not None))) + "</pre>"),
             ("Every reading", reading_table_html(columns))]))
    if args.json:
        rows = [dict(zip(columns, values)) for values in zip(*columns.values())]
        print(dumps({"summary": summary, "readings": rows}))
    else:
        print(text)
        for note in model.notes:
            print(f"note: {note}")
    return EXIT_OK if result.all_passed else EXIT_FAILED
