"""``ohmgraph generate KIND ... -o FILE``: write a generated network as a branch table.

The kinds are the generators of :mod:`ohmgraph.datasets.generators`; each has its own sizes
(positional) and options. The output format follows the file name (``.csv``, ``.tsv``, optionally
``.gz``, or ``.parquet``; see :mod:`ohmgraph.io.branch_table`).
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from ohmgraph.datasets import generators
from ohmgraph.io.atomic import refuse_existing
from ohmgraph.io.branch_table import table_format, write_branch_table
from ohmgraph.io.commands.argtypes import finite_float, positive_float, whole_number
from ohmgraph.io.errors import EXIT_OK, InputError


# ---------------------------------------------------------------------------- argument types
# ---------------------------------------------------------------------------- parsers
def _common_options() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-o", "--output", required=True, metavar="FILE",
                        help="branch table to write (.csv, .tsv, optionally .gz, or .parquet)")
    common.add_argument("--force", action="store_true", help="overwrite FILE if it exists")
    common.add_argument("--seed", type=whole_number(0), default=0,
                        help="seed of every random choice (default 0)")
    return common


def _supply_options(pads: int, loads: int) -> argparse.ArgumentParser:
    supply = argparse.ArgumentParser(add_help=False)
    supply.add_argument("--pads", type=whole_number(0), default=pads,
                        help=f"voltage-source pads to node 0 at random nodes (default {pads})")
    supply.add_argument("--loads", type=whole_number(0), default=loads,
                        help=f"current-source loads to node 0 at random nodes (default {loads})")
    supply.add_argument("--load-amps", type=finite_float, default=1e-3, metavar="A",
                        help="current of each load (default 0.001)")
    supply.add_argument("--supply-volts", type=finite_float, default=1.0, metavar="V",
                        help="voltage of each pad (default 1.0)")
    return supply


def register(subparsers) -> None:
    """Add the ``generate`` command and its kinds."""
    parser = subparsers.add_parser(
        "generate", help="write a generated network as a branch table",
        description="Write a generated network (deterministic for a given --seed) as a branch "
                    "table. Pads and loads add node 0, the reference.")
    parser.set_defaults(run=run)
    kinds = parser.add_subparsers(dest="kind", required=True, metavar="KIND")
    common = _common_options()
    lattice_supply = _supply_options(pads=0, loads=0)

    for name, axes in (("grid2d", "xy"), ("grid3d", "xyz")):
        kind = kinds.add_parser(name, parents=[common, lattice_supply],
                                help=f"{len(axes)}-D lattice of equal resistors")
        for axis in axes:
            kind.add_argument(f"n{axis}", type=whole_number(1), help=f"nodes along {axis}")
        kind.add_argument("--ohms", type=positive_float, default=1.0,
                          help="resistance of every resistor (default 1)")
        kind.add_argument("--reference", metavar="LABEL",
                          help="reference node of a bare lattice (default the first corner)")
        kind.set_defaults(build=_build_lattice, axes=axes)

    kind = kinds.add_parser("ladder", parents=[common], help="series/shunt resistor ladder")
    kind.add_argument("n", type=whole_number(1), help="number of sections")
    kind.add_argument("--series-ohms", type=positive_float, default=1.0, metavar="OHMS")
    kind.add_argument("--shunt-ohms", type=positive_float, default=1.0, metavar="OHMS")
    kind.add_argument("--source-volts", type=finite_float, metavar="V",
                      help="drive the input with a voltage source (default: no source)")
    kind.set_defaults(build=lambda a: generators.ladder(a.n, a.series_ohms, a.shunt_ohms,
                                                        a.source_volts))

    kind = kinds.add_parser("layered-mesh", parents=[common, _supply_options(pads=4, loads=100)],
                            help="multi-layer supply mesh with vias, pads on top, loads below")
    kind.add_argument("nx", type=whole_number(1), help="sites along x")
    kind.add_argument("ny", type=whole_number(1), help="sites along y")
    kind.add_argument("--layers", type=whole_number(1), default=2)
    kind.add_argument("--pitch", type=whole_number(1), nargs="+", metavar="SITES",
                      help="node spacing per layer, top first (default 2**(layers-1-l))")
    kind.add_argument("--sheet-ohms", type=positive_float, nargs="+", default=[0.05],
                      metavar="OHMS", help="ohms per square, one value or one per layer")
    kind.add_argument("--via-ohms", type=positive_float, default=0.5, metavar="OHMS")
    kind.add_argument("--load-clusters", type=whole_number(0), default=0, metavar="N",
                      help="draw loads around N random hot spots (default 0: uniform)")
    kind.set_defaults(build=lambda a: generators.layered_mesh(
        a.nx, a.ny, a.layers, pitch=a.pitch, sheet_ohms=a.sheet_ohms, via_ohms=a.via_ohms,
        pads=a.pads, loads=a.loads, load_amps=a.load_amps, load_clusters=a.load_clusters,
        supply_volts=a.supply_volts, seed=a.seed))

    kind = kinds.add_parser("knn", parents=[common, lattice_supply],
                            help="random points joined to their k nearest neighbours")
    kind.add_argument("n", type=whole_number(1), help="number of points")
    kind.add_argument("-k", "--neighbours", type=whole_number(1), default=4, metavar="K",
                      help="neighbours per point (default 4)")
    kind.add_argument("--ohms-per-unit", type=positive_float, default=1.0, metavar="OHMS",
                      help="resistance per unit distance (default 1)")
    kind.add_argument("--reference", metavar="LABEL",
                      help="reference node of a network without pads (default p0)")
    kind.set_defaults(build=lambda a: generators.knn_network(
        a.n, a.neighbours, a.seed, ohms_per_unit=a.ohms_per_unit, pads=a.pads, loads=a.loads,
        load_amps=a.load_amps, supply_volts=a.supply_volts, reference=a.reference))


def _build_lattice(args):
    sizes = [getattr(args, f"n{axis}") for axis in args.axes]
    build = generators.grid2d if len(sizes) == 2 else generators.grid3d
    return build(*sizes, args.ohms, pads=args.pads, loads=args.loads, load_amps=args.load_amps,
                 supply_volts=args.supply_volts, seed=args.seed, reference=args.reference)


def run(args) -> int:
    """Generate the network, write it, print one line; return the exit code."""
    path = Path(args.output)
    table_format(path)
    refuse_existing(path, args.force)
    start = time.perf_counter()
    try:
        net = args.build(args)
    except ValueError as error:
        raise InputError(f"{args.kind}: {error}") from None
    write_branch_table(path, net, force=args.force)
    counts = ", ".join(f"{letter} {number:,}" for letter, number in net.counts_by_kind().items())
    print(f"{path}: {net.n_nodes:,} nodes, {net.n_branches:,} branches ({counts}), "
          f"reference {net.reference_label}, {time.perf_counter() - start:.2f} s")
    return EXIT_OK
