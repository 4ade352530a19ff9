"""Read a node table: where each node sits (``label,x,y`` and optionally ``layer``).

A CSV file (optionally ``.gz``) with a header naming the columns, in any order and letter case:
``label`` (required, a node of the network), ``x`` and ``y`` (numbers in any one length unit,
given together) and ``layer`` (any text, such as ``top`` or ``m1``). Nodes the table does not
name have no coordinates (NaN) and an empty layer. Read with pandas; every problem is reported
as ``FILE:LINE: column ...``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ohmgraph.engine.network import Network
from ohmgraph.io.errors import InputError, ProblemList
from ohmgraph.io.text_table import read_text_table

NODE_COLUMNS = ("label", "x", "y", "layer")


@dataclass(frozen=True)
class NodeTable:
    """Coordinates and layers of a network's nodes, in node order.

    Attributes
    ----------
    x, y : ndarray of float64, shape (n,) or None
        NaN for nodes the table does not name; None when the table has no coordinates.
    layer : ndarray of str, shape (n,) or None
        Empty for nodes the table does not name; None when the table has no layer column.
    """

    x: np.ndarray | None
    y: np.ndarray | None
    layer: np.ndarray | None

    def datasets(self) -> dict:
        """``{"nodes/x": ..., ...}`` for the columns present, for the solution store."""
        found = {"nodes/x": self.x, "nodes/y": self.y, "nodes/layer": self.layer}
        return {name: data for name, data in found.items() if data is not None}


def read_node_table(path, net: Network) -> NodeTable:
    """Read a node table for ``net``.

    Raises
    ------
    InputError
        When the file cannot be read, a column is unknown or missing, a label is not a node of
        the network or repeats, or a coordinate is not a finite number.
    """
    import pandas as pd           # imported on use: keeps start-up short
    path = Path(path)
    table = read_text_table(path, "node table", NODE_COLUMNS, required=("label",))
    if ("x" in table.columns) != ("y" in table.columns):
        raise InputError(f"{path}:1: header needs both 'x' and 'y' (or neither)")
    table["line"] = np.arange(len(table)) + 2
    table = table[(table.drop(columns="line") != "").any(axis=1)]      # blank lines
    problems = ProblemList(path)
    index = pd.Index(net.node_labels).get_indexer(table["label"])
    for line, label in zip(table["line"][index < 0], table["label"][index < 0]):
        problems.add(line, f"column 'label': unknown node {label!r}")
    repeated = table["label"].duplicated() & (index >= 0)
    for line, label in zip(table["line"][repeated], table["label"][repeated]):
        problems.add(line, f"column 'label': node {label!r} is named twice")
    coordinates = {}
    for column in ("x", "y"):
        if column in table.columns:
            values = pd.to_numeric(table[column], errors="coerce").to_numpy(np.float64)
            bad = ~np.isfinite(values)
            for line, text in zip(table["line"][bad], table[column][bad]):
                problems.add(line, f"column {column!r}: {text!r} is not a finite number")
            coordinates[column] = values
    problems.raise_if_any()
    n = net.n_nodes

    def spread(values, fill):
        out = np.full(n, fill, dtype=np.asarray(values).dtype if fill == "" else np.float64)
        out[index] = values
        return out

    return NodeTable(
        x=spread(coordinates["x"], np.nan) if "x" in coordinates else None,
        y=spread(coordinates["y"], np.nan) if "y" in coordinates else None,
        layer=(spread(table["layer"].to_numpy(dtype=str), "")
               if "layer" in table.columns else None))


def node_table_by_label(stored, net: Network) -> NodeTable | None:
    """The node table of a stored solution carried over to ``net`` by label (None when the
    solution has none); nodes it does not know get no coordinates."""
    import pandas as pd           # imported on use: keeps start-up short
    if "nodes/x" not in stored.extra and "nodes/layer" not in stored.extra:
        return None
    where = pd.Index(stored.node_labels).get_indexer(net.node_labels)
    found = where >= 0

    def carried(name, fill):
        data = stored.extra.get(f"nodes/{name}")
        if data is None:
            return None
        out = np.full(net.n_nodes, fill, dtype=np.float64 if fill != "" else data.dtype)
        out[found] = data[where[found]]
        return out

    return NodeTable(carried("x", np.nan), carried("y", np.nan), carried("layer", ""))
