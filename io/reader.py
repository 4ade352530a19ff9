"""Read a network from a branch table (CSV, TSV or Parquet) or a plain edge list.

Formats, chosen by the file extension (after an optional ``.gz``) through
:mod:`ohmgraph.io.formats`:

* ``.csv`` (comma) and ``.tsv`` (tab): a header row naming the columns ``name``, ``kind``,
  ``from``, ``to``, ``value`` in any order (case-insensitive). ``from``, ``to`` and ``value`` are
  required; a missing ``name`` column names each branch by its 1-based row number, a missing
  ``kind`` column makes every branch a resistor, and an empty ``kind`` field means ``R``.
  Optional rating columns ``max_current`` (A) and ``max_power`` (W) take numbers greater than 0;
  an empty field means no rating.
* ``.parquet``: the same columns and rules as a branch table (any column types: numbers and
  labels are read through their text, so integer labels become decimal text and values keep
  every digit); problems are reported by row (``FILE:row 3: column 'value': ...``).
* any other extension: a plain edge list, one resistor per line as ``from to ohms`` separated by
  spaces or tabs, with ``#`` comments (whole lines or trailing) and blank lines allowed. A file
  whose lines all hold two fields (``from to``, the usual form of an unweighted graph) is read as
  1 ohm resistors, and :func:`read_network_file` says so with an ``info`` finding
  (``default-resistance``); a file that mixes two- and three-field lines is refused at the first
  line that differs from the first branch line.

Surrounding spaces are trimmed from every field. Node labels are arbitrary text.

Reading takes a fast path: multi-threaded ``pyarrow.csv``, vectorised ``pyarrow.compute``
conversions, and node numbering in order of first appearance (``from`` column, then ``to``) by
a compiled kernel on Arrow's buffers (:mod:`ohmgraph.engine.numbering`; reference:
``pyarrow.compute.dictionary_encode``). When the fast path rejects anything, an exact pass over the
physical lines finds every problem and reports it as ``FILE:LINE: column 'value': 'abc' is not a
number``; if the exact pass finds none, the network is built from its results instead.
"""

from __future__ import annotations

import csv
import gzip
import resource
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq
from numba.core.errors import NumbaError

from ohmgraph.engine.checks import INFO, CheckReport, Finding, check
from ohmgraph.engine.network import KIND_CODE, RESISTOR, Network
from ohmgraph.engine.numbering import number_labels
from ohmgraph.io.address_space import refuse_to_read
from ohmgraph.io.errors import InputError, ProblemList
from ohmgraph.io.formats import EDGE_LIST, PARQUET, network_format
from ohmgraph.io.network_file import is_hdf5, read_stored_network

COLUMNS = ("name", "kind", "from", "to", "value", "max_current", "max_power")
# Optional ratings: amperes and watts, greater than 0; an empty field means no rating.
RATING_COLUMNS = ("max_current", "max_power")
REQUIRED_COLUMNS = ("from", "to", "value")
EDGE_LIST_FIELDS = ("from", "to", "value")
# Edge-list line forms by field count: weighted (from to ohms) and unweighted (from to).
EDGE_LIST_FORMS = {3: "from to ohms", 2: "from to"}
DEFAULT_OHMS = 1.0          # the resistance of every branch of a two-field edge list
# Edge-list lines are read whole by splitting on a control character (ASCII unit separator) that
# text files do not hold; a line that does hold one goes to the exact pass.
_UNUSED_DELIMITER = "\x1f"
# Accepted kind spellings after trimming and upper-casing; an empty field means a resistor.
KIND_SPELLINGS = {**KIND_CODE, "": RESISTOR}
# Labels and names are stored as HDF5 text, which ends at a NUL character; a label holding one
# would come back as another label.
NUL = "\x00"


@dataclass(frozen=True)
class _Columns:
    """Parsed branch columns, nodes numbered (:func:`_number_nodes`)."""

    labels: pa.Array
    from_node: np.ndarray
    to_node: np.ndarray
    value: np.ndarray
    kind: np.ndarray
    names: pa.Array | None
    values_defaulted: bool = False
    ratings: dict = field(default_factory=dict)


