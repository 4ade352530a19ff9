"""``ohmgraph show FILE``: print the summary of a stored solution or of stored results."""

from __future__ import annotations

from pathlib import Path

import h5py
import pandas as pd

from ohmgraph.io.errors import EXIT_OK, InputError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.result_store import read_results, result_groups
from ohmgraph.io.provenance import read_sidecar, sidecar_path
from ohmgraph.io.result_view import format_result, inputs_from_attrs
from ohmgraph.io.solution_view import format_solution, summary_from_stored
from ohmgraph.io.store import flatten_attrs, read_solution

SOLUTION_LAYOUT = "ohmgraph solution"     # the root attribute 'layout' of a solution file


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "show", help="print the summary of a stored solution or stored results",
        description="Read a file written by ohmgraph and print its summary: a solution file of "
                    "'ohmgraph solve' (the summary 'solve' printed, rebuilt from the stored "
                    "arrays and attributes, and any result groups appended to it), an HDF5 "
                    "result file of compare, diagnose, tolerance or pick-readings, or a CSV "
                    "result with its provenance sidecar.")
    parser.add_argument("solution", metavar="FILE",
                        help="HDF5 file (solution or results) or CSV result written by ohmgraph")
    parser.add_argument("--json", action="store_true", help="print the summary as JSON")
    parser.set_defaults(run=run)


def provenance(attrs: dict) -> str:
    """One line: which tool version wrote the file, when, and from which input."""
    line = f"written {attrs.get('created', '?')} by ohmgraph {attrs.get('tool_version', '?')}"
    if "input_file" in attrs:
        line += f" from {attrs['input_file']} (sha256 {attrs.get('input_sha256', '?')[:16]}…)"
    return line


def _results(path, groups) -> list:
    stored = []
    for name in groups:
        columns, attrs, _ = read_results(path, name)
        stored.append((name, columns, attrs, inputs_from_attrs(attrs)))
    return stored


def _is_solution(path) -> bool:
    with h5py.File(path, "r") as h5:
        layout = h5.attrs.get("layout")
    return (layout.decode() if isinstance(layout, bytes) else layout) == SOLUTION_LAYOUT


def _show_csv(args) -> int:
    record = read_sidecar(args.solution)
    if record is None:
        raise InputError(f"{args.solution}: not an HDF5 file, and no provenance sidecar "
                         f"{sidecar_path(args.solution).name} beside it (not a result table "
                         "of ohmgraph)")
    try:
        frame = pd.read_csv(args.solution, keep_default_na=False)
    except (OSError, ValueError) as error:
        raise InputError(f"{args.solution}: cannot be read as CSV ({error})") from None
    columns = {key: frame[key].to_numpy() for key in frame.columns}
    if args.json:
        print(dumps({**record, "rows": len(frame)}))
    else:
        attrs = {"created": record.get("created"), "tool_version": record.get("tool_version"),
                 **flatten_attrs(record.get("summary", {}))}
        print(f"{args.solution}:")
        print(format_result(str(record.get("result", "?")), columns, attrs,
                            record.get("inputs", {})))
    return EXIT_OK


def run(args) -> int:
    """Run ``show``; return the exit code."""
    if Path(args.solution).suffix.lower() == ".csv":
        return _show_csv(args)
    groups = result_groups(args.solution)
    stored, summary = None, {}
    if not groups or _is_solution(args.solution):
        stored = read_solution(args.solution)
        summary = summary_from_stored(stored)
    results = _results(args.solution, groups)
    if args.json:
        out = {}
        if stored is not None:
            keys = ("created", "tool_version", "input_file", "input_sha256")
            out = {"stored": {k: stored.attrs[k] for k in keys if k in stored.attrs}, **summary}
        if results:
            out["results"] = {name: {"attributes": attrs, "columns": columns}
                              for name, columns, attrs, _ in results}
        print(dumps(out))
        return EXIT_OK
    if stored is not None:
        print(f"{args.solution}: {provenance(stored.attrs)}")
        print(format_solution(summary))
    else:
        print(f"{args.solution}:")
    for name, columns, attrs, inputs in results:
        print(format_result(name, columns, attrs, inputs))
    return EXIT_OK
