"""Steps shared by the reading commands (``compare``, ``diagnose``, ``tolerance``): read the
network and its measurement table, build the reading model, write the result table."""

from __future__ import annotations

from contextlib import contextmanager

import numpy as np

from ohmgraph.engine.readings.model import ReadingModel, build_model
from ohmgraph.engine.solve import NetworkNotSolvable
from ohmgraph.engine.solvers import SolverFailed
from ohmgraph.io.check_view import format_report
from ohmgraph.io.commands.reading_options import check_output
from ohmgraph.io.errors import NotWellPosed, SolverError
from ohmgraph.io.html_summary import check_html
from ohmgraph.io.measurement_table import accuracy_rules, read_measurements
from ohmgraph.io.memory_guard import refuse_if_too_big
from ohmgraph.io.progress import Feedback, switch_text
from ohmgraph.io.reader import read_network
from ohmgraph.io.result_store import command_options
from ohmgraph.io.result_table import write_result_table


def read_inputs(args):
    """Refuse a bad output first, then read the network and its measurement table."""
    check_output(args)
    check_html(args, (args.network, args.measurements, getattr(args, "tolerances", None)))
    rules = accuracy_rules(args.accuracy)
    net = read_network(args.network, ground=args.ground)
    refuse_if_too_big(net, args.method, args.network)
    return net, read_measurements(args.measurements, net, rules)


def feedback(args) -> Feedback:
    """Stage messages of a reading command (``--quiet`` turns them off)."""
    return Feedback(f"ohmgraph {args.command}", getattr(args, "quiet", False))


def model_readings(args, net, readings, solution=None) -> ReadingModel:
    """Build the reading model; a network without a unique solution is :class:`NotWellPosed`."""
    feedback(args).stage(f"{readings.n} reading(s) on {net.n_nodes:,} nodes: solving the "
                         "network and one adjoint system per reading", net.n_nodes)
    try:
        return build_model(net, readings, method=args.method, rtol=args.rtol,
                           allow_floating=args.allow_floating, solution=solution,
                           memory_budget=args.memory_budget)
    except NetworkNotSolvable as error:
        raise NotWellPosed(f"{args.network}: the network is not well-posed\n"
                           + format_report(error.report, net, source=args.network)) from None
    except SolverFailed as error:
        raise SolverError(f"{args.network}: {error}") from None


def write_table(args, columns: dict, *, units=None, attrs=None, matrices=None,
                sources=None) -> None:
    """Write ``columns`` to ``args.output``: CSV, or the command's HDF5 group with provenance."""
    write_result_table(args.output, args.command_group, columns, formats=args.output_formats,
                       full_precision=getattr(args, "full_precision", False), force=args.force,
                       append=args.append, units=units, attrs=attrs, matrices=matrices,
                       sources=sources, command=args.command, options=command_options(args))


def reading_columns(table, model: ReadingModel, result, bands=None) -> dict:
    """One row per reading: where it is, what was measured and what the model says.

    With part tolerances (``bands``), ``band`` is the combined band and ``instrument_band``,
    ``parts_band`` its two parts.
    """
    readings = model.readings
    status = np.where(result.passed, "pass", np.where(result.usable, "FAIL", "undetermined"))
    parts = {} if bands is None else {"instrument_band": bands.instrument,
                                      "parts_band": bands.parts}
    return {
        "line": table.lines, "kind": readings.kind, "a": table.a, "b": table.b,
        "measured": readings.measured, "model": model.model_value,
        "deviation": result.deviation, "band": result.band, **parts, "accuracy": table.accuracy,
        "deviation_in_bands": result.normalized, "status": status,
    }


@contextmanager
def counting_solves(args, model: ReadingModel, what: str):
    """Show a running count of the solves ``model``'s sessions make inside the block (a bar
    without a total: a fault ranking's number of solves is not known in advance), and say so
    when ``auto`` switches one of them to a factorisation."""
    say = feedback(args)
    bar = say.counter(what, model.network.n_nodes)
    sessions = [system.session for system in model.systems.values()]
    for session in sessions:
        session.on_solved = None if bar is None else bar.update
        session.on_switch = lambda why: say.message(switch_text(why))
    try:
        yield
    finally:
        for session in sessions:
            session.on_solved = session.on_switch = None
        if bar is not None:
            bar.close()
