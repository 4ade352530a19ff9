"""Tables of a stored solution as pandas DataFrames, and writing them to CSV or Parquet.

:func:`load_nodes` and :func:`load_branches` read a solution file into DataFrames whose labels
and names are Python ``str`` (not bytes); :func:`select` keeps the top rows by a quantity and
filters branches by kind; :func:`write_table` writes ``.csv`` (pandas) or ``.parquet``
(pyarrow) atomically.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ohmgraph.engine.limits import branch_utilisation
from ohmgraph.engine.network import KIND_LETTERS
from ohmgraph.io.atomic import atomic_output
from ohmgraph.io.drop_view import stored_drop
from ohmgraph.io.errors import InputError
from ohmgraph.io.store import StoredSolution, read_solution

TABLE_SUFFIXES = (".csv", ".parquet")
NODE_ORDER = ("drop", "voltage")
BRANCH_ORDER = ("current", "power", "voltage", "utilisation")


def _text(values) -> np.ndarray:
    """Python ``str`` objects (pandas keeps them as they are)."""
    return np.asarray(values, dtype=str).astype(object)


def node_frame(stored: StoredSolution) -> pd.DataFrame:
    """One row per node: ``label``, ``voltage`` (V), ``net``, ``drop`` (V), ``held`` and, when
    the solution has a node table, ``x``, ``y``, ``layer``."""
    net = stored.network
    drop = stored_drop(stored)
    columns = {"label": _text(net.node_labels), "voltage": stored.node_voltage,
               "net": drop.node_net, "drop": drop.drop, "held": drop.held}
    for name in ("x", "y", "layer"):
        if f"nodes/{name}" in stored.extra:
            data = stored.extra[f"nodes/{name}"]
            columns[name] = _text(data) if name == "layer" else data
    return pd.DataFrame(columns)


def branch_frame(stored: StoredSolution) -> pd.DataFrame:
    """One row per branch: ``name``, ``kind``, ``from``, ``to``, ``value``, ``current`` (A),
    ``voltage`` (V), ``power`` (W) and, when the branch table had ratings, ``max_current``,
    ``max_power`` and ``utilisation`` (largest of current and power over their ratings)."""
    net = stored.network
    columns = {"name": _text(net.branch_names), "kind": _text(np.array(KIND_LETTERS)[net.kind]),
               "from": _text(net.node_labels[net.from_node]),
               "to": _text(net.node_labels[net.to_node]), "value": net.value,
               "current": stored.branch_current, "voltage": stored.branch_voltage,
               "power": stored.branch_power}
    rated = {name: stored.extra.get(f"branches/{name}") for name in ("max_current", "max_power")}
    if any(r is not None for r in rated.values()):
        for name, data in rated.items():
            columns[name] = data if data is not None else np.full(net.n_branches, np.nan)
        columns["utilisation"] = branch_utilisation(net, stored.branch_current,
                                                    stored.branch_power, rated["max_current"],
                                                    rated["max_power"])
    return pd.DataFrame(columns)


def load_nodes(path) -> pd.DataFrame:
    """The nodes of a solution file as a DataFrame (see :func:`node_frame`)."""
    return node_frame(read_solution(path))


def load_branches(path) -> pd.DataFrame:
    """The branches of a solution file as a DataFrame (see :func:`branch_frame`)."""
    return branch_frame(read_solution(path))


def select(frame: pd.DataFrame, by: str | None = None, top: int | None = None,
           kinds=None) -> pd.DataFrame:
    """Rows of the given kinds, the ``top`` largest by ``|by|`` first (all rows when None).

    Raises
    ------
    InputError
        When ``by`` is not a column of the frame.
    """
    if kinds:
        frame = frame[frame["kind"].isin(list(kinds))]
    if top is None:
        return frame
    if by not in frame.columns:
        raise InputError(f"cannot order by {by!r}: the table has no such column")
    return frame.iloc[np.argsort(-np.nan_to_num(np.abs(frame[by].to_numpy(np.float64)),
                                                nan=-np.inf), kind="stable")[:top]]


def check_table_path(path) -> None:
    """Raise :class:`InputError` unless ``path`` ends in ``.csv`` or ``.parquet``."""
    if Path(path).suffix.lower() not in TABLE_SUFFIXES:
        raise InputError(f"{path}: unknown table type (use .csv or .parquet)")


def write_table(frame: pd.DataFrame, path, force: bool = False) -> None:
    """Write a DataFrame as CSV (no index) or Parquet, chosen by the extension, atomically."""
    check_table_path(path)
    parquet = Path(path).suffix.lower() == ".parquet"
    with atomic_output(path, force) as temporary:
        if parquet:
            frame.to_parquet(temporary, index=False, engine="pyarrow")
        else:
            frame.to_csv(temporary, index=False, float_format="%.12g")
