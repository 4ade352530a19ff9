"""Supply drop at the edge: threshold text, HDF5 datasets, the summary and its text.

``5%`` is a fraction of the net's nominal, ``50mV`` (or ``0.05V``, or a bare ``0.05``) an
absolute drop; :func:`parse_threshold` turns either into an engine
:class:`~ohmgraph.engine.drop.Threshold`.
"""

from __future__ import annotations

import argparse
import math
import re

import numpy as np

from ohmgraph.engine.drop import DEFAULT_THRESHOLDS, SupplyDrop, Threshold, supply_drop
from ohmgraph.io.store import StoredSolution

_THRESHOLD = re.compile(r"^\s*([-+0-9.eE]+)\s*(%|mV|V|uV|µV)?\s*$")
_SCALE = {"%": 0.01, "mV": 1e-3, "V": 1.0, "uV": 1e-6, "µV": 1e-6, None: 1.0}


def parse_threshold(text: str) -> Threshold:
    """``"5%"``, ``"50mV"``, ``"0.05V"`` or ``"0.05"`` (volts) as a threshold.

    Raises
    ------
    ValueError
        When the text is not a number greater than 0 with one of those units.
    """
    match = _THRESHOLD.match(text)
    value = None
    if match:
        try:
            value = float(match.group(1)) * _SCALE[match.group(2)]
        except ValueError:
            value = None
    if value is None or not math.isfinite(value) or value <= 0:
        raise ValueError(f"{text!r} is not a drop limit greater than 0 such as 5% or 50mV")
    return Threshold(value, match.group(2) == "%")


def threshold_type(text: str) -> Threshold:
    """argparse type of one threshold."""
    try:
        return parse_threshold(text)
    except ValueError as error:
        raise argparse.ArgumentTypeError(str(error)) from None


def thresholds_type(text: str) -> tuple:
    """argparse type of a comma-separated list of thresholds."""
    return tuple(threshold_type(part) for part in text.split(","))


def drop_datasets(drop: SupplyDrop) -> dict:
    """The supply drop as optional datasets of the solution store."""
    return {
        "nodes/net": drop.node_net, "nodes/drop": drop.drop, "nodes/held": drop.held,
        "nets/representative": drop.representative, "nets/nominal": drop.nominal,
        "nets/size": drop.size, "nets/worst_node": drop.worst_node,
        "nets/worst_drop": drop.worst_drop, "nets/over": drop.over,
        "nets/threshold": np.array([t.text() for t in drop.thresholds], dtype=str),
    }


def stored_drop(stored: StoredSolution, *, nominal=None, thresholds=None) -> SupplyDrop:
    """The supply drop of a stored solution, with the nominals stored with it unless ``nominal``
    is given, and the stored thresholds unless ``thresholds`` is given."""
    if nominal is None and "nets/nominal" in stored.extra:
        nominal = stored.extra["nets/nominal"]
    if thresholds is None:
        thresholds = DEFAULT_THRESHOLDS
        if "nets/threshold" in stored.extra:
            thresholds = tuple(parse_threshold(str(t).replace(" ", ""))
                               for t in stored.extra["nets/threshold"])
    try:
        return supply_drop(stored.network, stored.node_voltage, nominal=nominal,
                           thresholds=thresholds)
    except ValueError:                # stored nominals of another network: find them again
        return supply_drop(stored.network, stored.node_voltage, thresholds=thresholds)


def _percent(drop: float, nominal: float):
    return None if not (np.isfinite(drop) and np.isfinite(nominal) and nominal != 0) \
        else 100.0 * drop / abs(nominal)


def drop_summary(drop: SupplyDrop, labels: np.ndarray, top: int = 5, nets: int = 10) -> dict:
    """Plain data: per net (worst first, at most ``nets``) and the ``top`` worst nodes."""
    order = np.argsort(-np.nan_to_num(drop.worst_drop, nan=-np.inf), kind="stable")
    rows = []
    for k in order[:nets]:
        worst = int(drop.worst_node[k])
        rows.append({
            "net": int(k), "named_by": str(labels[drop.representative[k]]),
            "nominal_V": float(drop.nominal[k]), "nodes": int(drop.size[k]),
            "worst_node": str(labels[worst]) if worst >= 0 else None,
            "worst_drop_V": float(drop.worst_drop[k]),
            "worst_drop_percent": _percent(drop.worst_drop[k], drop.nominal[k]),
            "over": {t.text(): (None if c < 0 else int(c))
                     for t, c in zip(drop.thresholds, drop.over[k])}})
    worst_nodes = [{"node": str(labels[i]), "net": int(drop.node_net[i]),
                    "drop_V": float(drop.drop[i]),
                    "drop_percent": _percent(drop.drop[i], drop.nominal[drop.node_net[i]])}
                   for i in drop.worst_nodes(top)]
    return {"nets": drop.n_nets, "nets_shown": rows, "worst_nodes": worst_nodes}


def volts_text(volts: float) -> str:
    """Volts in V, mV or µV, at most 6 significant digits."""
    if not np.isfinite(volts):
        return "n/a"
    magnitude = abs(volts)
    if magnitude >= 1 or magnitude == 0:
        return f"{volts:.6g} V"
    if magnitude >= 1e-3:
        return f"{volts * 1e3:.6g} mV"
    return f"{volts * 1e6:.6g} µV"


def format_drop(summary: dict) -> list:
    """Text lines of a :func:`drop_summary`."""
    lines = [f"supply drop  ({summary['nets']} net(s) after removing voltage sources and the "
             "reference; source-held nodes excluded)"]
    for row in summary["nets_shown"]:
        percent = row["worst_drop_percent"]
        worst = ("no node" if row["worst_node"] is None else
                 f"worst {volts_text(row['worst_drop_V'])}"
                 + (f" ({percent:.3g}%)" if percent is not None else "")
                 + f" at {row['worst_node']}")
        over = ", ".join(f">{name}: {count:,}" for name, count in row["over"].items()
                         if count is not None)
        lines.append(f"  net {row['net']} ({row['named_by']}, nominal "
                     f"{volts_text(row['nominal_V'])}, {row['nodes']:,} nodes): {worst}"
                     + (f"; {over}" if over else ""))
    hidden = summary["nets"] - len(summary["nets_shown"])
    if hidden > 0:
        lines.append(f"  ... and {hidden} more net(s)")
    if summary["worst_nodes"]:
        lines.append("  largest drops")
        for row in summary["worst_nodes"]:
            percent = row["drop_percent"]
            lines.append(f"    {row['node']}  {volts_text(row['drop_V'])}"
                         + (f" ({percent:.3g}%)" if percent is not None else "")
                         + f"  net {row['net']}")
    return lines
