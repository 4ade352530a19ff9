"""How much more memory this process may use, read from the machine's state (no allocation).

The least of three limits, each skipped when it cannot be read or is unlimited:

* free memory: ``MemAvailable`` of ``/proc/meminfo`` (Linux ``proc(5)``: memory available for
  starting new applications without swapping);
* the cgroup limit: ``memory.max - memory.current`` (cgroup v2) or ``memory.limit_in_bytes -
  memory.usage_in_bytes`` (cgroup v1) of this process's memory cgroup (Linux ``cgroups(7)``);
* ``RLIMIT_AS`` (``ulimit -v``): the soft limit less the address space in use (``VmSize`` of
  ``/proc/self/status``).

:func:`default_memory_budget` is half of it: what a solver set-up may use by default
(:class:`ohmgraph.engine.session.SolveSession`), leaving the rest for the caller's own arrays.
The memory guard of the command line (:mod:`ohmgraph.io.memory_guard`) compares its estimate
with :func:`available_memory` too.
"""

from __future__ import annotations

import resource
from dataclasses import dataclass
from pathlib import Path

UNLIMITED = 1 << 60           # cgroup files write "max" or a value near 2^63 for no limit


@dataclass(frozen=True)
class Available:
    """``bytes`` more may be allocated; ``limit`` names the tightest limit."""

    bytes: int
    limit: str


def _read(path: Path) -> str | None:
    try:
        return path.read_text()
    except OSError:
        return None


def _field_kib(text: str | None, name: str) -> int | None:
    """A ``Name:  1234 kB`` field of a /proc file, in bytes."""
    for line in (text or "").splitlines():
        if line.startswith(f"{name}:"):
            return int(line.split()[1]) * 1024
    return None


def _number(text: str | None) -> int | None:
    text = (text or "").strip()
    return int(text) if text.isdigit() else None


def _cgroup_room(proc: Path, cgroup_root: Path) -> int | None:
    """Room left under this process's cgroup memory limit, or None without a limit."""
    rooms = []
    for line in (_read(proc / "self" / "cgroup") or "").splitlines():
        _, controllers, group = line.split(":", 2)
        if controllers == "":                                       # v2
            folders, names = [cgroup_root / group.lstrip("/"), cgroup_root], ("memory.max",
                                                                               "memory.current")
        elif "memory" in controllers.split(","):                    # v1
            base = cgroup_root / "memory"
            folders, names = [base / group.lstrip("/"), base], ("memory.limit_in_bytes",
                                                                "memory.usage_in_bytes")
        else:
            continue
        for folder in folders:           # in a cgroup namespace the own group is the root
            limit, used = (_number(_read(folder / name)) for name in names)
            if limit is not None and used is not None:
                if limit < UNLIMITED:
                    rooms.append(max(0, limit - used))
                break
    return min(rooms) if rooms else None


def available_memory(proc="/proc", cgroup_root="/sys/fs/cgroup") -> Available:
    """The least of free memory, cgroup room and ``RLIMIT_AS`` room (see the module notes)."""
    proc, cgroup_root = Path(proc), Path(cgroup_root)
    candidates = [(UNLIMITED, "no limit found")]
    free = _field_kib(_read(proc / "meminfo"), "MemAvailable")
    if free is not None:
        candidates.append((free, "free memory"))
    room = _cgroup_room(proc, cgroup_root)
    if room is not None:
        candidates.append((room, "cgroup memory limit"))
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    in_use = _field_kib(_read(proc / "self" / "status"), "VmSize")
    if soft != resource.RLIM_INFINITY and in_use is not None:
        candidates.append((max(0, soft - in_use), "address-space limit (ulimit -v)"))
    return Available(*min(candidates))


DEFAULT_SHARE = 0.5


def default_memory_budget() -> float | None:
    """Half of :func:`available_memory` (None when no limit can be read: no budget)."""
    room = available_memory()
    return None if room.bytes >= UNLIMITED else DEFAULT_SHARE * room.bytes
