"""``ohmgraph compare NET MEAS.csv``: every reading against its model value, within accuracy.

Also holds what the three reading commands (``compare``, ``diagnose``, ``tolerance``) share:
their common arguments, reading the network, building the reading model and writing tables.
"""

from __future__ import annotations

import argparse
import html
from pathlib import Path

import numpy as np
import pandas as pd

from ohmgraph.engine.readings.model import ReadingModel, build_model, compare
from ohmgraph.engine.solve import NetworkNotSolvable
from ohmgraph.engine.solvers import DEFAULT_RTOL, SOLVERS, SolverFailed
from ohmgraph.io.atomic import atomic_output, refuse_existing, refuse_input
from ohmgraph.io.commands.argtypes import positive_float
from ohmgraph.io.commands.part_options import (add_band_arguments, band_rule_text, model_bands,
                                               read_part_tolerances)
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK, InputError, SolverError, UserError
from ohmgraph.io.html_summary import add_html_argument, check_html, page, table_html, write_page
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.measurement_store import refuse_existing_group, write_results
from ohmgraph.io.measurement_table import UNIT_NAME, accuracy_rules, read_measurements
from ohmgraph.io.provenance import provenance_record, sidecar_path, sidecar_text
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
        if suffix == ".csv":
            refuse_existing(sidecar_path(args.output), args.force)


def model_readings(args, net, readings, solution=None) -> ReadingModel:
    """Build the reading model; a network without a unique solution exits with code 1."""
    try:
        return build_model(net, readings, method=args.method, rtol=args.rtol,
                           allow_floating=args.allow_floating, solution=solution)
    except NetworkNotSolvable as error:
        from ohmgraph.io.check_view import format_report

        raise NotWellPosed(f"{args.network}: the network is not well-posed\n"
                           + format_report(error.report, net, source=args.network)) from None
    except SolverFailed as error:
        raise SolverError(f"{args.network}: {error}") from None


def write_table(args, columns: dict, *, units=None, attrs=None, matrices=None,
                sources=None) -> None:
    """Write ``columns`` to ``args.output`` as CSV (pandas, with a provenance sidecar) or as the
    command's HDF5 group."""
    if Path(args.output).suffix.lower() == ".csv":
        record = provenance_record(args.command_group, sources, attrs)
        with atomic_output(sidecar_path(args.output), args.force) as side, \
                atomic_output(args.output, args.force) as temporary:
            pd.DataFrame(columns).to_csv(temporary, index=False, float_format="%.17g")
            side.write_text(sidecar_text(record, args.output), encoding="utf-8")
        return
    write_results(args.output, args.command_group, columns, units=units, attrs=attrs,
                  matrices=matrices, sources=sources, force=args.force, append=args.append)


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
                    "and the band the instrument's accuracy allows, widened by the spread of the "
                    "parts when their tolerances are given (GUM root-sum-square with a coverage "
                    "factor, or worst case). Exit 0 when every reading passes, 1 when any fails.")
    add_network_arguments(parser)
    add_reading_arguments(parser)
    add_band_arguments(parser)
    parser.add_argument("--failures-only", action="store_true",
                        help="list only the readings that fail")
    add_output_arguments(parser)
    add_html_argument(parser)
    parser.set_defaults(run=run, command_group="comparison")


def reading_columns(table, model: ReadingModel, result, bands=None) -> dict:
    """One row per reading: where it is, what was measured and what the model says.

    With part tolerances (``bands``), ``band`` is the combined band and ``instrument_band``,
    ``parts_band`` its two parts.
    """
    readings = model.readings
    status = np.where(result.passed, "pass", np.where(result.usable, "FAIL", "undetermined"))
    parts = {} if bands is None else {"instrument_band": bands.instrument,
                                      "parts_band": bands.parts}
    return {
        "line": table.lines, "kind": readings.kind, "a": table.a, "b": table.b,
        "measured": readings.measured, "model": model.model_value,
        "deviation": result.deviation, "band": result.band, **parts, "accuracy": table.accuracy,
        "deviation_in_bands": result.normalized, "status": status,
    }


def _format(columns: dict, summary: dict, failures_only: bool) -> str:
    parts = "parts_band" in columns
    lines = [f"{'line':>5} {'kind':4} {'a':>12} {'b':>12} {'measured':>14} {'model':>14} "
             f"{'deviation':>12} {'±band':>11} "
             + (f"{'instrument':>11} {'parts':>11} " if parts else "") + "status"]
    for row in range(len(columns["line"])):
        if failures_only and columns["status"][row] == "pass":
            continue
        unit = UNIT_NAME[columns["kind"][row]]
        shares = (f"{columns['instrument_band'][row]:>11.4g} {columns['parts_band'][row]:>11.4g} "
                  if parts else "")
        lines.append(
            f"{columns['line'][row]:>5} {columns['kind'][row]:4} {columns['a'][row]:>12} "
            f"{columns['b'][row] or '-':>12} {columns['measured'][row]:>12.6g} {unit:<1} "
            f"{columns['model'][row]:>12.6g} {unit:<1} {columns['deviation'][row]:>+12.4g} "
            f"{columns['band'][row]:>11.4g} {shares}{columns['status'][row]}")
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
                     f"{summary['worst_normalized_deviation']:+.3g} bands")
    return lines


def read_inputs(args):
    """Refuse a bad output first, then read the network and its measurement table."""
    check_output(args)
    check_html(args, (args.network, args.measurements, args.tolerances))
    rules = accuracy_rules(args.accuracy)
    net = read_network(args.network, ground=args.ground)
    return net, read_measurements(args.measurements, net, rules)


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


def reading_table_html(columns: dict, flagged=()) -> str:
    """The readings as an HTML table, failures (and flagged readings) highlighted."""
    def css(row):
        if columns["line"][row] in flagged:
            return "flag"
        return "" if columns["status"][row] == "pass" else "fail"
    return table_html(columns, css)
