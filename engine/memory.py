"""How much memory this process may still use, read from the machine's state (no allocation).

The least of three limits, each skipped when it cannot be read or is unlimited:

* ``MemAvailable`` in ``/proc/meminfo`` (the kernel's estimate of memory available to new
  work without swapping);
* the control group's limit less its current use (``/sys/fs/cgroup/memory.max`` and
  ``memory.current``, cgroup v2);
* ``RLIMIT_AS`` less the process's current address space (``VmSize``).

:func:`default_memory_budget` is half of it: what a solver set-up may use by default
(:class:`ohmgraph.engine.session.SolveSession`), leaving the rest for the caller's own arrays.
"""

from __future__ import annotations

import resource
from pathlib import Path

PROC_MEMINFO = Path("/proc/meminfo")
PROC_STATUS = Path("/proc/self/status")
CGROUP = Path("/sys/fs/cgroup")
DEFAULT_SHARE = 0.5


def _field_bytes(path: Path, name: str) -> float | None:
    """``name:  N kB`` from a /proc file, in bytes."""
    try:
        for line in path.read_text().splitlines():
            if line.startswith(name + ":"):
                return float(line.split()[1]) * 1024
    except (OSError, IndexError, ValueError):
        pass
    return None


def _number(path: Path) -> float | None:
    """A file holding one integer (``max`` for unlimited gives None)."""
    try:
        text = path.read_text().strip()
        return float(text) if text.isdigit() else None
    except OSError:
        return None


def available_memory() -> float | None:
    """Bytes this process may still allocate: the least of the limits above (None when none
    can be read)."""
    limits = [_field_bytes(PROC_MEMINFO, "MemAvailable")]
    cgroup_max, cgroup_used = _number(CGROUP / "memory.max"), _number(CGROUP / "memory.current")
    if cgroup_max is not None:
        limits.append(cgroup_max - (cgroup_used or 0.0))
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    if soft != resource.RLIM_INFINITY:
        limits.append(soft - (_field_bytes(PROC_STATUS, "VmSize") or 0.0))
    limits = [max(limit, 0.0) for limit in limits if limit is not None]
    return min(limits) if limits else None


def default_memory_budget() -> float | None:
    """Half of :func:`available_memory` (None when it cannot be read: no limit)."""
    available = available_memory()
    return None if available is None else DEFAULT_SHARE * available
