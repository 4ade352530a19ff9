"""Create an HDF5 file so that a failing write ends as one ``OSError``, never a crash.

When the HDF5 library's own writes fail (a full disk, a file-size limit), h5py reports the
failure from object destructors ("Exception ignored in ... __dealloc__") and can then crash the
interpreter on closing the file. :func:`create_hdf5` therefore hands HDF5 a Python file object
(h5py's ``fileobj`` driver) that performs every write itself: the first ``OSError`` is kept and
the rest of the file is discarded, HDF5 finishes without noticing, and the kept error is raised
once the file is closed. The caller writes into a temporary file
(:func:`ohmgraph.io.atomic.atomic_output`), which is then removed. Signals are held while HDF5
has the file open (see :func:`create_hdf5`).
"""

from __future__ import annotations

import contextlib
import io
import threading

import h5py

from .interrupts import deferred


class _FailureKeepingFile(io.RawIOBase):
    """A binary file that keeps its first write error instead of raising it."""

    def __init__(self, raw):
        super().__init__()
        self.raw = raw
        self.error: OSError | None = None

    def readable(self) -> bool:
        return True

    def writable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def seek(self, offset: int, whence: int = 0) -> int:
        return self.raw.seek(offset, whence)

    def tell(self) -> int:
        return self.raw.tell()

    def readinto(self, buffer) -> int:
        return self.raw.readinto(buffer)

    def _attempt(self, operation, *args):
        if self.error is None:
            try:
                return operation(*args)
            except OSError as error:
                self.error = error
        return None

    def write(self, data) -> int:
        self._attempt(self.raw.write, data)
        return len(data)

    def truncate(self, size=None) -> int:
        self._attempt(self.raw.truncate, size)
        return self.raw.tell() if size is None else size

    def flush(self) -> None:
        self._attempt(self.raw.flush)


@contextlib.contextmanager
def create_hdf5(path, mode: str = "w", **options):
    """Yield a writable :class:`h5py.File` at ``path``: new (``mode="w"``) or existing (``"a"``).

    ``options`` go to :class:`h5py.File`.

    Raises
    ------
    OSError
        The first failed write, with its ``errno`` and reason, after the file is closed.
    """
    with open(path, {"w": "w+b", "a": "r+b"}[mode], buffering=0) as raw:
        keeper = _FailureKeepingFile(raw)
        # HDF5 calls the file object's methods from C: an interrupt raised inside one of them
        # would be lost there and leave the library in a broken state (a crash at exit), so
        # SIGINT and SIGTERM are held while the file is open and raised once it is closed.
        # Python runs signal handlers on the main thread only: a file written by another
        # thread (io/store.py's SolutionWriter) needs no holding, and must not hold the main
        # thread's signals for as long as it is open.
        on_main = threading.current_thread() is threading.main_thread()
        with (deferred() if on_main else contextlib.nullcontext(),
              h5py.File(keeper, mode, **options) as h5):
            yield h5
        keeper.flush()
    if keeper.error is not None:
        raise keeper.error