@dataclass(frozen=True)
class NetworkFile:
    """A network read from a file, with the facts the reader had to assume.

    Attributes
    ----------
    path : Path
    network : Network
    findings : tuple of Finding
        ``info`` findings about the reading itself (for example ``default-resistance`` when
        every value was defaulted to 1 ohm); :meth:`check` adds them to the check report.
    ratings : dict
        ``{"max_current": amperes, "max_power": watts}`` for the rating columns the table has,
        float64 arrays with NaN where a row gives no rating.
    """

    path: Path
    network: Network
    findings: tuple = ()
    ratings: dict = field(default_factory=dict)

    def check(self, allow_floating: bool = False) -> CheckReport:
        """:func:`ohmgraph.engine.check` of the network, the reader's findings appended."""
        report = check(self.network, allow_floating=allow_floating)
        return replace(report, findings=report.findings + list(self.findings))


class _Rejected(Exception):
    """The fast path met something it cannot judge; the exact pass decides."""


# ---------------------------------------------------------------------------------- public API
def read_network(path, ground: str | None = "0") -> Network:
    """Read a network file (:func:`read_network_file` without the reader's findings and
    ratings).

    Parameters
    ----------
    path : str or Path
    ground : str or None, default ``"0"``

    Returns
    -------
    Network

    Raises
    ------
    InputError
        As for :func:`read_network_file`.
    """
    return read_network_file(path, ground).network


def read_network_file(path, ground: str | None = "0") -> NetworkFile:
    """Read a network file and record what the reader assumed, with its optional ratings.

    Parameters
    ----------
    path : str or Path
        A ``.csv`` / ``.tsv`` branch table or a whitespace edge list, optionally gzip-compressed
        (``.gz``), a ``.parquet`` branch table, or an HDF5 network file written by
        ``ohmgraph convert`` (recognised by its signature, :mod:`ohmgraph.io.network_file`).
    ground : str or None, default ``"0"``
        Label of the reference (0 V) node; it must be one of the nodes. ``None`` takes the first
        node, for queries that need no reference (two-point resistances, the Kirchhoff index).

    Returns
    -------
    NetworkFile

    Raises
    ------
    InputError
        When the file is missing or unreadable, or any row is malformed; the message names the
        file, the physical line and the column (up to ten problems, then how many more).
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file")
    if not path.is_file():
        raise InputError(f"{path}: not a file")
    if is_hdf5(path):
        return NetworkFile(path, read_stored_network(path, ground))
    found = network_format(path)
    try:
        if found.name == EDGE_LIST:
            columns = _read_edge_list(path)
        elif found.name == PARQUET:
            columns = _read_parquet(path)
        else:
            columns = _read_table(path, found.format.delimiter)
    except pa.ArrowMemoryError:
        raise MemoryError from None
    except pa.ArrowException as error:
        if THREAD_LAUNCH_FAILED in str(error):      # no room for a thread's stack: memory
            raise MemoryError from None
        raise
    except (OSError, EOFError) as error:      # unreadable gzip stream or a failing disk
        raise InputError(f"{path}: cannot be read ({error})") from None
    network = _build_network(path, columns, None if ground is None else str(ground))
    findings, ratings = _reading_findings(columns), columns.ratings
    del columns
    # Arrow's allocator keeps freed pages for reuse; nothing later reads through Arrow, so
    # hand them back (about 40 % of the resident memory after reading a large table).
    pa.default_memory_pool().release_unused()
    return NetworkFile(path, network, findings, ratings)


def _reading_findings(columns: _Columns) -> tuple:
    if not columns.values_defaulted:
        return ()
    count = len(columns.from_node)
    return (Finding(INFO, "default-resistance",
                    f"the edge list gives no values (two fields per line, from to): each of "
                    f"its {count} branch(es) is read as a {DEFAULT_OHMS:g} ohm resistor"),)


def locate_lines(path, rows) -> np.ndarray:
    """Physical 1-based line numbers of the given 0-based branch rows of a text network file.

    An exact (slow) pass over the file, meant for decorating a few findings. Formats without
    lines (Parquet) give the 1-based row numbers.

    Parameters
    ----------
    path : str or Path
    rows : array_like of int
        Branch indices as numbered by :func:`read_network`.

    Returns
    -------
    ndarray of int64, same shape as ``rows``

    Raises
    ------
    InputError
        When the file cannot be read or holds fewer rows than asked for.
    """
    path = Path(path)
    rows = np.asarray(rows, dtype=np.int64)
    if rows.size == 0:
        return np.empty(rows.shape, np.int64)
    wanted = set(rows.ravel().tolist())
    last = max(wanted)
    found = {}
    file_format = network_format(path)
    if not file_format.format.lines:
        return rows + 1
    delimiter = file_format.format.delimiter
    records = _edge_records(path) if delimiter is None else _table_records(path, delimiter)
    if delimiter is not None:
        next(records, None)                     # the header
    for row, (line, _) in enumerate(records):
        if row in wanted:
            found[row] = line
        if row >= last:
            break
    missing = wanted.difference(found)
    if missing:
        raise InputError(f"{path}: has no branch row {min(missing)} (0-based)")
    return np.vectorize(found.__getitem__, otypes=[np.int64])(rows)


# ---------------------------------------------------------------------------------- fast path
# pyarrow's message when the address-space limit leaves no room for a worker thread's stack.
THREAD_LAUNCH_FAILED = "Failed to launch worker thread"


def _reader_threads() -> bool:
    """Whether pyarrow may read with its thread pool: not under an address-space limit
    (``ulimit -v``), where every worker thread reserves its stack and a malloc arena, so a
    launch can fail ("Failed to launch worker thread") long before memory runs out."""
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    return soft == resource.RLIM_INFINITY


def _read_table(path: Path, delimiter: str) -> _Columns:
    header_line, header = _read_header(path, delimiter)
    refuse_to_read(path, path.stat().st_size, path.suffix == ".gz")
    try:
        table = pa_csv.read_csv(
            path,
            read_options=pa_csv.ReadOptions(column_names=header, skip_rows=header_line,
                                            use_threads=_reader_threads()),
            parse_options=pa_csv.ParseOptions(delimiter=delimiter),
            convert_options=pa_csv.ConvertOptions(
                column_types={column: pa.string() for column in header}))
        return _convert(_take_columns(table))
    except (pa.ArrowInvalid, _Rejected):
        return _exact_table(path, delimiter, header)


def _read_parquet(path: Path) -> _Columns:
    """A Parquet branch table: every column through its text, then the table's conversions."""
    try:
        table = pq.read_table(path)
    except (pa.ArrowException, OSError) as error:
        raise InputError(f"{path}: not a readable Parquet file ({error})") from None
    header = _check_header(f"{path}: columns", [name.strip().lower() for name in
                                                table.column_names])
    try:
        text = pa.table({name: pc.fill_null(pc.cast(table.column(k), pa.string()), "")
                         for k, name in enumerate(header)})
    except pa.ArrowException as error:
        raise InputError(f"{path}: a column cannot be read as text ({error})") from None
    try:
        return _convert(_take_columns(text))
    except (pa.ArrowInvalid, _Rejected):
        return _exact_rows(path, text, header)


