"""Pairs files in, resistance tables out.

A pairs file is CSV with a header naming the columns ``a`` and ``b`` (case-insensitive, any
order, other columns ignored), one node pair per line. Every problem is reported with the file,
the physical line and the column; blank lines count as lines with empty fields.

Result tables are written atomically (:func:`ohmgraph.io.atomic.atomic_output`) as CSV, or as
HDF5 when the output name ends in ``.h5`` or ``.hdf5``: one dataset per column in the group
``/resistance``, text as UTF-8 strings, with the run's summary as attributes of the group.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ohmgraph.engine.network import Network
from ohmgraph.io.atomic import atomic_output
from ohmgraph.io.errors import InputError

PAIR_COLUMNS = ("a", "b")
HDF5_SUFFIXES = (".h5", ".hdf5")
TABLE_SUFFIXES = (".csv", *HDF5_SUFFIXES)
HDF5_GROUP = "resistance"
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
    labels, indices = [], []
    for column in PAIR_COLUMNS:
        values = table[columns[column]].astype(str).str.strip().to_numpy(dtype=str)
        empty = np.flatnonzero(values == "")
        if empty.size:
            raise InputError(f"{path}:{empty[0] + HEADER_LINES + 1}: column {column!r} is empty")
        table_index = net.label_index
        found = np.array([table_index.get(v, -1) for v in values.tolist()], np.int64)
        unknown = np.flatnonzero(found < 0)
        if unknown.size:
            row = unknown[0]
            more = f" (and {unknown.size - 1} more unknown)" if unknown.size > 1 else ""
            raise InputError(f"{path}:{row + HEADER_LINES + 1}: column {column!r}: unknown node "
                             f"{str(values[row])!r}{more}")
        labels.append(values)
        indices.append(found)
    return labels[0], labels[1], indices[0], indices[1]


def check_table_path(path) -> Path:
    """Refuse an output name whose extension is neither CSV nor HDF5 (before any work)."""
    path = Path(path)
    if path.suffix.lower() not in TABLE_SUFFIXES:
        raise InputError(f"{path}: unknown output type {path.suffix!r} "
                         f"(expected {', '.join(TABLE_SUFFIXES)})")
    return path


def write_table(path, columns: dict, force: bool = False, attributes: dict | None = None) -> None:
    """Write named, equal-length columns as a CSV or HDF5 table, atomically.

    Parameters
    ----------
    path : str or Path
        ``.csv``, ``.h5`` or ``.hdf5``.
    columns : dict of str -> array_like
    force : bool
        Overwrite an existing file.
    attributes : dict, optional
        HDF5 only: scalar summary values stored as attributes of ``/resistance``.
    """
    path = check_table_path(path)
    frame = pd.DataFrame(columns)
    with atomic_output(path, force) as temporary:
        if path.suffix.lower() in HDF5_SUFFIXES:
            _write_hdf5(temporary, frame, attributes or {})
        else:
            frame.to_csv(temporary, index=False, float_format="%.17g")


def _write_hdf5(path: Path, frame: pd.DataFrame, attributes: dict) -> None:
    import h5py

    from ohmgraph.io.hdf5_integrity import FILE_OPTIONS, dataset_options
    from ohmgraph.io.hdf5_output import create_hdf5
    from ohmgraph.io.store import encode_strings

    with create_hdf5(path, **FILE_OPTIONS) as store:
        group = store.create_group(HDF5_GROUP)
        for name in frame.columns:
            values = frame[name].to_numpy()
            if values.dtype.kind in "OUS":        # fixed-length UTF-8: filters need fixed sizes
                encoded = encode_strings(values.astype(str))
                values = encoded.view(h5py.string_dtype("utf-8", encoded.dtype.itemsize))
            group.create_dataset(name, data=values, **dataset_options(values))
        for key, value in attributes.items():
            group.attrs[key] = value
