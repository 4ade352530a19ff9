"""Provenance of a result: which tool wrote it, when, from which input files.

HDF5 results carry it as attributes (:mod:`ohmgraph.io.result_store`); a CSV result (every
table :func:`ohmgraph.io.result_table.write_result_table` writes) carries
it in a sidecar ``OUT.csv.provenance.json`` written beside the table (spreadsheets open the CSV
unchanged), and the HTML summary prints it.

Sidecar layout (JSON object): ``tool_version``, ``created`` (ISO 8601 UTC), ``result`` (the
result's name: ``comparison``, ``diagnosis``, ``tolerance``, ``readings_plan``), ``table`` (the
CSV file's name), ``inputs`` (role → ``{"file", "sha256"}``) and ``summary`` (the numbers the
HDF5 group would hold as attributes).
"""

from __future__ import annotations

import json
from datetime import datetime, timezone
from pathlib import Path

from ohmgraph.io.jsonout import jsonable
from ohmgraph.io.store import file_sha256, tool_version

SIDECAR_SUFFIX = ".provenance.json"


def provenance_record(result: str, sources: dict, summary: dict | None = None,
                      command: str | None = None, options: dict | None = None) -> dict:
    """The provenance of one result: tool, time, command and options, inputs by name and
    SHA-256, summary."""
    record = {
        "tool_version": tool_version(),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "result": result,
        "inputs": {role: {"file": Path(path).name, "sha256": file_sha256(path)}
                   for role, path in (sources or {}).items()},
        "summary": jsonable(summary or {}),
    }
    if command is not None:
        record["command"] = command
    if options is not None:
        record["command_options"] = jsonable(options)
    return record


def sidecar_path(table) -> Path:
    """``OUT.csv`` → ``OUT.csv.provenance.json``."""
    table = Path(table)
    return table.with_name(table.name + SIDECAR_SUFFIX)


def sidecar_text(record: dict, table) -> str:
    return json.dumps({**record, "table": Path(table).name}, indent=2, ensure_ascii=False) + "\n"


def read_sidecar(table) -> dict | None:
    """The sidecar of a CSV result, or None when there is none (or it is not JSON)."""
    path = sidecar_path(table)
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


__all__ = ["provenance_record", "sidecar_path", "sidecar_text", "read_sidecar",
           "SIDECAR_SUFFIX"]
