"""Progress of long commands on standard error (tqdm), shown only when it is a terminal."""

from __future__ import annotations

import sys

from tqdm import tqdm


def steps(total: int, what: str) -> tqdm:
    """A progress bar of ``total`` steps, silent unless standard error is a terminal."""
    return tqdm(total=total, desc=what, unit="step", file=sys.stderr,
                disable=not sys.stderr.isatty(), leave=False)