def _read_edge_list(path: Path) -> _Columns:
    """Whole lines through ``pyarrow.csv`` (no delimiter, no quoting), then vectorised splitting."""
    refuse_to_read(path, path.stat().st_size, path.suffix == ".gz")
    try:
        table = pa_csv.read_csv(
            path,
            read_options=pa_csv.ReadOptions(column_names=["line"], use_threads=_reader_threads()),
            parse_options=pa_csv.ParseOptions(delimiter=_UNUSED_DELIMITER, quote_char=False,
                                              double_quote=False, escape_char=False),
            convert_options=pa_csv.ConvertOptions(column_types={"line": pa.string()}))
        lines = table["line"].combine_chunks()
        if pc.any(pc.match_substring(lines, "#")).as_py():
            lines = pc.list_element(pc.split_pattern(lines, "#", max_splits=1), 0)
        fields = pc.utf8_split_whitespace(lines)
        count = pc.list_value_length(fields).to_numpy()
        counted = count[count != 0]
        width = int(counted[0]) if counted.size else len(EDGE_LIST_FIELDS)
        if width not in EDGE_LIST_FORMS or (counted.size and counted.min() != counted.max()):
            raise _Rejected
        flat = pc.list_flatten(fields)
        starts = np.arange(0, len(flat), width)
        return _convert({name: flat.take(starts + k)
                         for k, name in enumerate(EDGE_LIST_FIELDS[:width])})
    except (pa.ArrowInvalid, _Rejected):
        return _exact_edge_list(path)


