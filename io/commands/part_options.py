"""Part tolerances for the reading commands: ``--tolerances FILE``, ``--default PCT`` and how
the bands combine them with the instrument's accuracy (``--coverage K``, ``--worst-case``)."""

from __future__ import annotations

import argparse

import numpy as np

from ohmgraph.engine.readings.bands import DEFAULT_COVERAGE, part_spread, reading_bands
from ohmgraph.io.commands.argtypes import positive_float
from ohmgraph.io.measurement_table import parse_percent, read_tolerances


def percent(text: str) -> float:
    """Option type: a tolerance in percent (``1%`` or ``1``) as a fraction."""
    try:
        return parse_percent(text)
    except ValueError as error:
        raise argparse.ArgumentTypeError(str(error)) from None


def add_tolerance_arguments(parser: argparse.ArgumentParser) -> None:
    """``--tolerances FILE`` and ``--default PCT``."""
    parser.add_argument("--tolerances", metavar="FILE",
                        help="CSV branch,tolerance (percent) for individual resistors")
    parser.add_argument("--default", type=percent, metavar="PCT",
                        help="tolerance of every resistor not in FILE, e.g. 1%%")


def add_band_arguments(parser: argparse.ArgumentParser) -> None:
    """The tolerance arguments and the rule that combines them with the instrument's accuracy."""
    add_tolerance_arguments(parser)
    rule = parser.add_mutually_exclusive_group()
    rule.add_argument("--coverage", type=positive_float, default=DEFAULT_COVERAGE, metavar="K",
                      help="coverage factor of the band (GUM, JCGM 100:2008 §6.2.1; default "
                           f"{DEFAULT_COVERAGE:g})")
    rule.add_argument("--worst-case", action="store_true",
                      help="band = instrument accuracy + worst case of the parts, instead of "
                           "the GUM root-sum-square")


def has_tolerances(args) -> bool:
    return args.tolerances is not None or args.default is not None


def read_part_tolerances(args, net) -> np.ndarray | None:
    """Relative tolerance of every branch, or None when neither option was given."""
    if not has_tolerances(args):
        return None
    if args.tolerances:
        return read_tolerances(args.tolerances, net, args.default or 0.0)
    return np.full(net.n_branches, args.default)


def model_bands(args, model, tolerance, *, covariance: bool = False):
    """The bands of every reading with the parts, and the part spread (None, None without)."""
    if tolerance is None:
        return None, None
    spread = part_spread(model, tolerance, covariance=covariance)
    rule = "worst" if args.worst_case else "gum"
    return reading_bands(model.readings.band, spread, rule, args.coverage), spread


def band_rule_text(bands) -> str:
    """One line saying how the band was formed."""
    if bands.rule == "worst":
        return ("band = instrument accuracy + worst case of the parts (every part at its "
                "tolerance limit in the worse direction, first order)")
    return ("band = k·sqrt(a²/3 + u_parts²), coverage factor k = "
            f"{bands.coverage:g}: the instrument's accuracy a and every part's tolerance taken "
            "as uniform limits, combined by root-sum-square (GUM, JCGM 100:2008 §4.3.7, "
            "§5.1.2, §6.2.1)")
