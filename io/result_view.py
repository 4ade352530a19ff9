"""Text view of stored results of the reading commands (HDF5 groups, CSV tables with sidecar)."""

from __future__ import annotations

import numpy as np
import pandas as pd

SHOWN_ROWS = 10
PROVENANCE_KEYS = ("tool_version", "created", "result")


def _value(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray):
        items = [_value(v) for v in value.tolist()]
        return "[" + ", ".join(items) + "]"
    if isinstance(value, (float, np.floating)):
        return f"{value:.6g}"
    return str(value)


def provenance_line(attrs: dict, inputs: dict) -> str:
    """``written TIME by ohmgraph VERSION from ROLE FILE (sha256 …), ...``."""
    parts = [f"{role} {entry['file']} (sha256 {entry['sha256'][:16]}…)"
             for role, entry in inputs.items()]
    return (f"written {_value(attrs.get('created', '?'))} by ohmgraph "
            f"{_value(attrs.get('tool_version', '?'))}"
            + (" from " + ", ".join(parts) if parts else ""))


def inputs_from_attrs(attrs: dict) -> dict:
    """``{role: {"file", "sha256"}}`` from the ``ROLE_file``/``ROLE_sha256`` attributes."""
    roles = {}
    for key, value in attrs.items():
        if key.endswith("_file") and f"{key[:-5]}_sha256" in attrs:
            roles[key[:-5]] = {"file": _value(value), "sha256": _value(attrs[f"{key[:-5]}_sha256"])}
    return roles


def format_result(name: str, columns: dict, attrs: dict, inputs: dict) -> str:
    """One result: provenance, its summary numbers and the first rows of its table."""
    lines = [f"/{name}: " + provenance_line(attrs, inputs)]
    hidden = set(PROVENANCE_KEYS) | {f"{role}_file" for role in inputs} | {
        f"{role}_sha256" for role in inputs}
    for key, value in attrs.items():
        if key not in hidden:
            lines.append(f"  {key}: {_value(value)}")
    lengths = {key: np.shape(values)[0] for key, values in columns.items()
               if np.ndim(values) == 1}
    rows = max(lengths.values(), default=0)
    table = {key: columns[key] for key, length in lengths.items() if length == rows}
    if table:
        frame = pd.DataFrame(table).head(SHOWN_ROWS)
        lines.append(f"  table: {rows} row(s), columns {', '.join(table)}")
        lines += ["  " + line for line in frame.to_string(index=False).splitlines()]
        if rows > SHOWN_ROWS:
            lines.append(f"  ... {rows - SHOWN_ROWS} more row(s)")
    return "\n".join(lines)


__all__ = ["format_result", "provenance_line", "inputs_from_attrs"]
