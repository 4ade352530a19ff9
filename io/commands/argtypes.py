"""Argument types shared by the commands: each parses one option's text or raises
``argparse.ArgumentTypeError`` with a message naming the bad text (argparse then exits with 2)."""

from __future__ import annotations

import argparse
import math


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
