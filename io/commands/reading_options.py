"""Command-line options shared by the reading commands (``compare``, ``diagnose``,
``tolerance``): the network and how to solve it, the measurement table and its accuracy, and
the output file; plus the check of the output name made before any work."""

from __future__ import annotations

import argparse

from ohmgraph.engine.solvers import DEFAULT_RTOL, SOLVERS
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.commands.argtypes import add_memory_budget, positive_float
from ohmgraph.io.errors import InputError
from ohmgraph.io.formats import CSV, HDF5, require_format, suffixes_of
from ohmgraph.io.provenance import sidecar_path
from ohmgraph.io.result_store import refuse_existing_group

OUTPUT_FORMATS = (CSV, HDF5)


def add_network_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments every reading command takes: the network and how to solve it."""
    parser.add_argument("network", metavar="NET",
                        help="network file (.csv, .tsv, .parquet, edge list; optionally .gz)")
    parser.add_argument("--ground", default="0", metavar="LABEL",
                        help="reference (0 V) node label (default 0)")
    parser.add_argument("--method", choices=["auto", *SOLVERS], default="auto",
                        help="linear solver (default: auto)")
    parser.add_argument("--rtol", type=positive_float, default=DEFAULT_RTOL,
                        help=f"relative residual target (default {DEFAULT_RTOL:g})")
    parser.add_argument("--allow-floating", action="store_true",
                        help="pin one node of every island without a path to the reference")
    add_memory_budget(parser)
    parser.add_argument("-q", "--quiet", action="store_true",
                        help="no stage messages (they appear only when standard error is a "
                             "terminal, on networks of 100,000 nodes or more)")


def add_reading_arguments(parser: argparse.ArgumentParser) -> None:
    """The measurement table and the global accuracy (compare, diagnose)."""
    parser.add_argument("measurements", metavar="MEAS.csv",
                        help="measurement table: kind,a,b,value[,accuracy]")
    parser.add_argument("--accuracy", action="append", metavar="SPEC",
                        help="global instrument accuracy ±(percent of reading + absolute), e.g. "
                             "0.5%%+1mV; repeat once per unit (V, A, ohm); a row's own "
                             "accuracy wins")


def add_output_arguments(parser: argparse.ArgumentParser, formats=OUTPUT_FORMATS) -> None:
    """``-o``, ``--append``, ``--force``, ``--json`` and, with CSV output, ``--full-precision``."""
    parser.add_argument("-o", "--output", metavar="OUT", help="also write the results to a new "
                        f"file ({', '.join(suffixes_of(formats))})")
    parser.add_argument("--append", action="store_true",
                        help="add the result group to an existing HDF5 file OUT (for example "
                             "the solution file of 'ohmgraph solve') instead of creating OUT")
    parser.add_argument("--force", action="store_true",
                        help="overwrite OUT if it exists (with --append: replace the group)")
    parser.add_argument("--json", action="store_true", help="print the results as JSON")
    parser.set_defaults(output_formats=formats)


def add_full_precision_argument(parser: argparse.ArgumentParser) -> None:
    """``--full-precision`` for commands that write CSV tables."""
    parser.add_argument("--full-precision", action="store_true",
                        help="-o OUT.csv: write every number exactly (shortest round-trip text) "
                             "instead of 12 significant digits (HDF5 always keeps every digit)")


def check_output(args) -> None:
    """Refuse a bad output name or an existing file before any work is done."""
    if args.output is None:
        if args.append:
            raise InputError("--append needs -o OUT.h5")
        return
    found = require_format(args.output, args.output_formats, role="-o")
    refuse_input(args.output, (args.network, getattr(args, "measurements", None),
                               getattr(args, "tolerances", None)))
    if args.append:
        if found.name != HDF5:
            raise InputError(f"-o {args.output}: --append needs an HDF5 file (.h5, .hdf5)")
        refuse_existing_group(args.output, args.command_group, args.force)
    else:
        refuse_existing(args.output, args.force)
        if found.name == CSV:
            refuse_existing(sidecar_path(args.output), args.force)
