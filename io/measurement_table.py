"""Read a measurement table, instrument accuracies and a resistor tolerance file.

Measurement table (CSV, header required, columns in any order, ``#`` lines and blank lines
ignored)::

    kind,a,b,value,accuracy
    V,TP3,,2.4871,0.05%+1mV
    V,TP3,TP4,0.1523,
    R,J1,J2,99.87,0.2%+0.05ohm
    I,R17,,0.01243,1%+10uA

The first row reads node ``TP3`` against the reference, the second ``TP3`` against ``TP4`` with
the global accuracy, the third the two-point resistance between ``J1`` and ``J2`` (sources
zeroed), the fourth the current of the branch named ``R17``.

Values and absolute accuracies may carry a unit (``V``, ``A``, ``ohm``/``Ω``, with a prefix
``p n u µ m k M G``) that must suit the reading's kind; without one they are in volts, amperes or
ohms. An accuracy is ``±(P% of the reading + X)``, written ``P%``, ``X`` or ``P%+X``; ``ppm``
is accepted for the relative part. A global accuracy (``--accuracy``, repeatable) with a unit
applies to readings of that kind; one without a unit to every kind. A row's own accuracy wins.

Tolerance file (CSV): ``branch,tolerance`` with the tolerance in percent (``1%`` or ``1``,
below 100%).
Every problem is reported as ``FILE:LINE: column 'x': message``.
"""

from __future__ import annotations

import csv
import gzip
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ohmgraph.engine.readings.model import READING_KINDS, Readings
from ohmgraph.engine.network import RESISTOR, Network
from ohmgraph.io.errors import InputError, ProblemList

TABLE_COLUMNS = ("kind", "a", "b", "value", "accuracy")
REQUIRED_COLUMNS = ("kind", "a", "b", "value")
TOLERANCE_COLUMNS = ("branch", "tolerance")
TEST_POINT_COLUMNS = ("node",)
PREFIXES = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "m": 1e-3, "": 1.0,
            "k": 1e3, "M": 1e6, "G": 1e9}
UNIT_KIND = {"v": "V", "a": "I", "ohm": "R", "ohms": "R", "Ω": "R"}
UNIT_NAME = {"V": "V", "I": "A", "R": "ohm"}
_QUANTITY = re.compile(
    r"^\s*(?P<number>[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?|[+-]?inf)\s*"
    r"(?P<unit>[^\s\d.+-]*)\s*$")
_UNIT = re.compile(r"^(?P<prefix>[pnuµμmkMG]?)(?P<base>ohms?|Ohms?|OHMS?|Ω|V|v|A|a)$")


@dataclass(frozen=True)
class Quantity:
    """A number in base units and the reading kind its unit implies (None without a unit)."""

    value: float
    kind: str | None


@dataclass(frozen=True)
class Accuracy:
    """``±(percent of the reading + absolute)``; ``kind`` is the reading kind of its unit."""

    percent: float
    absolute: float
    kind: str | None

    def band(self, measured: np.ndarray) -> np.ndarray:
        """Allowed deviation for the given readings (the absolute part alone for an infinite
        reading, whose percentage would allow any value)."""
        finite = np.where(np.isfinite(measured), measured, 0.0)
        return self.percent / 100.0 * np.abs(finite) + self.absolute


def parse_quantity(text: str) -> Quantity:
    """Parse ``12.5``, ``120mV``, ``4.7 kohm``, ``3uA``, ``inf``.

    Raises
    ------
    ValueError
        With a short reason.
    """
    match = _QUANTITY.match(text)
    if match is None:
        raise ValueError(f"{text.strip()!r} is not a number (with an optional unit)")
    value = float(match["number"])
    unit = match["unit"]
    if not unit:
        return Quantity(value, None)
    parts = _UNIT.match(unit)
    if parts is None:
        raise ValueError(f"unknown unit {unit!r} (use V, A or ohm with p, n, u, m, k, M, G)")
    base = parts["base"].lower() if parts["base"] != "Ω" else "Ω"
    return Quantity(value * PREFIXES[parts["prefix"]], UNIT_KIND[base])


