"""The ``ohmgraph`` command line.

Each subcommand lives in its own module under :mod:`ohmgraph.io.commands` and exposes
``register(subparsers)``, which adds its parser and sets ``run`` (a function of the parsed
arguments returning an exit code). Errors a user can cause are :class:`UserError` subclasses and
end as one message on standard error with their exit code (see :mod:`ohmgraph.io.errors`).
"""

from __future__ import annotations

import argparse
import importlib
import importlib.metadata
import os
import signal
import sys

from . import address_space, atomic, interrupts
from .errors import EXIT_BAD_INPUT, EXIT_NO_MEMORY, EXIT_OK, OUT_OF_MEMORY, UserError

# Every command and its one-line summary. ``ohmgraph --help`` lists them without importing any
# command module (so it starts fast); a command's own module is imported only when it runs.
# tests/test_cli.py checks that each summary equals the help its module registers.
COMMANDS = {
    "check": "check that a network is well-posed",
    "solve": "solve a network and store every voltage, current and power in HDF5",
    "show": "print the summary of a stored solution or stored results",
    "generate": "write a generated network as a branch table",
    "demo": "run the whole pipeline on an invented sensor-board supply mesh",
    "compare": "compare readings of a built network with the model",
    "diagnose": "rank single-resistor faults (open, short, value) that explain readings",
    "tolerance": "spread of readings (V, R, I) from resistor tolerances",
    "pick-readings": "choose the K readings that best tell single faults apart",
    "resistance": "effective resistance between nodes, across resistors, Kirchhoff index",
    "limits": "check a stored solution against drop limits and branch ratings",
    "export": "write nodes and branches of a stored solution to CSV or Parquet",
    "map": "draw a map of drop, voltage, current or power (or histograms)",
    "report": "write one self-contained HTML report of a stored solution",
    "diff": "compare two stored solutions (a base and a variant)",
    "verify": "recompute a stored solution's evidence and check it against its network",
    "convert": "store a network as an HDF5 network file, readable in slices",
}


def build_parser(commands=None) -> argparse.ArgumentParser:
    """The argument parser: full parsers for ``commands`` (all when None), one-line placeholders
    for the others."""
    parser = argparse.ArgumentParser(
        prog="ohmgraph",
        description="Check, solve and query large linear resistive networks.")
    parser.add_argument("--version", action=_Version, help="print the version and exit")
    subparsers = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name, summary in COMMANDS.items():
        if commands is None or name in commands:
            importlib.import_module(f"ohmgraph.io.commands.{name.replace('-', '_')}").register(subparsers)
        else:
            subparsers.add_parser(name, help=summary, add_help=False)
    return parser


class _Version(argparse.Action):
    """``--version``: the installed distribution's version, looked up only when asked for
    (reading the package metadata costs about 40 ms)."""

    def __init__(self, option_strings, dest, **kwargs):
        super().__init__(option_strings, dest, nargs=0, default=argparse.SUPPRESS, **kwargs)

    def __call__(self, parser, namespace, values, option_string=None):
        print(f"ohmgraph {importlib.metadata.version('ohmgraph')}")
        parser.exit()


def chosen_command(argv) -> list:
    """The command named on the command line (the first word that is not an option), as a
    list of at most one name."""
    words = [word for word in argv if not word.startswith("-")]
    return [words[0]] if words and words[0] in COMMANDS else []


def main(argv=None) -> int:
    """Run the command line; return the exit code.

    SIGINT and SIGTERM end any command with 130 or 143, one line on standard error, and no
    output or temporary file left (:mod:`ohmgraph.io.interrupts`).
    """
    atomic.start_run()
    name = "ohmgraph"
    with interrupts.handling():
        try:
            try:
                interrupts.checkpoint("start")
                argv = sys.argv[1:] if argv is None else list(argv)
                name = " ".join(["ohmgraph", *chosen_command(argv)])
                refusal = address_space.prepare()      # before the heavy libraries load
                if refusal is not None:
                    print(f"{name}: error: {refusal}", file=sys.stderr)
                    return EXIT_NO_MEMORY
                try:
                    args = build_parser(chosen_command(argv)).parse_args(argv)
                    name = f"ohmgraph {args.command}"
                    code = _run(args)
                except (ImportError, OSError, MemoryError) as error:
                    if not isinstance(error, MemoryError) and not _no_room_to_load(error):
                        raise
                    print(f"{name}: error: {OUT_OF_MEMORY}", file=sys.stderr)
                    code = EXIT_NO_MEMORY
            except KeyboardInterrupt:
                code = None
            interrupts.hold()
        except KeyboardInterrupt:       # the one interrupt arrived between the two lines above
            code = None
            interrupts.hold()
        interrupt = interrupts.received()
        if interrupt is None and code is None:      # SIGINT from before handling() began
            interrupt = interrupts.Interrupted(signal.SIGINT)
        if interrupt is None:
            return code
        atomic.discard_run_files()
        print(f"{name}: interrupted by {interrupt}; no output was written", file=sys.stderr)
        interrupts.end_without_shutdown(interrupt.exit_code)
        return interrupt.exit_code


def _no_room_to_load(error: Exception) -> bool:
    """Whether a library failed to load for want of address space (``ulimit -v``): the dynamic
    loader's "failed to map segment" or "cannot allocate memory", or a compiled library that
    "could not find/load shared object" (llvmlite's wording)."""
    text = str(error).lower()
    return any(words in text for words in ("failed to map segment", "cannot allocate memory",
                                           "could not find/load shared object"))


def _run(args) -> int:
    import numpy as np          # here, not at the top: signals are handled before heavy imports

    interrupts.connect_workers()      # the command's modules are loaded by now
    try:
        # Overflow in extreme values shows in the residual checks and ends as a message and an
        # exit code; NumPy's floating-point warnings would only add noise to standard error.
        with np.errstate(all="ignore"):
            return int(args.run(args))
    except UserError as error:
        print(f"ohmgraph {args.command}: error: {error}", file=sys.stderr)
        return error.exit_code
    except MemoryError:
        print(f"ohmgraph {args.command}: error: {OUT_OF_MEMORY}", file=sys.stderr)
        return EXIT_NO_MEMORY
    except BrokenPipeError:
        # The reader of our output (``| head``) went away: stop quietly, as other tools do.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except OSError as error:
        # A file-system failure no reader caught, such as a name too long to look up.
        where = f"{error.filename}: " if error.filename else ""
        print(f"ohmgraph {args.command}: error: {where}cannot be used ({error.strerror or error})",
              file=sys.stderr)
        return EXIT_BAD_INPUT


def entry() -> None:
    """The ``ohmgraph`` executable: :func:`main`, then the process ends with its exit code at
    once (standard streams flushed), without the interpreter's shutdown. Every output file is
    closed and published before :func:`main` returns, and the shutdown's freeing of a large
    run's objects one by one took 0.15-0.37 s after a 1000 x 1000 grid's solve (benchmarks/
    README.md). Under MPI (mpi4py or petsc4py loaded) the shutdown stays: it finalises MPI and
    PETSc, without which ``mpiexec`` reports the rank as ended improperly. :func:`main` itself
    returns its code, for callers in Python."""
    code = main()
    if {"mpi4py", "petsc4py"} & set(sys.modules):
        sys.exit(code)
    interrupts.exit_now(code)


if __name__ == "__main__":
    entry()
