"""ohmgraph.io: everything that touches the outside world.

Readers and writers, the HDF5 store, the command-line interface and terminal output. The
readers are imported on first use, so the command line starts (and handles SIGINT and SIGTERM,
:mod:`ohmgraph.io.interrupts`) before the heavy libraries load.
"""

import importlib

_EXPORTS = {"read_network": "reader", "read_network_file": "reader", "read_solution": "store",
            "write_solution": "store", "load_nodes": "export", "load_branches": "export"}

__all__ = list(_EXPORTS)


def __getattr__(name):
    if name not in _EXPORTS:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
