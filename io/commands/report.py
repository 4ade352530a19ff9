"""``ohmgraph report SOL.h5 -o FILE.html``: one self-contained HTML report."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ohmgraph.engine.limits import QUANTITIES
from ohmgraph.io.atomic import atomic_output, refuse_existing, refuse_input
from ohmgraph.io.commands.argtypes import whole_number
from ohmgraph.io.errors import EXIT_OK
from ohmgraph.io.limits_view import add_limit_arguments, evaluate, has_limits, violation_rows
from ohmgraph.io.picture_data import MAP_QUANTITIES, has_coordinates, quantity_points
from ohmgraph.io.pictures import figure_bytes, histograms_figure, map_figure
from ohmgraph.io.progress import steps
from ohmgraph.io.report import render_report
from ohmgraph.io.solution_view import summary_from_stored
from ohmgraph.io.store import read_solution


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "report", help="write one self-contained HTML report of a stored solution",
        description="Write one HTML file that reads offline (pictures embedded): provenance, "
                    "the evidence (residuals, power balance), the supply drop per net with its "
                    "map (when the solution has node coordinates) and histograms, the limit "
                    "violations (with the same limit options as 'limits') and the cautions.")
    parser.add_argument("solution", metavar="SOL.h5", help="HDF5 file written by 'ohmgraph solve'")
    parser.add_argument("-o", "--output", required=True, metavar="FILE.html",
                        help="HTML file to create")
    add_limit_arguments(parser)
    parser.add_argument("--top", type=whole_number(0), default=50, metavar="N",
                        help="violations to list (default 50)")
    parser.add_argument("--force", action="store_true", help="overwrite FILE.html if it exists")
    parser.set_defaults(run=run)


def limits_text(args, stored) -> str:
    """The limits checked, in words."""
    given = [f"drop {args.max_drop.text()}" if args.max_drop else None,
             f"current {args.max_current:g} A" if args.max_current else None,
             f"power {args.max_power:g} W" if args.max_power else None]
    rated = [name for name in ("max_current", "max_power") if f"branches/{name}" in stored.extra]
    if rated:
        given.append("branch ratings " + ", ".join(rated))
    return ", ".join(g for g in given if g)


def run(args) -> int:
    """Run ``report``; return the exit code."""
    refuse_input(args.output, [args.solution])
    refuse_existing(args.output, args.force)
    progress = steps(4, "report")
    stored = read_solution(args.solution)
    summary = summary_from_stored(stored)
    progress.update()
    drop, found, utilisation = evaluate(stored, args.max_drop, args.max_current, args.max_power,
                                        args.nominal)
    violations = None
    if has_limits(stored, args):
        violations = {"rows": violation_rows(found, stored, args.top), "total": len(found),
                      "counts": {q: found.count(q) for q in QUANTITIES},
                      "limits": limits_text(args, stored)}
    progress.update()
    name = stored.attrs.get("input_file", Path(args.solution).name)
    drop_map, note = None, ("The solution has no node coordinates, so there is no map (solve "
                            "with --nodes NODES.csv); the histograms need none.")
    if has_coordinates(stored):
        label, unit, reduce = MAP_QUANTITIES["drop"]
        drop_map = figure_bytes(map_figure(quantity_points(stored, "drop", drop),
                                           title=f"{name}: supply drop", label=label, unit=unit,
                                           kind="drop", reduce=reduce))
    histograms = figure_bytes(histograms_figure(np.where(drop.counted, drop.drop, np.nan), "",
                                                utilisation, title=name))
    progress.update()
    text = render_report(source=Path(args.solution).name, attrs=stored.attrs, summary=summary,
                         violations=violations, drop_map=drop_map, map_note=note,
                         histograms=histograms)
    with atomic_output(args.output, args.force) as temporary:
        Path(temporary).write_text(text, encoding="utf-8")
    progress.update()
    progress.close()
    print(f"{args.output}: report of {args.solution}"
          + (f", {len(found):,} limit(s) exceeded" if violations else ""))
    return EXIT_OK
