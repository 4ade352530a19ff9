"""Read a change file: a branch table whose rows change a network.

Columns as in a branch table (``name``, ``kind``, ``from``, ``to``, ``value``, ``max_current``,
``max_power``); ``name`` and ``value`` are required. A row whose ``name`` is a branch of the
network sets its value (``inf`` opens a resistor, removing it) and any rating it gives; ``kind``,
``from`` and ``to``, when given, must match the branch. A row with a new name adds a branch and
needs ``from`` and ``to`` (``kind`` defaults to ``R``). Every problem is reported as
``FILE:LINE: column ...``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ohmgraph.engine.checks import CheckReport
from ohmgraph.engine.contraction import contract
from ohmgraph.engine.network import KIND_CODE, KIND_LETTERS, RESISTOR, Network
from ohmgraph.engine.variant import BranchChanges, changed_report, values_only
from ohmgraph.io.errors import InputError, ProblemList
from ohmgraph.io.reader import COLUMNS, RATING_COLUMNS
from ohmgraph.io.store import encode_strings
from ohmgraph.io.text_table import read_text_table


@dataclass(frozen=True)
class ChangeFile:
    """A change file read against a network.

    Attributes
    ----------
    changes : BranchChanges
    ratings : dict
        ``{"max_current": (branch indices, values), ...}`` for ratings set on existing branches,
        and ``{"new:max_current": values}`` for the added branches (NaN = none).
    """

    changes: BranchChanges
    ratings: dict

    def changed_ratings(self, net: Network, ratings: dict) -> dict:
        """The rating arrays of the changed network, from the base network's ``ratings``."""
        keep = np.ones(net.n_branches, bool)
        keep[self.changes.opened] = False
        columns = set(ratings) | {c for c in RATING_COLUMNS if c in self.ratings
                                  or f"new:{c}" in self.ratings}
        out = {}
        for column in sorted(columns):
            values = ratings.get(column, np.full(net.n_branches, np.nan)).copy()
            if column in self.ratings:
                index, given = self.ratings[column]
                values[index] = given
            added = self.ratings.get(f"new:{column}",
                                     np.full(self.changes.new_names.size, np.nan))
            out[column] = np.concatenate([values[keep], added])
        return out


def _number(text: str) -> float | None:
    try:
        return float(text) if "_" not in text else None
    except ValueError:
        return None


