"""``ohmgraph show OUT.h5``: print the summary of a stored solution."""

from __future__ import annotations

from ohmgraph.io.errors import EXIT_OK
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.solution_view import format_solution, summary_from_stored
from ohmgraph.io.store import read_solution


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "show", help="print the summary of a stored solution",
        description="Read an HDF5 file written by 'ohmgraph solve' and print its summary: the "
                    "same one 'solve' printed, rebuilt from the stored arrays and attributes.")
    parser.add_argument("solution", metavar="OUT.h5", help="HDF5 file written by 'ohmgraph solve'")
    parser.add_argument("--json", action="store_true", help="print the summary as JSON")
    parser.set_defaults(run=run)


def provenance(attrs: dict) -> str:
    """One line: which tool version wrote the file, when, and from which input."""
    line = f"written {attrs.get('created', '?')} by ohmgraph {attrs.get('tool_version', '?')}"
    if "input_file" in attrs:
        line += f" from {attrs['input_file']} (sha256 {attrs.get('input_sha256', '?')[:16]}…)"
    return line


def run(args) -> int:
    """Run ``show``; return the exit code."""
    stored = read_solution(args.solution)
    summary = summary_from_stored(stored)
    if args.json:
        keys = ("created", "tool_version", "input_file", "input_sha256")
        print(dumps({"stored": {k: stored.attrs[k] for k in keys if k in stored.attrs},
                     **summary}))
    else:
        print(f"{args.solution}: {provenance(stored.attrs)}")
        print(format_solution(summary))
    return EXIT_OK