def parse_accuracy(text: str) -> Accuracy:
    """Parse ``0.5%+1mV``, ``1%``, ``2mV``, ``100ppm + 0.01ohm``.

    Raises
    ------
    ValueError
        On a malformed or negative accuracy.
    """
    percent, absolute, kind = 0.0, 0.0, None
    seen_relative = seen_absolute = False
    terms = [term.strip() for term in text.split("+")]
    if not text.strip() or any(not term for term in terms):
        raise ValueError(f"{text.strip()!r} is not an accuracy (write e.g. 0.5%+1mV)")
    for term in terms:
        relative = re.fullmatch(r"(.+?)\s*(%|ppm)", term)
        if relative:
            if seen_relative:
                raise ValueError(f"{text.strip()!r} has more than one relative term")
            seen_relative = True
            try:
                number = float(relative.group(1))
            except ValueError:
                raise ValueError(f"{term!r} is not a percentage") from None
            percent = number if relative.group(2) == "%" else number / 1e4
        else:
            if seen_absolute:
                raise ValueError(f"{text.strip()!r} has more than one absolute term")
            seen_absolute = True
            quantity = parse_quantity(term)
            absolute, kind = quantity.value, quantity.kind
    if not (np.isfinite(percent) and np.isfinite(absolute)):
        raise ValueError(f"{text.strip()!r} is not a finite accuracy")
    if percent < 0 or absolute < 0:
        raise ValueError(f"accuracy {text.strip()!r} is negative")
    return Accuracy(percent, absolute, kind)


def accuracy_rules(specs) -> dict:
    """Global accuracies by reading kind (``None``: every kind without its own rule).

    Raises
    ------
    InputError
        On a malformed spec or two specs for the same kind.
    """
    rules = {}
    for spec in specs or []:
        try:
            accuracy = parse_accuracy(spec)
        except ValueError as error:
            raise InputError(f"--accuracy: {error}") from None
        if accuracy.kind in rules:
            target = "every kind" if accuracy.kind is None else f"{accuracy.kind} readings"
            raise InputError(f"--accuracy: two accuracies given for {target}")
        rules[accuracy.kind] = accuracy
    return rules


def parse_percent(text: str, what: str = "tolerance") -> float:
    """A percentage from 0 up to (not including) 100 (``1%`` or ``1``) as a fraction.

    At 100% or more a resistor within tolerance could reach 0 ohm or a negative value.
    """
    number = text.strip().removesuffix("%").strip()
    try:
        value = float(number)
    except ValueError:
        raise ValueError(f"{text.strip()!r} is not a percentage") from None
    if not np.isfinite(value) or value < 0:
        raise ValueError(f"{what} {text.strip()!r} must be a non-negative percentage")
    if value >= 100:
        raise ValueError(f"{what} {text.strip()!r} must be below 100% (a resistor within it "
                         "could reach 0 ohm or less)")
    return value / 100.0


def _records(path: Path):
    """``(physical line, fields)`` of every CSV record that is not blank or a ``#`` comment."""
    opener = gzip.open if path.name.lower().endswith(".gz") else open
    try:
        with opener(path, "rt", encoding="utf-8-sig", newline="") as stream:
            reader = csv.reader(stream)
            end = 0
            for fields in reader:
                start, end = end + 1, reader.line_num
                if not fields or not "".join(fields).strip():
                    continue
                if fields[0].lstrip().startswith("#"):
                    continue
                yield start, [field.strip() for field in fields]
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except (OSError, EOFError, UnicodeDecodeError, csv.Error) as error:
        raise InputError(f"{path}: cannot be read ({error})") from None


def _header(path: Path, records, columns, required) -> tuple[int, list]:
    first = next(records, None)
    if first is None:
        raise InputError(f"{path}: the file is empty")
    line, fields = first
    header = [field.lower() for field in fields]
    unknown = [name for name in header if name not in columns]
    if unknown:
        raise InputError(f"{path}:{line}: header has unknown column(s) "
                         f"{', '.join(map(repr, unknown))} (expected {', '.join(columns)})")
    missing = [name for name in required if name not in header]
    repeated = sorted({name for name in header if header.count(name) > 1})
    if missing or repeated:
        problem = (f"has no column {', '.join(map(repr, missing))}" if missing
                   else f"repeats column(s) {', '.join(map(repr, repeated))}")
        raise InputError(f"{path}:{line}: header {problem}")
    return line, header