def read_changes(path, net: Network) -> ChangeFile:
    """Read a change file for ``net``.

    Raises
    ------
    InputError
        When the file cannot be read, a column is unknown, ``name`` or ``value`` is missing, a
        row names a branch that does not exist without ``from`` and ``to``, opens a branch that
        is not a resistor, contradicts the branch it names, or repeats a name.
    """
    import pandas as pd           # imported on use: keeps start-up short
    path = Path(path)
    table = read_text_table(path, "change file", COLUMNS, required=("name", "value"))
    for column in COLUMNS:
        if column not in table.columns:
            table[column] = ""
    table["line"] = np.arange(len(table)) + 2
    table = table[(table[list(COLUMNS)] != "").any(axis=1)]

    problems = ProblemList(path)
    # First branch of each named row: look the network's names up among the file's few names
    # (Arrow's hash lookup: about 2.5x faster than pandas' at 10^6 names, which it would first
    # turn into Python strings), both sides as UTF-8 bytes: Arrow takes 10^6 fixed-width byte
    # strings 3 to 9 times faster than NumPy's UCS-4 text (0.02 s against 0.06-0.15 s).
    wanted = pd.Index(table["name"].unique())
    hit = pc.index_in(pa.array(encode_strings(net.branch_names), type=pa.binary()),
                      value_set=pa.array(encode_strings(wanted.to_numpy(str)), type=pa.binary()))
    hit = hit.fill_null(-1).to_numpy().astype(np.int64)
    found = np.flatnonzero(hit >= 0)
    first = np.full(len(wanted), -1, np.int64)
    first[hit[found][::-1]] = found[::-1]                  # the last write, the first branch
    table["branch"] = first[wanted.get_indexer(table["name"])]
    labels = net.node_labels
    # The common row, a finite value for a branch named once and nothing else, in one step.
    numbers = pd.to_numeric(table["value"], errors="coerce").to_numpy(np.float64)
    simple = ((table["branch"].to_numpy() >= 0) & np.isfinite(numbers)
              & ~table["name"].duplicated(keep=False).to_numpy()
              & (table[["kind", "from", "to", *RATING_COLUMNS]] == "").all(axis=1).to_numpy())
    index = table["branch"].to_numpy()[simple].tolist()
    value = numbers[simple].tolist()
    ratings = {column: ([], []) for column in RATING_COLUMNS}
    new = {"name": [], "kind": [], "from": [], "to": [], "value": [],
           **{f"new:{c}": [] for c in RATING_COLUMNS}}
    seen = set()
    for row in table[~simple].to_dict("records"):
        line, name = row["line"], row["name"]
        if not name:
            problems.add(line, "column 'name': empty (a change names the branch it changes)")
            continue
        if name in seen:
            problems.add(line, f"column 'name': branch {name!r} is changed twice")
            continue
        seen.add(name)
        number = _number(row["value"])
        if number is None or np.isnan(number):
            problems.add(line, f"column 'value': {row['value']!r} is not a number")
            continue
        given = {}
        for column in RATING_COLUMNS:
            rating = _number(row[column]) if row[column] else np.nan
            if rating is None or not (np.isnan(rating) or (np.isfinite(rating) and rating > 0)):
                problems.add(line, f"column {column!r}: {row[column]!r} is not a rating (a "
                                   "finite number greater than 0, or empty for none)")
                rating = None
            given[column] = rating
        if any(r is None for r in given.values()):
            continue
        kind = row["kind"].upper()
        if kind and kind not in KIND_CODE:
            problems.add(line, f"column 'kind': {row['kind']!r} is not a branch kind (R, V or I)")
            continue
        k = int(row["branch"])
        if k < 0:
            if not (row["from"] and row["to"]):
                problems.add(line, f"column 'name': no branch {name!r} in the network; a new "
                                   "branch needs 'from' and 'to'")
                continue
            if np.isinf(number):
                problems.add(line, f"column 'value': branch {name!r} does not exist, so it "
                                   "cannot be opened")
                continue
            for key, item in (("name", name), ("kind", KIND_CODE[kind or "R"]),
                              ("from", row["from"]), ("to", row["to"]), ("value", number)):
                new[key].append(item)
            for column in RATING_COLUMNS:
                new[f"new:{column}"].append(given[column])
            continue
        letter = KIND_LETTERS[net.kind[k]]
        if kind and kind != letter:
            problems.add(line, f"column 'kind': branch {name!r} is {letter} in the network, "
                               f"not {kind}")
            continue
        ends = (str(labels[net.from_node[k]]), str(labels[net.to_node[k]]))
        if (row["from"] and row["from"] != ends[0]) or (row["to"] and row["to"] != ends[1]):
            problems.add(line, f"columns 'from', 'to': branch {name!r} joins {ends[0]} -> "
                               f"{ends[1]} in the network")
            continue
        if np.isinf(number) and net.kind[k] != RESISTOR:
            problems.add(line, f"column 'value': {letter} source {name!r} cannot be opened "
                               "(only resistors take inf)")
            continue
        index.append(k)
        value.append(number)
        for column in RATING_COLUMNS:
            if not np.isnan(given[column]):
                ratings[column][0].append(k)
                ratings[column][1].append(given[column])
    problems.raise_if_any()
    if not (seen or index):
        raise InputError(f"{path}: the file holds no changes")
    changes = BranchChanges(
        np.asarray(index, np.int64), np.asarray(value, np.float64),
        np.asarray(new["name"], dtype=str), np.asarray(new["kind"], np.uint8),
        np.asarray(new["from"], dtype=str), np.asarray(new["to"], dtype=str),
        np.asarray(new["value"], np.float64))
    rating_changes = {column: (np.asarray(i, np.int64), np.asarray(v, np.float64))
                      for column, (i, v) in ratings.items() if i}
    for column in RATING_COLUMNS:
        values = np.asarray(new[f"new:{column}"], np.float64)
        if np.any(np.isfinite(values)):
            rating_changes[f"new:{column}"] = values
    return ChangeFile(changes, rating_changes)


CHANGES_NOTE = "changes from "


def change_note(path, changes: BranchChanges) -> str:
    """One line saying what a change file did (stored in the solution's notes, which tells
    later runs that the stored network is not the input file's)."""
    return (f"{CHANGES_NOTE}{path}: {changes.index.size - changes.opened.size:,} value(s) set, "
            f"{changes.opened.size:,} resistor(s) opened, {changes.new_names.size:,} "
            "branch(es) added")


def check_from_base(findings: list, summary: dict, net: Network, changes: BranchChanges,
                    changed: Network) -> CheckReport | None:
    """The changed network's check report from the check ``findings`` and ``summary`` stored
    with the solution of ``net`` (the very network, read from that file), without a new check,
    when the changes only set values (:func:`ohmgraph.engine.variant.changed_report` says why
    nothing else can change); None otherwise, when the base pinned floating islands, or when
    the file holds no check summary (written before ``/checks`` was stored)."""
    if (not summary or any(f.code == "pinned-island" for f in findings)
            or not values_only(net, changes)):
        return None
    stored = CheckReport(list(findings), dict(summary), contract(changed), np.empty(0, np.int64))
    return changed_report(stored, net, changes, changed)
