"""A result table to the file its name asks for: CSV (:mod:`ohmgraph.io.csv_table`) or an HDF5
result group (:mod:`ohmgraph.io.result_store`), chosen through :mod:`ohmgraph.io.formats`."""

from __future__ import annotations

from ohmgraph.io.csv_table import publish_csv
from ohmgraph.io.formats import CSV, HDF5, require_format
from ohmgraph.io.result_store import write_results

TABLE_FORMATS = (CSV, HDF5)


def write_result_table(path, group: str, columns: dict, *, formats=TABLE_FORMATS,
                       full_precision: bool = False, force: bool = False,
                       append: bool = False, **hdf5) -> None:
    """Write ``columns`` to ``path`` as CSV or as the HDF5 group ``group``.

    Parameters
    ----------
    path : str or Path
    group : str
        HDF5 group name (``resistance``, ``comparison``, ...).
    columns : dict of str to array_like
    formats : sequence of str
        Formats allowed for this table.
    full_precision : bool
        CSV: every float as its exact ``repr`` instead of 12 significant digits (HDF5 always
        keeps full precision).
    force, append
        As for :func:`ohmgraph.io.result_store.write_results` (``append``: HDF5 only).
    **hdf5
        ``units``, ``attrs``, ``matrices``, ``sources``, ``command``, ``options`` of the HDF5
        group (ignored for CSV).

    Raises
    ------
    InputError
        If the name's suffix is not one of ``formats``.
    OutputRefused
        If the file exists without ``force`` or cannot be written; nothing is left behind.
    """
    found = require_format(path, formats, role="-o")
    if found.name == CSV:
        publish_csv(path, columns, full_precision=full_precision, gzipped=found.gzipped,
                    force=force)
    else:
        write_results(path, group, columns, force=force, append=append, **hdf5)


__all__ = ["write_result_table", "TABLE_FORMATS"]
