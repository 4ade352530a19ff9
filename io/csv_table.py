"""Result tables as CSV: named, equal-length columns written by pandas with the digit rule of
:mod:`ohmgraph.io.numbers` (at most 12 significant digits, or full precision on request)."""

from __future__ import annotations

import pandas as pd

from ohmgraph.io.atomic import atomic_output
from ohmgraph.io.numbers import csv_float_format


def write_csv(target, columns: dict, *, full_precision: bool = False,
              gzipped: bool = False) -> None:
    """Write ``columns`` as CSV with a header row to a path or an open text stream.

    Parameters
    ----------
    target : str, Path or text stream
    columns : dict of str to array_like
    full_precision : bool
        Write every float as its ``repr`` (exact round trip) instead of 12 significant digits.
    gzipped : bool
        Compress with gzip (paths only).
    """
    pd.DataFrame(columns).to_csv(target, index=False, compression="gzip" if gzipped else None,
                                 float_format=csv_float_format(full_precision))


def publish_csv(path, columns: dict, *, full_precision: bool = False, gzipped: bool = False,
                force: bool = False) -> None:
    """:func:`write_csv` to a new file, atomically (refused if it exists without ``force``)."""
    with atomic_output(path, force) as temporary:
        write_csv(temporary, columns, full_precision=full_precision, gzipped=gzipped)


__all__ = ["write_csv", "publish_csv"]