def _take_columns(table: pa.Table) -> dict:
    """The table's columns by name; :func:`_convert` drops each once converted, so the whole
    text table is not kept while the arrays are built (the caller keeps no reference)."""
    return dict(zip(table.column_names, table.columns))


def _convert(table: dict) -> _Columns:
    """Vectorised conversion of string columns (by name, Arrow arrays, chunked or not; each is
    removed from ``table`` once converted); raises when any field is unusable.

    Whole columns are trimmed only where trimming can matter: endpoint labels and kinds are
    trimmed in their dictionaries (one entry per distinct text), values are parsed as they
    stand and trimmed only when that fails.
    """
    def taken(column):
        array = table.pop(column)
        return array.combine_chunks() if isinstance(array, pa.ChunkedArray) else array

    rows = len(table["from"])
    labels, from_node, to_node = _number_nodes(taken("from"), taken("to"))
    defaulted = "value" not in table
    if defaulted:
        value = np.full(rows, DEFAULT_OHMS)
    else:
        text = taken("value")
        try:
            value = pc.cast(text, pa.float64())
        except pa.ArrowInvalid:             # surrounding spaces, or no number at all
            value = pc.cast(pc.utf8_trim_whitespace(text), pa.float64())
        del text
        value = value.to_numpy(zero_copy_only=False)
    if "kind" in table:
        spellings = pa.array(list(KIND_SPELLINGS))
        encoded = pc.dictionary_encode(taken("kind"))
        position = pc.index_in(pc.utf8_upper(pc.utf8_trim_whitespace(encoded.dictionary)),
                               value_set=spellings)
        if position.null_count:
            raise _Rejected
        codes = np.asarray(list(KIND_SPELLINGS.values()), np.uint8)[position.to_numpy()]
        kind = codes[encoded.indices.to_numpy()]
        del encoded
    else:
        kind = np.full(rows, RESISTOR, np.uint8)
    names = None
    if "name" in table:
        names = taken("name")
        if names.type != pa.string():
            names = names.cast(pa.string())
        text = _text_bytes(names)
        if text.size and text.min() == 0:
            raise _Rejected
        del text                            # a view that would keep the untrimmed names
        if _may_need_trimming(names):
            names = pc.utf8_trim_whitespace(names)
    ratings = {}
    for column in RATING_COLUMNS:
        if column in table:
            text = pc.utf8_trim_whitespace(taken(column))
            text = pc.if_else(pc.equal(pc.utf8_length(text), 0), pa.scalar(None, pa.string()), text)
            ratings[column] = pc.cast(text, pa.float64()).to_numpy(zero_copy_only=False)
            given = ratings[column][~np.isnan(ratings[column])]
            if not np.all(np.isfinite(given) & (given > 0)):
                raise _Rejected
    return _Columns(labels, from_node, to_node, value, kind, names, defaulted, ratings)


def _number_nodes(from_labels: pa.Array, to_labels: pa.Array) -> tuple:
    """Node labels in order of first appearance (``from`` column, then ``to``), trimmed, and
    the ``from`` and ``to`` node of every branch; raises :class:`_Rejected` for an empty label
    or one holding a NUL character.

    The endpoints are numbered as they stand (:func:`_encode_endpoints`) and only the distinct
    labels are trimmed; two spellings that trim to one label are then merged (the merged label
    keeps the earlier first appearance, so the numbering is the one trimming every field first
    would give).
    """
    dictionary, from_node, to_node = _encode_endpoints(from_labels.cast(pa.string()),
                                                       to_labels.cast(pa.string()))
    labels = pc.utf8_trim_whitespace(dictionary)
    if not pc.all(pc.equal(labels, dictionary)).as_py():
        merged = pc.dictionary_encode(labels)
        renumber = merged.indices.to_numpy().astype(np.int64)
        from_node, to_node = renumber[from_node], renumber[to_node]
        labels = merged.dictionary
    text = _text_bytes(labels)
    if (pc.any(pc.equal(pc.binary_length(labels), 0)).as_py()
            or (text.size and text.min() == 0)):
        raise _Rejected
    return labels, from_node, to_node