@dataclass(frozen=True)
class MeasurementTable:
    """A checked measurement table.

    Attributes
    ----------
    path : Path
    readings : Readings
        Resolved against the network, with measured values and bands in base units.
    lines : ndarray of int64
        Physical line of every reading.
    a, b : ndarray of str
        The labels as written (``b`` empty for the reference or a current reading).
    accuracy : list of str
        The accuracy that applied to each reading, as text.
    """

    path: Path
    readings: Readings
    lines: np.ndarray
    a: np.ndarray
    b: np.ndarray
    accuracy: list


def _describe(accuracy: Accuracy, kind: str) -> str:
    parts = []
    if accuracy.percent:
        parts.append(f"{accuracy.percent:g}%")
    if accuracy.absolute or not parts:
        parts.append(f"{accuracy.absolute:g}{UNIT_NAME[kind]}")
    return "+".join(parts)


class _RowReader:
    """Checks one measurement row at a time against the network."""

    def __init__(self, net: Network, rules: dict, problems: ProblemList, values: bool = True):
        self.net = net
        self.rules = rules
        self.problems = problems
        self.values = values
        self.names = {}
        for index, name in enumerate(net.branch_names.tolist()):
            self.names.setdefault(name, []).append(index)

    def node(self, line: int, column: str, label: str) -> int | None:
        index = self.net.label_index.get(label)
        if index is None:
            self.problems.add(line, f"column {column!r}: unknown node {label!r}")
        return index

    def read(self, line: int, row: dict):
        """Return ``(kind, a, b, branch, measured, accuracy)`` or None after a problem."""
        kind = row["kind"].upper()
        if kind not in READING_KINDS:
            self.problems.add(line, f"column 'kind': {row['kind']!r} is not V, R or I")
            return None
        a, b, branch = -1, -1, -1
        if kind == "I":
            matches = self.names.get(row["a"], [])
            if len(matches) != 1:
                problem = "no branch is" if not matches else f"{len(matches)} branches are"
                self.problems.add(line, f"column 'a': {problem} named {row['a']!r}")
                return None
            if row["b"]:
                self.problems.add(line, "column 'b': must be empty for a current reading")
                return None
            branch = matches[0]
        else:
            if not row["a"]:
                self.problems.add(line, "column 'a': a node label is required")
                return None
            if kind == "R" and not row["b"]:
                self.problems.add(line, "column 'b': a resistance reading needs two nodes")
                return None
            a = self.node(line, "a", row["a"])
            b = self.net.reference if not row["b"] else self.node(line, "b", row["b"])
            if a is None or b is None:
                return None
        if not self.values:
            return kind, a, b, branch, np.nan, None
        measured = self._quantity(line, "value", row["value"], kind)
        accuracy = self._accuracy(line, row.get("accuracy", ""), kind)
        if measured is None or accuracy is None:
            return None
        return kind, a, b, branch, measured, accuracy

    def _quantity(self, line: int, column: str, text: str, kind: str) -> float | None:
        try:
            quantity = parse_quantity(text)
        except ValueError as error:
            self.problems.add(line, f"column {column!r}: {error}")
            return None
        if quantity.kind not in (None, kind):
            self.problems.add(line, f"column {column!r}: unit of {text!r} does not suit a "
                                    f"{kind} reading (expected {UNIT_NAME[kind]})")
            return None
        if not np.isfinite(quantity.value) and not (kind == "R" and quantity.value > 0):
            self.problems.add(line, f"column {column!r}: {text!r} is not a finite number (only "
                                    "a resistance reading may be inf, an open circuit)")
            return None
        return quantity.value

    def _accuracy(self, line: int, text: str, kind: str) -> Accuracy | None:
        if text:
            try:
                accuracy = parse_accuracy(text)
            except ValueError as error:
                self.problems.add(line, f"column 'accuracy': {error}")
                return None
        else:
            accuracy = self.rules.get(kind, self.rules.get(None))
            if accuracy is None:
                self.problems.add(line, "column 'accuracy': empty, and no --accuracy applies "
                                        f"to {kind} readings")
                return None
        if accuracy.kind not in (None, kind):
            self.problems.add(line, f"column 'accuracy': unit of {text!r} does not suit a "
                                    f"{kind} reading (expected {UNIT_NAME[kind]})")
            return None
        return accuracy


