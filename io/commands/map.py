"""``ohmgraph map SOL.h5 -o FILE.png|.svg``: a map over node coordinates, or histograms."""

from __future__ import annotations

import numpy as np

from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.drop_view import stored_drop
from ohmgraph.io.errors import EXIT_OK
from ohmgraph.io.limits_view import add_limit_arguments, evaluate
from ohmgraph.io.picture_data import MAP_QUANTITIES, quantity_points, require_coordinates
from ohmgraph.io.pictures import check_picture_path, histograms_figure, map_figure, save_figure
from ohmgraph.io.progress import steps
from ohmgraph.io.store import read_solution


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "map", help="draw a map of drop, voltage, current or power (or histograms)",
        description="Draw a stored solution over its node coordinates (solve with --nodes), "
                    "one panel per layer, binned so a million nodes draw in seconds: each cell "
                    "shows the largest drop, current or power (the mean voltage) of the nodes "
                    "or resistor midpoints in it. With --histograms, draw histograms of the "
                    "supply drop and branch utilisation instead (no coordinates needed; "
                    "utilisation against the ratings and --max-current/--max-power). The "
                    "extension chooses the format: .png or .svg.")
    parser.add_argument("solution", metavar="SOL.h5", help="HDF5 file written by 'ohmgraph solve'")
    parser.add_argument("-o", "--output", required=True, metavar="FILE",
                        help="picture to create (.png or .svg)")
    parser.add_argument("--quantity", choices=list(MAP_QUANTITIES), default="drop",
                        help="what to map (default drop)")
    parser.add_argument("--histograms", action="store_true",
                        help="draw histograms of drop and branch utilisation instead of a map")
    add_limit_arguments(parser)
    parser.add_argument("--force", action="store_true", help="overwrite FILE if it exists")
    parser.set_defaults(run=run)


def run(args) -> int:
    """Run ``map``; return the exit code."""
    check_picture_path(args.output)
    refuse_input(args.output, [args.solution])
    refuse_existing(args.output, args.force)
    progress = steps(3, "map")
    stored = read_solution(args.solution)
    progress.update()
    name = stored.attrs.get("input_file", str(args.solution))
    if args.histograms:
        drop, _, utilisation = evaluate(stored, args.max_drop, args.max_current,
                                        args.max_power, args.nominal)
        figure = histograms_figure(np.where(drop.counted, drop.drop, np.nan), "",
                                   utilisation, title=name)
    else:
        require_coordinates(stored, args.solution)
        drop = stored_drop(stored, nominal=args.nominal)
        label, unit, reduce = MAP_QUANTITIES[args.quantity]
        figure = map_figure(quantity_points(stored, args.quantity, drop),
                            title=f"{name}: {args.quantity}", label=label, unit=unit,
                            kind=args.quantity, reduce=reduce)
    progress.update()
    save_figure(figure, args.output, args.force)
    progress.update()
    progress.close()
    print(f"{args.output}: " + ("histograms of supply drop and branch utilisation"
                                if args.histograms else f"map of {args.quantity}"))
    return EXIT_OK
