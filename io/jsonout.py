"""JSON output of plain-data results (NumPy scalars and arrays included)."""

from __future__ import annotations

import json
import math

import numpy as np


def jsonable(value):
    """Convert NumPy types (and non-finite floats, as strings) into JSON-ready Python values."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return jsonable(value.tolist())
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)
    return value


def dumps(value) -> str:
    """Indented JSON text of ``value``."""
    return json.dumps(jsonable(value), indent=2)
