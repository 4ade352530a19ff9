"""Refuse a solve that will not fit in memory before it starts, with what to do instead.

The estimate comes from :mod:`ohmgraph.engine.memory_estimate`, the room from
:mod:`ohmgraph.engine.memory`. An allocation that fails anyway (``MemoryError``) ends the
command line with :data:`ohmgraph.io.errors.OUT_OF_MEMORY` and the same exit code (5).
"""

from __future__ import annotations

from ohmgraph.engine.memory_estimate import estimate_solve_bytes, solve_method

from .errors import NotEnoughMemory
from ohmgraph.engine.memory import available_memory


def megabytes(count: int) -> str:
    """``1,234 MB``."""
    return f"{count / (1 << 20):,.0f} MB"


def refuse_if_too_big(net, method: str, source) -> None:
    """Raise :class:`NotEnoughMemory` if solving ``net`` is estimated to need more than is free.

    Parameters
    ----------
    net : Network
    method : str
        The ``--method`` asked for (``auto`` is held to its leanest back end,
        :func:`ohmgraph.engine.memory_estimate.solve_method`).
    source : str or Path
        The network file, for the message.
    """
    needed = estimate_solve_bytes(net.n_nodes, net.n_branches, method)
    room = available_memory()
    if needed <= room.bytes:
        return
    chosen = solve_method(net.n_nodes, method)
    other = (", use --method amg-cg (less memory than direct)" if chosen == "direct"
             else "")
    raise NotEnoughMemory(
        f"{source}: solving {net.n_branches:,} branches with {chosen} needs about "
        f"{megabytes(needed)}, but only {megabytes(room.bytes)} are available ({room.limit}); "
        f"close other programs, raise the limit{other} or use a machine with more memory")
