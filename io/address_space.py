"""Running under an address-space limit (``ulimit -v``, Linux ``RLIMIT_AS``).

The limit counts address space reserved, not memory used: every thread reserves its stack and
may get a malloc arena of its own (64 MB on 64-bit glibc), and libraries set up thread pools and
buffers as they load. Below the room they need, some of them fail in ways Python cannot catch
(measured 2026-12-03 with ``ohmgraph check`` of a two-branch file, 2 cores):

* SciPy's OpenBLAS, loaded with a thread per core, retries a failed buffer allocation for ever
  (``blas_memory_alloc`` in ``blas_thread_init``): every run hung at 200 and 250 MB;
* pyarrow aborts the process when it cannot start a thread (``std::system_error``, 500 MB), and
  numba's LLVM when it cannot map code it loads from the cache (``std::bad_alloc``, 700 MB).

So under a limit the command line first (:func:`prepare`, before those libraries load) keeps
their pools to one thread (``OPENBLAS_NUM_THREADS``, ``OMP_NUM_THREADS``, ``ARROW_IO_THREADS``,
``NUMBA_NUM_THREADS``, unless already set), glibc to one malloc arena and pyarrow on the system
allocator (``ARROW_DEFAULT_MEMORY_POOL=system``: its default, jemalloc, reserved about 1.1 GB
to read a 15 MB table, the system allocator 0.2 GB), then refuses a limit below
:data:`MIN_ADDRESS_SPACE` with the out-of-memory exit. Readers call :func:`refuse_to_read`
before a CSV is parsed: pyarrow's reader aborts on a failed allocation (``std::bad_alloc``)
rather than raising, so a file whose reading would not fit is refused beforehand.
"""

from __future__ import annotations

import contextlib
import ctypes
import os
import resource

from .errors import NotEnoughMemory

# Address space the interpreter and its libraries need before any input is read: with the
# settings of prepare(), 'ohmgraph check' of a tiny file failed at 500 and 700 MB and succeeded
# at 600, 800, 1000 and 1500 MB (module notes); a gibibyte leaves a margin.
MIN_ADDRESS_SPACE = 1 << 30
# Address space reading a CSV network takes per byte of the file (text columns, their conversion
# and the network's arrays), with the settings of prepare(): the peak reservation of
# read_network_file grew by 206 MB for the 15 MB table of a 500 x 500 lattice and by 634 MB for
# the 61 MB one of a 1000 x 1000 lattice (2026-12-03): 14 and 10.5 bytes per byte; rounded up.
READ_BYTES_PER_BYTE = 16
# A gzip-compressed table is taken as this many times larger once expanded (typical of the
# numeric tables here: 3 to 5); the reader's own refusal covers a guess that falls short.
GZIP_EXPANSION = 6
SETTINGS = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "ARROW_IO_THREADS": "1",
            "NUMBA_NUM_THREADS": "1", "ARROW_DEFAULT_MEMORY_POOL": "system"}
M_ARENA_MAX = -8          # glibc mallopt(3) parameter


def limit() -> int | None:
    """The soft ``RLIMIT_AS`` in bytes, or None when unlimited."""
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    return None if soft == resource.RLIM_INFINITY else int(soft)


def in_use() -> int:
    """Address space this process has reserved (``VmSize``), in bytes (0 if unknown)."""
    with contextlib.suppress(OSError, IndexError, ValueError):
        with open("/proc/self/status", encoding="ascii") as status:
            return int(status.read().split("VmSize:")[1].split()[0]) * 1024
    return 0


def prepare() -> str | None:
    """Under an address-space limit, set the libraries up to need little of it (call before
    they load); return why the run cannot go on, or None."""
    ceiling = limit()
    if ceiling is None:
        return None
    for name, value in SETTINGS.items():
        os.environ.setdefault(name, value)
    with contextlib.suppress(OSError, AttributeError):
        ctypes.CDLL(None).mallopt(M_ARENA_MAX, 1)
    if ceiling < MIN_ADDRESS_SPACE:
        return (f"the address-space limit (ulimit -v) of {ceiling / 2**20:.0f} MB is below the "
                f"{MIN_ADDRESS_SPACE / 2**20:.0f} MB ohmgraph's libraries need to load; raise it")
    try:
        reserve_blas_buffers()
    except (ImportError, OSError, MemoryError):
        return (f"the address-space limit (ulimit -v) of {ceiling / 2**20:.0f} MB leaves no room "
                "for the numerical libraries' work buffers; raise it")
    return None


def reserve_blas_buffers() -> None:
    """Have NumPy's and SciPy's OpenBLAS take their work buffer now, while there is room.

    OpenBLAS allocates a buffer on a thread's first BLAS call that needs one, retries a failed
    allocation for ever (``blas_memory_alloc``: a run under a 1 GiB limit spun in SuperLU's
    ``dtrsv`` for ten minutes, 2026-12-03), and keeps the buffer in its pool for every later
    call. One call of each library before the input is read leaves a later shortfall to
    allocations that fail cleanly (``MemoryError``, the out-of-memory exit).
    """
    import numpy as np
    from scipy.linalg import blas

    square = np.eye(256)                    # large enough to pass OpenBLAS's small-matrix path
    square @ square                         # NumPy's OpenBLAS (dgemm)
    blas.dtrsv(square, np.ones(256))        # SciPy's OpenBLAS (dtrsv, as SuperLU calls it)


def refuse_to_read(path, size: int, gzipped: bool) -> None:
    """Raise :class:`~ohmgraph.io.errors.NotEnoughMemory` when reading a table of ``size`` bytes would not fit under the
    address-space limit (nothing to do without one)."""
    ceiling = limit()
    if ceiling is None:
        return
    need = size * READ_BYTES_PER_BYTE * (GZIP_EXPANSION if gzipped else 1)
    room = ceiling - in_use()
    if need > room:
        raise NotEnoughMemory(f"{path}: reading it needs about {need / 2**20:,.0f} MB of address "
                          f"space, and the limit (ulimit -v) leaves {max(room, 0) / 2**20:,.0f} "
                          "MB; raise the limit or use a machine with more memory")