def _encode_endpoints(from_labels: pa.Array, to_labels: pa.Array) -> tuple:
    """The distinct endpoint texts in order of first appearance (``from``, then ``to``) and the
    ``from`` and ``to`` number (int64) of every branch: the compiled numbering of
    :func:`ohmgraph.engine.numbering.number_labels` on the columns' own offsets and bytes (no
    concatenation, no Python strings), or :func:`_encode_endpoints_reference` for columns it
    does not take (null entries, more than 2 GiB of text together) or when the installed numba
    cannot compile it (its prefetch is built on numba's extension API)."""
    if (from_labels.null_count or to_labels.null_count
            or _text_span(from_labels) + _text_span(to_labels) >= 2**31):
        return _encode_endpoints_reference(from_labels, to_labels)
    try:
        numbered = number_labels(*_string_buffers(from_labels), *_string_buffers(to_labels))
    except NumbaError:          # a numba that cannot build the kernel's prefetch intrinsic
        return _encode_endpoints_reference(from_labels, to_labels)
    dictionary = pa.StringArray.from_buffers(len(numbered.offsets) - 1,
                                             pa.py_buffer(numbered.offsets),
                                             pa.py_buffer(numbered.text))
    return dictionary, numbered.from_index, numbered.to_index


def _encode_endpoints_reference(from_labels: pa.Array, to_labels: pa.Array) -> tuple:
    """:func:`_encode_endpoints` by ``pyarrow.compute.dictionary_encode`` of the two columns
    end to end."""
    endpoints = pa.concat_arrays([from_labels, to_labels])
    encoded = pc.dictionary_encode(endpoints)
    del endpoints
    index = encoded.indices.to_numpy()
    m = len(from_labels)
    return encoded.dictionary, index[:m].astype(np.int64), index[m:].astype(np.int64)


def _string_buffers(array: pa.Array) -> tuple:
    """The int32 offsets (``len(array) + 1``, a view) and the whole byte buffer of a string
    array (entry ``k`` is ``data[offsets[k]:offsets[k + 1]]``)."""
    if len(array) == 0:
        return np.zeros(1, np.int32), np.empty(0, np.uint8)
    _, offsets, data = array.buffers()
    return (np.frombuffer(offsets, np.int32, len(array) + 1, array.offset * 4),
            np.frombuffer(data, np.uint8) if data is not None else np.empty(0, np.uint8))


def _text_span(array: pa.Array) -> int:
    """Bytes of text the entries of a string array span."""
    offsets, _ = _string_buffers(array)
    return int(offsets[-1]) - int(offsets[0])


def _build_network(path: Path, columns: _Columns, ground: str | None) -> Network:
    """The network of numbered columns, with the reference node ``ground``."""
    m = len(columns.from_node)
    if m == 0:
        raise InputError(f"{path}: the file holds no branches")
    labels = _to_numpy_text(columns.labels)
    reference = np.flatnonzero(labels == ground) if ground is not None else np.arange(1)
    if reference.size == 0:
        raise InputError(f"{path}: reference node {ground!r} is not a node of the network; "
                         "name another with --ground")
    return Network(labels, _branch_names(columns.names, m), columns.kind, columns.from_node,
                   columns.to_node, columns.value, int(reference[0]))


def _branch_names(names: pa.Array | None, m: int) -> np.ndarray:
    """Branch names; a missing column or an empty name gives the 1-based row number."""
    def row_numbers():
        return pc.cast(pa.array(np.arange(1, m + 1)), pa.string())

    if names is None:
        return _to_numpy_text(row_numbers())
    names = names.cast(pa.string())
    empty = pc.equal(pc.binary_length(names), 0)
    if pc.any(empty).as_py():
        names = pc.if_else(empty, row_numbers(), names)
    return _to_numpy_text(names)


def _may_need_trimming(array: pa.Array) -> bool:
    """False when no entry starts or ends with a byte that can be part of whitespace (ASCII
    controls and space, 0-32, or any byte of a multi-byte character, 128-255), so that
    :func:`pyarrow.compute.utf8_trim_whitespace` would return the array unchanged."""
    offsets, data = _string_buffers(array)
    if data.size == 0:
        return False
    filled = offsets[1:] > offsets[:-1]
    edges = np.concatenate([data[offsets[:-1][filled]], data[offsets[1:][filled] - 1]])
    return bool(np.any((edges <= 32) | (edges >= 128)))