def read_measurements(path, net: Network, rules: dict | None = None, *,
                      values: bool = True) -> MeasurementTable:
    """Read and check a measurement table against a network.

    Parameters
    ----------
    path : str or Path
    net : Network
    rules : dict, optional
        Global accuracies from :func:`accuracy_rules`.
    values : bool
        False to read only which quantities are observed (``kind``, ``a``, ``b``): the
        ``value`` and ``accuracy`` columns are then optional and ignored, and the readings'
        measured values and bands are NaN.

    Raises
    ------
    InputError
        Naming file, line and column of every problem (the first few, and a count).
    """
    path = Path(path)
    records = _records(path)
    _, header = _header(path, records, TABLE_COLUMNS,
                        REQUIRED_COLUMNS if values else REQUIRED_COLUMNS[:3])
    problems = ProblemList(path)
    checker = _RowReader(net, rules or {}, problems, values)
    rows, lines, labels_a, labels_b, texts = [], [], [], [], []
    for line, fields in records:
        if len(fields) > len(header):
            problems.add(line, f"{len(fields)} fields, the header has {len(header)}")
            continue
        row = dict(zip(header, fields + [""] * (len(header) - len(fields))))
        parsed = checker.read(line, row)
        if parsed is None:
            continue
        rows.append(parsed)
        lines.append(line)
        labels_a.append(row["a"])
        labels_b.append(row["b"])
        texts.append("" if parsed[5] is None else _describe(parsed[5], parsed[0]))
    problems.raise_if_any()
    if not rows:
        raise InputError(f"{path}: no readings")
    kind, a, b, branch, measured, accuracy = zip(*rows)
    measured = np.array(measured, np.float64)
    band = np.array([np.nan if acc is None else acc.band(value)
                     for acc, value in zip(accuracy, measured)])
    readings = Readings(np.array(kind), a, b, branch, measured, band)
    return MeasurementTable(path, readings, np.array(lines, np.int64), np.array(labels_a),
                            np.array(labels_b), texts)


def read_tolerances(path, net: Network, default: float = 0.0) -> np.ndarray:
    """Relative tolerance of every branch from a ``branch,tolerance`` file.

    Branches not listed get ``default`` (a fraction). A name used by several branches sets all
    of them.

    Raises
    ------
    InputError
        On an unknown branch, a branch that is not a resistor, a malformed or negative tolerance.
    """
    path = Path(path)
    tolerance = np.full(net.n_branches, float(default))
    records = _records(path)
    _, header = _header(path, records, TOLERANCE_COLUMNS, TOLERANCE_COLUMNS)
    problems = ProblemList(path)
    names = {}
    for index, name in enumerate(net.branch_names.tolist()):
        names.setdefault(name, []).append(index)
    for line, fields in records:
        if len(fields) != len(header):
            problems.add(line, f"{len(fields)} fields, the header has {len(header)}")
            continue
        row = dict(zip(header, fields))
        matches = names.get(row["branch"], [])
        if not matches:
            problems.add(line, f"column 'branch': no branch is named {row['branch']!r}")
            continue
        if np.any(net.kind[matches] != RESISTOR):
            problems.add(line, f"column 'branch': {row['branch']!r} is not a resistor")
            continue
        try:
            tolerance[matches] = parse_percent(row["tolerance"])
        except ValueError as error:
            problems.add(line, f"column 'tolerance': {error}")
    problems.raise_if_any()
    return tolerance


def read_test_points(path, net: Network) -> tuple[np.ndarray, np.ndarray]:
    """Node indices and labels of a test-point file (CSV with the column ``node``).

    Raises
    ------
    InputError
        On an unknown or repeated node, or a file without test points.
    """
    path = Path(path)
    records = _records(path)
    _, header = _header(path, records, TEST_POINT_COLUMNS, TEST_POINT_COLUMNS)
    problems = ProblemList(path)
    nodes, labels, seen = [], [], set()
    for line, fields in records:
        if len(fields) != len(header):
            problems.add(line, f"{len(fields)} fields, the header has {len(header)}")
            continue
        label = fields[0]
        index = net.label_index.get(label)
        if index is None:
            problems.add(line, f"column 'node': unknown node {label!r}")
        elif label in seen:
            problems.add(line, f"column 'node': {label!r} is listed twice")
        else:
            seen.add(label)
            nodes.append(index)
            labels.append(label)
    problems.raise_if_any()
    if not nodes:
        raise InputError(f"{path}: no test points")
    return np.array(nodes, np.int64), np.array(labels)


__all__ = ["read_measurements", "read_tolerances", "read_test_points", "MeasurementTable",
           "accuracy_rules",
           "parse_accuracy", "parse_quantity", "parse_percent", "Accuracy", "Quantity"]
