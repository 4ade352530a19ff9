"""Argument types shared by the commands: each parses one option's text or raises
``argparse.ArgumentTypeError`` with a message naming the bad text (argparse then exits with 2)."""

from __future__ import annotations

import argparse
import math
import re


def finite_float(text: str) -> float:
    """A finite number."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
    return value


def positive_float(text: str) -> float:
    """A finite number greater than 0."""
    value = finite_float(text)
    if value <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be a finite number greater than 0")
    return value


def fraction(text: str) -> float:
    """A number strictly between 0 and 1."""
    value = finite_float(text)
    if not 0 < value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must lie strictly between 0 and 1")
    return value


def whole_number(minimum: int):
    """The type of an integer option that must be at least ``minimum``."""
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if value < minimum:
            raise argparse.ArgumentTypeError(f"{text!r} must be at least {minimum}")
        return value
    return parse


_BYTE_UNITS = {"": 1, "B": 1, "KB": 1e3, "MB": 1e6, "GB": 1e9, "TB": 1e12,
               "KIB": 2 ** 10, "MIB": 2 ** 20, "GIB": 2 ** 30, "TIB": 2 ** 40}


def memory_size(text: str) -> float:
    """A positive amount of memory in bytes: a number with an optional unit (``B``, ``KB``,
    ``MB``, ``GB``, ``TB`` in powers of 1000; ``KiB``, ``MiB``, ``GiB``, ``TiB`` in powers of
    1024; any letter case), for example ``4GB`` or ``512MB``."""
    found = re.fullmatch(r"\s*([-+0-9.eE]*(?:nan|inf)?)\s*([A-Za-z]*)\s*", text,
                         flags=re.IGNORECASE)
    if found is None or not found.group(1):
        raise argparse.ArgumentTypeError(f"{text!r} is not an amount of memory (e.g. 4GB)")
    unit = found.group(2).upper()
    if unit not in _BYTE_UNITS:
        raise argparse.ArgumentTypeError(
            f"{text!r}: unknown unit {found.group(2)!r} (use B, KB, MB, GB, TB, KiB, MiB, GiB "
            "or TiB)")
    return positive_float(found.group(1)) * _BYTE_UNITS[unit]


def add_memory_budget(parser: argparse.ArgumentParser) -> None:
    """The ``--memory-budget`` option of the commands that solve."""
    parser.add_argument("--memory-budget", type=memory_size, default=None, metavar="SIZE",
                        help="memory a solver set-up may use, e.g. 4GB or 512MB (default: half "
                             "the available memory); auto chooses within it")
