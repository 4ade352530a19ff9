"""Small text tables read whole with pandas (change files, node tables): every field as
trimmed text, the header checked against the columns a table may have."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from ohmgraph.io.errors import InputError

if TYPE_CHECKING:
    import pandas as pd


def read_text_table(path, what: str, accepted, required=()) -> pd.DataFrame:
    """Read ``path`` (comma-separated, tab-separated for ``.tsv``) with every field as text.

    Parameters
    ----------
    path : str or Path
    what : str
        What the table is, for messages ("change file", "node table").
    accepted : sequence of str
        Column names the table may have (matched after trimming and lower-casing).
    required : sequence of str
        Column names it must have.

    Returns
    -------
    pandas.DataFrame
        Lower-case column names; data row ``k`` (0-based) is line ``k + 2`` of the file.

    Raises
    ------
    InputError
        When the file is missing or unreadable, or its header names an unknown column or lacks
        a required one (``FILE:1: ...``).
    """
    import pandas as pd           # imported on use: keeps start-up short
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: " + ("not a file" if path.exists() else "no such file"))
    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False, skip_blank_lines=False,
                            encoding="utf-8-sig", sep="\t" if ".tsv" in path.name else ",")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError, OSError,
            EOFError) as error:
        raise InputError(f"{path}: cannot be read as a {what} ({error})") from None
    table.columns = [str(column).strip().lower() for column in table.columns]
    unknown = [column for column in table.columns if column not in accepted]
    if unknown:
        raise InputError(f"{path}:1: header has unknown column(s) "
                         f"{', '.join(map(repr, unknown))} (expected {', '.join(accepted)})")
    missing = [column for column in required if column not in table.columns]
    if missing:
        raise InputError(f"{path}:1: header has no column {', '.join(map(repr, missing))}")
    return table.map(str.strip)


__all__ = ["read_text_table"]
