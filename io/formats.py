"""The one registry of file formats: which file-name suffix means which format.

Every reader and writer asks this module what a path holds, so a suffix means the same thing
to every command, and an unknown or unsuitable suffix is refused with one kind of message before
any work is done.

========== ================================== ========================== =====
name       suffixes                           what                       .gz
========== ================================== ========================== =====
csv        ``.csv``                           comma-separated table      yes
tsv        ``.tsv``                           tab-separated table        yes
edge-list  ``.txt``, ``.edges``, ``.el``      whitespace edge list       yes
parquet    ``.parquet``                       Parquet table              no
hdf5       ``.h5``, ``.hdf5``                 HDF5 file                  no
========== ================================== ========================== =====

Suffixes are matched without regard to letter case; ``.gz`` after a suffix marked "yes" means
gzip compression. A network file whose suffix is not in the table is read as an edge list (any
other extension, as the README documents); outputs must name a known suffix.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ohmgraph.io.errors import InputError

CSV, TSV, EDGE_LIST, PARQUET, HDF5 = "csv", "tsv", "edge-list", "parquet", "hdf5"
GZIP_SUFFIX = ".gz"


@dataclass(frozen=True)
class Format:
    """One file format.

    Attributes
    ----------
    name : str
        Format name used by readers and writers (``csv``, ``tsv``, ``edge-list``, ``parquet``,
        ``hdf5``).
    suffixes : tuple of str
        Lower-case file-name suffixes, dot included.
    description : str
        Words for messages.
    delimiter : str or None
        Field delimiter of a delimited text table.
    gzip : bool
        Whether ``.gz`` may follow the suffix.
    lines : bool
        Whether rows are text lines (so messages can name ``FILE:LINE``).
    """

    name: str
    suffixes: tuple
    description: str
    delimiter: str | None = None
    gzip: bool = False
    lines: bool = True


FORMATS = {f.name: f for f in (
    Format(CSV, (".csv",), "a comma-separated table", ",", gzip=True),
    Format(TSV, (".tsv",), "a tab-separated table", "\t", gzip=True),
    Format(EDGE_LIST, (".txt", ".edges", ".el"), "a whitespace edge list", gzip=True),
    Format(PARQUET, (".parquet",), "a Parquet table", lines=False),
    Format(HDF5, (".h5", ".hdf5"), "an HDF5 file", lines=False),
)}
NETWORK_FORMATS = (CSV, TSV, EDGE_LIST, PARQUET)


@dataclass(frozen=True)
class FileFormat:
    """The format of one path: the :class:`Format` and whether it is gzip-compressed."""

    format: Format
    gzipped: bool = False

    @property
    def name(self) -> str:
        return self.format.name


def suffixes_of(names) -> list:
    """Every suffix the formats ``names`` accept, ``.gz`` variants included, for messages."""
    formats = [FORMATS[name] for name in names]
    return ([suffix for fmt in formats for suffix in fmt.suffixes]
            + [suffix + GZIP_SUFFIX for fmt in formats if fmt.gzip for suffix in fmt.suffixes])


def detect_format(path) -> FileFormat | None:
    """The format a file name asks for, or None when its suffix is in no format."""
    name = Path(path).name.lower()
    gzipped = name.endswith(GZIP_SUFFIX)
    stem = name[:-len(GZIP_SUFFIX)] if gzipped else name
    for fmt in FORMATS.values():
        if any(stem.endswith(suffix) for suffix in fmt.suffixes) and (fmt.gzip or not gzipped):
            return FileFormat(fmt, gzipped)
    return None


def require_format(path, allowed, role: str = "") -> FileFormat:
    """The format of the output ``path``, which must be one of ``allowed``.

    Parameters
    ----------
    path : str or Path
    allowed : sequence of str
        Format names.
    role : str
        Prefix for messages, such as ``"-o"``.

    Raises
    ------
    InputError
        If the suffix names no format (``unknown output type``) or a format not allowed here
        (``unsuitable output type``).
    """
    found = detect_format(path)
    where = f"{role} {path}" if role else f"{path}"
    expected = f"expected {', '.join(suffixes_of(allowed))}"
    suffix = "".join(Path(path).suffixes[-2:]) or "(none)"
    if found is None:
        raise InputError(f"{where}: unknown output type {suffix!r} ({expected})")
    if found.name not in allowed:
        raise InputError(f"{where}: unsuitable output type {suffix!r}, "
                         f"{found.format.description} ({expected})")
    return found


def network_format(path) -> FileFormat:
    """The format of a network file: a known table format, else an edge list.

    Raises
    ------
    InputError
        If the suffix names a format that holds no network (an HDF5 solution file).
    """
    found = detect_format(path)
    if found is None:
        gzipped = Path(path).name.lower().endswith(GZIP_SUFFIX)
        return FileFormat(FORMATS[EDGE_LIST], gzipped)
    if found.name not in NETWORK_FORMATS:
        raise InputError(f"{path}: {found.format.description} is not a network file (expected "
                         f"{', '.join(suffixes_of(NETWORK_FORMATS))}, or any other name for an "
                         "edge list)")
    return found


__all__ = ["FORMATS", "Format", "FileFormat", "CSV", "TSV", "EDGE_LIST", "PARQUET", "HDF5",
           "detect_format", "require_format", "network_format", "suffixes_of"]