def _text_bytes(array: pa.Array) -> np.ndarray:
    """The UTF-8 bytes of a string array's entries, end to end (a view, no copy)."""
    offsets, data = _string_buffers(array)
    return data[offsets[0]:offsets[-1]]


def _to_numpy_text(array: pa.Array) -> np.ndarray:
    """A NumPy unicode array of a string array without NUL characters.

    ASCII text (the common case) is padded with NUL to one width by Arrow
    (:func:`pyarrow.compute.utf8_rpad`), so its bytes form a ``(n, width)`` block that widens to
    UCS-4 code units in one step (NumPy drops the trailing NULs); other text goes through
    Python strings, as :func:`_to_numpy_text_reference` does.
    """
    array = array.cast(pa.string())
    text = _text_bytes(array)
    if text.size and text.max() >= 128:
        return _to_numpy_text_reference(array)
    width = max(1, int(pc.max(pc.binary_length(array)).as_py() or 0))
    padded = pc.utf8_rpad(array, width, "\x00") if len(array) else array
    block = _text_bytes(padded).reshape(len(array), width)
    return block.astype(np.uint32).view(f"U{width}").reshape(len(array))


def _to_numpy_text_reference(array: pa.Array) -> np.ndarray:
    """:func:`_to_numpy_text` through Python strings (any text)."""
    return np.asarray(array.to_numpy(zero_copy_only=False), dtype=str)


# ---------------------------------------------------------------------------------- exact pass
def _text_lines(path: Path):
    """Decoded physical lines (endings kept); names the line of any invalid UTF-8."""
    opener = gzip.open if path.name.lower().endswith(".gz") else open
    try:
        with opener(path, "rb") as stream:
            for number, raw in enumerate(stream, start=1):
                try:
                    yield raw.decode("utf-8-sig" if number == 1 else "utf-8")
                except UnicodeDecodeError:
                    raise InputError(f"{path}:{number}: not valid UTF-8 text") from None
    except (OSError, EOFError) as error:
        raise InputError(f"{path}: cannot be read ({error})") from None


def _table_records(path: Path, delimiter: str):
    """``(first physical line, fields)`` of every non-blank record, the header included."""
    reader = csv.reader(_text_lines(path), delimiter=delimiter)
    end = 0
    for fields in reader:
        start, end = end + 1, reader.line_num
        if fields:
            yield start, fields


def _edge_records(path: Path):
    """``(physical line, fields)`` of every edge-list line with content outside comments."""
    for number, text in enumerate(_text_lines(path), start=1):
        fields = text.split("#", 1)[0].split()
        if fields:
            yield number, fields


def _read_header(path: Path, delimiter: str) -> tuple[int, list]:
    """Physical line number and canonical column names of a branch table's header."""
    first = next(_table_records(path, delimiter), None)
    if first is None:
        raise InputError(f"{path}: the file is empty")
    line, fields = first
    return line, _check_header(f"{path}:{line}: header", [field.strip().lower()
                                                          for field in fields])


def _check_header(where: str, header: list) -> list:
    """The canonical column names, or :class:`InputError` for unknown, repeated or missing ones."""
    unknown = [name for name in header if name not in COLUMNS]
    if unknown:
        raise InputError(f"{where} has unknown column(s) {', '.join(map(repr, unknown))} "
                         f"(expected {', '.join(COLUMNS)})")
    repeated = sorted({name for name in header if header.count(name) > 1})
    if repeated:
        raise InputError(f"{where} repeats column(s) {', '.join(map(repr, repeated))}")
    missing = [name for name in REQUIRED_COLUMNS if name not in header]
    if missing:
        raise InputError(f"{where} has no column {', '.join(map(repr, missing))} "
                         f"(found {', '.join(map(repr, header))})")
    return header


def _parse_number(text: str) -> float:
    """``float`` restricted to what the fast path accepts (no digit-group underscores)."""
    if "_" in text:
        raise ValueError(text)
    return float(text)


