"""What the pictures draw, taken from a stored solution: node or resistor-midpoint positions,
layers and the quantity's values."""

from __future__ import annotations

import numpy as np

from ohmgraph.engine.drop import SupplyDrop
from ohmgraph.engine.network import RESISTOR
from ohmgraph.io.errors import InputError
from ohmgraph.io.pictures import Points
from ohmgraph.io.store import StoredSolution

MAP_QUANTITIES = {  # quantity: (colour-bar label, unit, reduce per cell)
    "drop": ("supply drop, largest per cell", "V", "max"),
    "voltage": ("node voltage, mean per cell", "V", "mean"),
    "current": ("largest |resistor current| at the nodes of a cell", "A", "max"),
    "power": ("largest resistor power at the nodes of a cell", "W", "max"),
}


def has_coordinates(stored: StoredSolution) -> bool:
    """Whether the solution has node coordinates (it was solved with ``--nodes``) for at least
    one node."""
    x, y = stored.extra.get("nodes/x"), stored.extra.get("nodes/y")
    return x is not None and y is not None and bool(np.any(np.isfinite(x) & np.isfinite(y)))


def require_coordinates(stored: StoredSolution, path) -> None:
    """Raise :class:`InputError` saying how to get coordinates, and offering the histograms."""
    if not has_coordinates(stored):
        raise InputError(f"{path}: has no node coordinates, so there is nothing to map (solve "
                         "with --nodes NODES.csv, columns label,x,y[,layer]); the histograms of "
                         "drop and utilisation need none: add --histograms")


def node_layers(stored: StoredSolution) -> np.ndarray:
    layer = stored.extra.get("nodes/layer")
    return (np.asarray(layer, dtype=str) if layer is not None
            else np.full(stored.network.n_nodes, "", dtype=str))


def node_points(stored: StoredSolution, values: np.ndarray) -> Points:
    """Node values at node positions."""
    return Points(stored.extra["nodes/x"], stored.extra["nodes/y"], node_layers(stored),
                  np.asarray(values, np.float64))


def largest_at_nodes(stored: StoredSolution, values: np.ndarray) -> np.ndarray:
    """Per node, the largest value over the resistors that meet there (NaN where none)."""
    net = stored.network
    resistors = np.flatnonzero(net.kind == RESISTOR)
    ends = np.concatenate([net.from_node[resistors], net.to_node[resistors]])
    both = np.tile(np.asarray(values, np.float64)[resistors], 2)
    order = np.argsort(both, kind="stable")
    at_nodes = np.full(net.n_nodes, np.nan)
    at_nodes[ends[order]] = both[order]              # the last write, the largest, stays
    return at_nodes


def branch_points(stored: StoredSolution, values: np.ndarray) -> Points:
    """Resistor values drawn at nodes: each node shows the largest value of the resistors
    that meet there (a via shows on both its layers)."""
    return node_points(stored, largest_at_nodes(stored, values))


def quantity_points(stored: StoredSolution, quantity: str, drop: SupplyDrop) -> Points:
    """The points of a map of ``quantity`` (a key of :data:`MAP_QUANTITIES`)."""
    if quantity == "drop":
        values = np.where(drop.counted, drop.drop, np.nan)
        return node_points(stored, values)
    if quantity == "voltage":
        return node_points(stored, stored.node_voltage)
    if quantity == "current":
        return branch_points(stored, np.abs(stored.branch_current))
    return branch_points(stored, stored.branch_power)
