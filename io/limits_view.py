"""Limit checks of a stored solution at the edge: arguments, violation rows and their text."""

from __future__ import annotations

import numpy as np

from ohmgraph.engine.drop import SupplyDrop, Threshold
from ohmgraph.engine.limits import UNITS, Violations, branch_utilisation, check_limits
from ohmgraph.engine.network import KIND_LETTERS
from ohmgraph.io.drop_view import stored_drop, threshold_type, volts_text
from ohmgraph.io.commands.argtypes import finite_float, positive_float
from ohmgraph.io.store import StoredSolution

CAUTION = ("caution: computed values are not a safety rating; follow the parts' datasheets, "
           "derating practice and local codes")


def add_limit_arguments(parser) -> None:
    """``--max-drop``, ``--max-current``, ``--max-power`` and ``--nominal`` (shared by
    ``limits`` and ``report``)."""
    parser.add_argument("--max-drop", type=threshold_type, metavar="LIMIT",
                        help="largest allowed supply drop: a percentage of the net's nominal "
                             "(5%%) or a voltage (50mV, 0.05V)")
    parser.add_argument("--max-current", type=positive_float, metavar="AMPS",
                        help="largest allowed current through any resistor (a branch's own "
                             "max_current rating, when smaller, still applies)")
    parser.add_argument("--max-power", type=positive_float, metavar="WATTS",
                        help="largest allowed power in any resistor (a branch's own max_power "
                             "rating, when smaller, still applies)")
    parser.add_argument("--nominal", type=finite_float, metavar="VOLTS",
                        help="supply voltage of every net (default: as stored by solve)")


def ratings(stored: StoredSolution) -> tuple:
    """Per-branch current and power ratings of a stored solution (None when absent)."""
    return stored.extra.get("branches/max_current"), stored.extra.get("branches/max_power")


def has_limits(stored: StoredSolution, args) -> bool:
    """Whether there is anything to check: a limit option or a rating column."""
    return (args.max_drop is not None or args.max_current is not None
            or args.max_power is not None or any(r is not None for r in ratings(stored)))


def evaluate(stored: StoredSolution, max_drop: Threshold | None, max_current, max_power,
             nominal=None) -> tuple[SupplyDrop, Violations, np.ndarray]:
    """Supply drop, violations and per-branch utilisation of a stored solution."""
    drop = stored_drop(stored, nominal=nominal)
    rated_current, rated_power = ratings(stored)
    violations = check_limits(stored.network, drop, stored.branch_current, stored.branch_power,
                              max_drop=max_drop, max_current=rated_current,
                              max_power=rated_power, global_current=max_current,
                              global_power=max_power)
    utilisation = branch_utilisation(stored.network, stored.branch_current, stored.branch_power,
                                     rated_current, rated_power, global_current=max_current,
                                     global_power=max_power)
    return drop, violations, utilisation


def violation_rows(violations: Violations, stored: StoredSolution, top: int) -> list:
    """The first ``top`` violations as plain data, with node and branch labels."""
    net = stored.network
    rows = []
    for j in range(min(top, len(violations))):
        quantity, index = str(violations.quantity[j]), int(violations.index[j])
        if quantity == "drop":
            where = {"node": str(net.node_labels[index])}
        else:
            where = {"branch": str(net.branch_names[index]),
                     "kind": KIND_LETTERS[net.kind[index]],
                     "from": str(net.node_labels[net.from_node[index]]),
                     "to": str(net.node_labels[net.to_node[index]])}
        rows.append({"quantity": quantity, **where, "value": float(violations.value[j]),
                     "limit": float(violations.limit[j]), "unit": UNITS[quantity],
                     "utilisation": float(violations.utilisation[j])})
    return rows


def quantity_text(value: float, unit: str) -> str:
    """A value with its unit (volts scaled to mV or µV), at most 6 significant digits."""
    return volts_text(value) if unit == "V" else f"{value:.6g} {unit}"


def format_violations(rows: list, counts: dict, total: int) -> list:
    """Text lines: counts per quantity, then one line per violation, worst first."""
    lines = [f"limits exceeded: {total:,} "
             f"(drop {counts['drop']:,}, current {counts['current']:,}, "
             f"power {counts['power']:,})"]
    for row in rows:
        what = (f"node {row['node']}" if row["quantity"] == "drop" else
                f"branch {row['branch']} {row['kind']} {row['from']} -> {row['to']}")
        lines.append(f"  {row['utilisation'] * 100:7.1f}%  {row['quantity']:<7} {what}: "
                     f"{quantity_text(row['value'], row['unit'])} over "
                     f"{quantity_text(row['limit'], row['unit'])}")
    if total > len(rows):
        lines.append(f"  ... and {total - len(rows):,} more")
    return lines