class _ColumnsBuilder:
    """Accumulates checked rows of the exact pass."""

    def __init__(self):
        self.from_labels, self.to_labels, self.values, self.kinds, self.names = [], [], [], [], []
        self.ratings = {column: [] for column in RATING_COLUMNS}

    def add_row(self, problems: ProblemList, line: int | str, fields: dict) -> None:
        ok = True
        for column in ("from", "to"):
            if not fields[column]:
                problems.add(line, f"column {column!r}: empty node label")
                ok = False
        for column in ("from", "to", "name"):
            if NUL in fields.get(column, ""):
                problems.add(line, f"column {column!r}: holds a NUL character (not allowed "
                                   "in labels and names)")
                ok = False
        kind = KIND_SPELLINGS.get(fields.get("kind", "").upper())
        if kind is None:
            problems.add(line, f"column 'kind': {fields['kind']!r} is not a branch kind "
                               "(R, V or I)")
            ok = False
        try:
            value = _parse_number(fields["value"]) if "value" in fields else DEFAULT_OHMS
        except ValueError:
            problems.add(line, "column 'value': " + (f"{fields['value']!r} is not a number"
                                                     if fields["value"] else "empty"))
            ok = False
        ratings = {}
        for column in RATING_COLUMNS:
            text = fields.get(column, "")
            try:
                ratings[column] = _parse_number(text) if text else np.nan
            except ValueError:
                ratings[column] = -1.0
            if not (np.isnan(ratings[column])
                    or (np.isfinite(ratings[column]) and ratings[column] > 0)):
                problems.add(line, f"column {column!r}: {text!r} is not a rating (a finite "
                                   "number greater than 0, or empty for none)")
                ok = False
        if ok:
            for column in RATING_COLUMNS:
                self.ratings[column].append(ratings[column])
            self.from_labels.append(fields["from"])
            self.to_labels.append(fields["to"])
            self.values.append(value)
            self.kinds.append(kind)
            self.names.append(fields.get("name"))

    def columns(self, named: bool, values_defaulted: bool = False, rated=()) -> _Columns:
        labels, from_node, to_node = _number_nodes(pa.array(self.from_labels, pa.string()),
                                                   pa.array(self.to_labels, pa.string()))
        return _Columns(labels, from_node, to_node, np.asarray(self.values, np.float64), np.asarray(self.kinds, np.uint8),
                        pa.array(self.names, pa.string()) if named else None, values_defaulted,
                        {column: np.asarray(self.ratings[column], np.float64) for column in rated})


def _exact_table(path: Path, delimiter: str, header: list) -> _Columns:
    problems, rows = ProblemList(path), _ColumnsBuilder()
    records = _table_records(path, delimiter)
    next(records)                               # the header
    for line, fields in records:
        if len(fields) != len(header):
            problems.add(line, f"{len(fields)} field(s), expected {len(header)} "
                               f"({', '.join(header)})")
            continue
        rows.add_row(problems, line, {name: field.strip() for name, field in zip(header, fields)})
    problems.raise_if_any()
    return rows.columns(named="name" in header,
                        rated=[column for column in RATING_COLUMNS if column in header])


def _exact_rows(path: Path, text: pa.Table, header: list) -> _Columns:
    """Exact pass over a table without lines (Parquet): problems are named by 1-based row."""
    problems, rows = ProblemList(path), _ColumnsBuilder()
    for row, fields in enumerate(text.to_pylist(), start=1):
        rows.add_row(problems, f"row {row}", {name: fields[name].strip() for name in header})
    problems.raise_if_any()
    return rows.columns(named="name" in header,
                        rated=[column for column in RATING_COLUMNS if column in header])


def _exact_edge_list(path: Path) -> _Columns:
    """Every line must have the form of the first branch line: ``from to ohms`` or ``from to``."""
    problems, rows = ProblemList(path), _ColumnsBuilder()
    width = first = None
    for line, fields in _edge_records(path):
        if width is None and len(fields) in EDGE_LIST_FORMS:
            width, first = len(fields), line
        if width is None:
            problems.add(line, f"{len(fields)} field(s), expected 3 (from to ohms) or 2 (from to)")
            continue
        if len(fields) != width:
            problems.add(line, f"{len(fields)} field(s), expected {width} "
                               f"({EDGE_LIST_FORMS[width]}) like line {first}; an edge list "
                               "gives every line a value or none")
            continue
        rows.add_row(problems, line, dict(zip(EDGE_LIST_FIELDS, fields)))
    problems.raise_if_any()
    return rows.columns(named=False, values_defaulted=width == 2)


__all__ = ["read_network", "read_network_file", "NetworkFile", "locate_lines", "COLUMNS",
           "REQUIRED_COLUMNS", "RATING_COLUMNS"]
