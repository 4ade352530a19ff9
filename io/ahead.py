"""Loading what a command will need while it reads a large input.

Reading a large table is mostly Arrow's own threads parsing and hashing text, during which the
Python interpreter is free; :func:`loading_ahead` uses that time to import libraries the command
will need and to load numba's compiled-code machinery in a background thread, so that the
reading, checking and set-up stages do not wait for them. It is only an optimisation: whatever
fails here is done again, and reported, where it is first needed.

numba's machinery is loaded first, as the reader's node numbering is the first kernel to run;
then the default modules: pandas, which pyarrow imports on its first conversion of Python
objects or arrays (0.1 s), and pyamg (the multigrid set-up).
"""

from __future__ import annotations

import contextlib
import importlib
import os
import threading

from .address_space import limit

# Inputs smaller than this are read too fast for loading ahead to pay (about 0.1 s of reading).
AHEAD_BYTES = 8 * 2**20


@contextlib.contextmanager
def loading_ahead(path, modules=("pandas", "pyamg")):
    """Within the block, import ``modules`` and load numba's kernel machinery in a background
    thread when the file at ``path`` is at least :data:`AHEAD_BYTES` long; the thread is
    joined when the block ends, however it ends (no import is left running at exit).

    Nothing is started under an address-space limit (``ulimit -v``), where every thread
    reserves its stack and malloc arena and memory is to be spent only where it must.
    """
    thread = None
    with contextlib.suppress(OSError):
        if os.stat(path).st_size >= AHEAD_BYTES and limit() is None:
            thread = threading.Thread(target=_load, args=(tuple(modules),),
                                      name="ohmgraph-load-ahead", daemon=True)
            thread.start()
    try:
        yield thread
    finally:
        if thread is not None:
            thread.join()


def _load(modules) -> None:
    try:
        from ohmgraph.engine.kernel_loading import load_kernel_machinery

        load_kernel_machinery()         # first: the reader's numbering kernel needs it soonest
        for module in modules:
            importlib.import_module(module)
    except Exception:          # noqa: BLE001 -- redone, and reported, where it is needed
        pass
