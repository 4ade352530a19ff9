"""Atomic output files: written under a temporary name beside the target, renamed when complete.

A reader never sees a half-written file, and a failure leaves no file at all.
"""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

from ohmgraph.io.errors import InputError, OutputRefused


def refuse_existing(path, force: bool) -> Path:
    """Raise :class:`OutputRefused` if ``path`` exists and ``force`` is false, or is a folder."""
    path = Path(path)
    try:
        if path.is_dir():
            raise OutputRefused(f"{path}: is a folder, not a file")
        if path.exists() and not force:
            raise OutputRefused(f"{path}: already exists (use --force to overwrite)")
        if not path.parent.exists():
            raise OutputRefused(f"{path}: folder {path.parent} does not exist")
    except OSError as error:                    # for example a name longer than allowed
        raise OutputRefused(f"{path}: cannot be written ({error.strerror or error})") from None
    return path


def refuse_input(output, inputs) -> None:
    """Raise :class:`InputError` if ``output`` is one of the ``inputs`` (even with ``--force``).

    Writing a result over the file it was computed from would destroy the input.
    """
    output = Path(output)
    try:
        if not output.is_file():
            return
        same = [source for source in inputs
                if source is not None and Path(source).is_file()
                and os.path.samefile(output, source)]
    except OSError:           # an unusable name: reported when the file is read or written
        return
    if same:
        raise InputError(f"{output}: is also the input file {same[0]}; name another output file")


@contextlib.contextmanager
def atomic_output(path, force: bool = False):
    """Yield a temporary path beside ``path``; rename it onto ``path`` only if the block succeeds.

    Raises
    ------
    OutputRefused
        If ``path`` exists and ``force`` is false, is a folder, its folder does not exist, or
        the file cannot be written (an ``OSError`` inside the block or on the final rename).
    """
    path = refuse_existing(path, force)
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        yield temporary
        os.replace(temporary, path)
    except OSError as error:
        raise OutputRefused(f"{path}: cannot be written ({error.strerror or error})") from None
    finally:
        if temporary.exists():
            temporary.unlink()
