"""Pairs files: the node pairs of a batch resistance query.

A pairs file is CSV with a header naming the columns ``a`` and ``b`` (case-insensitive, any
order, other columns ignored), one node pair per line. Every problem is reported with the file,
the physical line and the column; blank lines count as lines with empty fields. (The result
tables are written by :mod:`ohmgraph.io.result_table`.)
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ohmgraph.engine.network import Network
from ohmgraph.io.errors import InputError

PAIR_COLUMNS = ("a", "b")
HEADER_LINES = 1


def read_pairs(path, net: Network) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Read node pairs and resolve their labels against ``net``.

    Returns
    -------
    a_labels, b_labels : ndarray of str
    a_idx, b_idx : ndarray of int64
        Node indices in ``net``.

    Raises
    ------
    InputError
        When the file is missing, is not CSV, lacks a column, has an empty field or names a node
        the network does not have (message ``FILE:LINE: column 'b': ...``).
    """
    a_labels, b_labels = read_pair_labels(path)
    return a_labels, b_labels, *resolve_pair_labels(path, (a_labels, b_labels), net.label_index)


def read_pair_labels(path) -> tuple[np.ndarray, np.ndarray]:
    """The labels of the pairs (columns ``a`` and ``b``), checked but not resolved.

    Raises
    ------
    InputError
        As :func:`read_pairs`, except for unknown nodes.
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file")
    if not path.is_file():
        raise InputError(f"{path}: not a file")
    try:
        # Read the header as a row, so a line with more fields than the header is an error
        # (pandas would otherwise take its first field as a row label).
        table = pd.read_csv(path, dtype=str, header=None, keep_default_na=False,
                            skip_blank_lines=False, skipinitialspace=True, encoding="utf-8")
    except pd.errors.EmptyDataError:
        raise InputError(f"{path}: the file is empty (expected a header with columns a,b)") \
            from None
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as error:
        raise InputError(f"{path}: not a readable CSV file ({str(error).strip()})") from None
    except (OSError, EOFError) as error:        # an unreadable or truncated .gz file
        raise InputError(f"{path}: cannot be read ({error})") from None
    table = table.iloc[HEADER_LINES:].set_axis(table.iloc[0].tolist(), axis=1)
    names = [name.strip().lower() for name in table.columns]
    repeated = [c for c in PAIR_COLUMNS if names.count(c) > 1]
    if repeated:
        raise InputError(f"{path}:1: the header repeats column {repeated[0]!r}")
    columns = dict(zip(names, table.columns))
    missing = [c for c in PAIR_COLUMNS if c not in columns]
    if missing:
        raise InputError(f"{path}:1: missing column {missing[0]!r} (the header must name "
                         f"columns a and b; found {', '.join(map(repr, table.columns))})")
    if table.shape[0] == 0:
        raise InputError(f"{path}: no pairs after the header")
    labels = []
    for column in PAIR_COLUMNS:
        values = table[columns[column]].astype(str).str.strip().to_numpy(dtype=str)
        empty = np.flatnonzero(values == "")
        if empty.size:
            raise InputError(f"{path}:{empty[0] + HEADER_LINES + 1}: column {column!r} is empty")
        labels.append(values)
    return labels[0], labels[1]


def resolve_pair_labels(path, labels, label_index) -> tuple[np.ndarray, np.ndarray]:
    """Node indices of the pairs' labels (``label_index``: a mapping from label to index, such
    as :attr:`Network.label_index`, or one holding only the labels asked for).

    Raises
    ------
    InputError
        Naming the file, line and column of the first label ``label_index`` lacks.
    """
    indices = []
    for column, values in zip(PAIR_COLUMNS, labels):
        found = np.array([label_index.get(v, -1) for v in values.tolist()], np.int64)
        unknown = np.flatnonzero(found < 0)
        if unknown.size:
            row = unknown[0]
            more = f" (and {unknown.size - 1} more unknown)" if unknown.size > 1 else ""
            raise InputError(f"{path}:{row + HEADER_LINES + 1}: column {column!r}: unknown node "
                             f"{str(values[row])!r}{more}")
        indices.append(found)
    return indices[0], indices[1]
