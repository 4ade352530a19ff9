"""``ohmgraph pick-readings NET --test-points TP.csv --budget K``: which readings to take.

Candidates are the voltage of every test point against the reference and the two-point
resistance between every pair of test points (``--kinds``); the engine
(:mod:`ohmgraph.engine.readings.probes`) chooses the ``K`` that separate the most pairs of
single faults and reports the faults they still cannot tell apart.
"""

from __future__ import annotations

import itertools

import numpy as np

from ohmgraph.engine.readings.diagnosis import SHORT_RATIO
from ohmgraph.engine.readings.model import Readings
from ohmgraph.engine.readings.probes import (DEFAULT_CHANGE, DEFAULT_SEPARATION,
                                             choose_readings)
from ohmgraph.io.commands.argtypes import fraction, positive_float, whole_number
from ohmgraph.io.commands.reading_model import model_readings, write_table
from ohmgraph.io.commands.reading_options import (add_full_precision_argument,
                                                  add_network_arguments, add_output_arguments,
                                                  check_output)
from ohmgraph.io.commands.part_options import (add_tolerance_arguments, percent,
                                               read_part_tolerances)
from ohmgraph.io.atomic import refuse_input
from ohmgraph.io.errors import EXIT_OK, InputError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.measurement_table import UNIT_NAME, accuracy_rules, read_test_points
from ohmgraph.io.reader import read_network

SHOWN_GROUPS = 5
SHOWN_MEMBERS = 8


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "pick-readings", help="choose the K readings that best tell single faults apart",
        description="From the voltages of the test points and the two-point resistances "
                    "between them, choose K readings that separate the most pairs of single "
                    "faults (each resistor open, shorted, or changed by --change): two faults "
                    "are separated when their predicted readings differ by more than "
                    "--separation standard deviations of the combined spread (instrument and "
                    "parts) in at least one chosen reading. Greedy choice on the fault "
                    "signatures; reports the faults that stay indistinguishable.")
    add_network_arguments(parser)
    parser.add_argument("--test-points", required=True, metavar="TP.csv",
                        help="CSV with a column 'node': the nodes a probe can reach")
    parser.add_argument("--budget", type=whole_number(1), required=True, metavar="K",
                        help="number of readings to choose")
    parser.add_argument("--kinds", choices=["V", "R", "VR"], default="VR",
                        help="candidate readings: test-point voltages (V), resistances between "
                             "test points (R) or both (default VR)")
    parser.add_argument("--accuracy", action="append", metavar="SPEC",
                        help="instrument accuracy per unit, e.g. 0.05%%+0.5mV and "
                             "0.1%%+0.05ohm (required for every candidate kind)")
    add_tolerance_arguments(parser)
    parser.add_argument("--change", type=percent, default=DEFAULT_CHANGE, metavar="PCT",
                        help="value change of the value faults, e.g. 20%% (default "
                             f"{100 * DEFAULT_CHANGE:g}%%)")
    parser.add_argument("--separation", type=positive_float, default=DEFAULT_SEPARATION,
                        metavar="S", help="standard deviations that separate two faults "
                                          f"(default {DEFAULT_SEPARATION:g})")
    parser.add_argument("--short-ratio", type=fraction, default=SHORT_RATIO, metavar="F",
                        help=f"a short is the resistance times F (default {SHORT_RATIO:g})")
    add_output_arguments(parser)
    add_full_precision_argument(parser)
    parser.set_defaults(run=run, command_group="readings_plan", measurements=None)


def _candidates(net, nodes, kinds: str):
    volts = list(nodes) if "V" in kinds else []
    pairs = list(itertools.combinations(nodes, 2)) if "R" in kinds else []
    kind = np.array(["V"] * len(volts) + ["R"] * len(pairs))
    a = np.array(volts + [p[0] for p in pairs], np.int64)
    b = np.array([net.reference] * len(volts) + [p[1] for p in pairs], np.int64)
    return kind, a, b


def _bands(rules: dict, kind: np.ndarray, values: np.ndarray) -> np.ndarray:
    band = np.empty(kind.size)
    for letter in np.unique(kind):
        accuracy = rules.get(letter, rules.get(None))
        if accuracy is None:
            raise InputError(f"--accuracy: none applies to {letter} readings (give e.g. "
                             f"--accuracy 0.1%+{'0.5mV' if letter == 'V' else '0.05ohm'})")
        rows = kind == letter
        band[rows] = accuracy.band(values[rows])
    return band


def _fault_name(net, plan, row: int) -> str:
    if row < 0:
        return "no fault"
    return f"{net.branch_names[plan.faults.branch[row]]} {plan.faults.kind[row]}"


