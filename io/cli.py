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
import sys

import numpy as np

from ohmgraph.io.errors import EXIT_BAD_INPUT, EXIT_OK, UserError

COMMANDS = ["check", "solve", "show", "generate", "demo", "compare", "diagnose", "tolerance",
            "pick-readings", "resistance"]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ohmgraph",
        description="Check, solve and query large linear resistive networks.")
    parser.add_argument("--version", action="version",
                        version=f"ohmgraph {importlib.metadata.version('ohmgraph')}")
    subparsers = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name in COMMANDS:
        module = importlib.import_module(f"ohmgraph.io.commands.{name.replace('-', '_')}")
        module.register(subparsers)
    return parser


def main(argv=None) -> int:
    """Run the command line; return the exit code."""
    args = build_parser().parse_args(argv)
    try:
        # Overflow in extreme values shows in the residual checks and ends as a message and an
        # exit code; NumPy's floating-point warnings would only add noise to standard error.
        with np.errstate(all="ignore"):
            return int(args.run(args))
    except UserError as error:
        print(f"ohmgraph {args.command}: error: {error}", file=sys.stderr)
        return error.exit_code
    except MemoryError:
        print(f"ohmgraph {args.command}: error: not enough memory for this input or size",
              file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("ohmgraph: interrupted", file=sys.stderr)
        return EXIT_BAD_INPUT
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


if __name__ == "__main__":
    sys.exit(main())
