"""Atomic output files: written under a temporary name beside the target, renamed when complete.

A reader never sees a half-written file, and a failure leaves no file at all.
"""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

from ohmgraph.io.errors import OutputRefused


def refuse_existing(path, force: bool) -> Path:
    """Raise :class:`OutputRefused` if ``path`` exists and ``force`` is false."""
    path = Path(path)
    if path.exists() and not force:
        raise OutputRefused(f"{path}: already exists (use --force to overwrite)")
    if not path.parent.exists():
        raise OutputRefused(f"{path}: folder {path.parent} does not exist")
    return path


@contextlib.contextmanager
def atomic_output(path, force: bool = False):
    """Yield a temporary path beside ``path``; rename it onto ``path`` only if the block succeeds.

    Raises
    ------
    OutputRefused
        If ``path`` exists and ``force`` is false, or its folder does not exist.
    """
    path = refuse_existing(path, force)
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        yield temporary
        os.replace(temporary, path)
    finally:
        if temporary.exists():
            temporary.unlink()