def run(args) -> int:
    """Run ``pick-readings``; exit 0 once the readings are chosen."""
    check_output(args)
    if args.output:
        refuse_input(args.output, (args.test_points,))
    rules = accuracy_rules(args.accuracy)
    net = read_network(args.network, ground=args.ground)
    tolerance = read_part_tolerances(args, net)
    if tolerance is None:
        tolerance = np.zeros(net.n_branches)
    nodes, _ = read_test_points(args.test_points, net)
    kind, a, b = _candidates(net, nodes, args.kinds)
    if kind.size == 0:
        raise InputError(f"{args.test_points}: one test point gives no resistance reading")
    count = kind.size
    blank = Readings(kind, a, b, np.full(count, -1), np.full(count, np.nan),
                     np.full(count, np.nan))
    nominal = model_readings(args, net, blank)
    readings = Readings(kind, a, b, blank.branch, blank.measured,
                        _bands(rules, kind, nominal.model_value))
    model = model_readings(args, net, readings)
    plan = choose_readings(model, tolerance, args.budget, change=args.change,
                           short_ratio=args.short_ratio, separation=args.separation)
    labels = net.node_labels
    chosen = plan.chosen
    columns = {
        "step": np.arange(1, chosen.size + 1), "kind": kind[chosen],
        "a": labels[a[chosen]], "b": np.where(kind[chosen] == "V", "", labels[b[chosen]]),
        "model": model.model_value[chosen], "sigma": plan.faults.sigma[chosen],
        "newly_separated": plan.gains, "separated_total": np.cumsum(plan.gains),
    }
    summary = {
        "candidates": int(count), "budget": int(args.budget), "chosen": int(chosen.size),
        "faults": int(plan.faults.branch.size), "faults_seen": int(plan.seen.size),
        "faults_unseen": int(plan.unseen.size), "pairs": plan.total_pairs,
        "pairs_separated": plan.separated_pairs,
        "pairs_unseparated": plan.total_pairs - plan.separated_pairs,
        "indistinguishable_groups": len(plan.groups),
        "separation_sigma": args.separation, "value_change": args.change,
        "timings_s": model.timings, "notes": model.notes,
    }
    if args.output:
        members = [_fault_name(net, plan, r) for group in plan.groups for r in group]
        offsets = np.cumsum([0] + [group.size for group in plan.groups])
        write_table(args, columns, units={"model": "V|ohm by kind", "sigma": "V|ohm by kind"},
                    attrs=summary,
                    matrices={"group_member": np.array(members, dtype=str),
                              "group_offset": offsets},
                    sources={"network": args.network, "test_points": args.test_points,
                             **({"tolerances": args.tolerances} if args.tolerances else {})})
    if args.json:
        rows = [dict(zip(columns, values)) for values in zip(*columns.values())]
        groups = [[_fault_name(net, plan, r) for r in group] for group in plan.groups]
        print(dumps({"summary": summary, "readings": rows, "indistinguishable": groups}))
    else:
        print(_format(net, plan, columns, summary))
    return EXIT_OK


def _format(net, plan, columns, summary) -> str:
    lines = [f"{summary['candidates']} candidate reading(s); {summary['faults']} single faults "
             f"(open, short, ±{summary['value_change']:.0%} of every resistor), "
             f"{summary['faults_seen']} of them seen by some candidate (more than "
             f"{summary['separation_sigma']:g} sigma from the fault-free readings)",
             f"{'step':>4} {'kind':4} {'a':>12} {'b':>12} {'model':>14} {'sigma':>11} "
             f"{'separates':>11} {'total':>11}"]
    for row in range(len(columns["step"])):
        unit = UNIT_NAME[columns["kind"][row]]
        lines.append(f"{columns['step'][row]:>4} {columns['kind'][row]:4} "
                     f"{columns['a'][row]:>12} {columns['b'][row] or '-':>12} "
                     f"{columns['model'][row]:>10.6g} {unit:<3} {columns['sigma'][row]:>11.4g} "
                     f"{columns['newly_separated'][row]:>11} {columns['separated_total'][row]:>11}")
    share = summary["pairs_separated"] / max(summary["pairs"], 1)
    lines.append(f"separated {summary['pairs_separated']} of {summary['pairs']} pairs "
                 f"({share:.2%}) among the faults seen and the fault-free network")
    for group in plan.groups[:SHOWN_GROUPS]:
        names = [_fault_name(net, plan, r) for r in group[:SHOWN_MEMBERS]]
        more = f" and {group.size - SHOWN_MEMBERS} more" if group.size > SHOWN_MEMBERS else ""
        lines.append(f"indistinguishable ({group.size}): {', '.join(names)}{more}")
    if len(plan.groups) > SHOWN_GROUPS:
        lines.append(f"... and {len(plan.groups) - SHOWN_GROUPS} more group(s)")
    if summary["faults_unseen"]:
        lines.append(f"{summary['faults_unseen']} fault(s) are within "
                     f"{summary['separation_sigma']:g} sigma of the fault-free readings at every "
                     "candidate: no reading on offer can see them")
    return "\n".join(lines)
