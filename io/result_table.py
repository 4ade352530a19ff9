"""A result table to the file its name asks for: CSV (:mod:`ohmgraph.io.csv_table`) or an HDF5
result group (:mod:`ohmgraph.io.result_store`), chosen through :mod:`ohmgraph.io.formats`."""

from __future__ import annotations

from ohmgraph.io.atomic import atomic_output
from ohmgraph.io.csv_table import publish_csv
from ohmgraph.io.provenance import provenance_record, sidecar_path, sidecar_text
from ohmgraph.io.formats import CSV, HDF5, require_format
from ohmgraph.io.result_store import write_results

TABLE_FORMATS = (CSV, HDF5)


def write_result_table(path, group: str, columns: dict, *, formats=TABLE_FORMATS,
                       full_precision: bool = False, force: bool = False,
                       append: bool = False, **hdf5) -> None:
    """Write ``columns`` to ``path`` as CSV (with its provenance sidecar
    ``PATH.provenance.json``, :mod:`ohmgraph.io.provenance`) or as the HDF5 group ``group``.

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
        group (for CSV, ``sources``, ``attrs``, ``command`` and ``options`` go to the sidecar).

    Raises
    ------
    InputError
        If the name's suffix is not one of ``formats``.
    OutputRefused
        If the file exists without ``force`` or cannot be written; nothing is left behind.
    """
    found = require_format(path, formats, role="-o")
    if found.name == CSV:
        record = provenance_record(group, hdf5.get("sources"), hdf5.get("attrs"),
                                   hdf5.get("command"), hdf5.get("options"))
        with atomic_output(sidecar_path(path), force) as side:
            publish_csv(path, columns, full_precision=full_precision, gzipped=found.gzipped,
                        force=force)
            side.write_text(sidecar_text(record, path), encoding="utf-8")
    else:
        write_results(path, group, columns, force=force, append=append, **hdf5)


__all__ = ["write_result_table", "TABLE_FORMATS"]
