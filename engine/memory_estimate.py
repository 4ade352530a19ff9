"""Peak memory of a solve, estimated from the network's size and the solver before it runs.

The model is a fixed part plus a part per branch, measured with ``ohmgraph solve`` on lattices
with pads and loads (``ru_maxrss`` of the process less that of the imports alone, 2 cores):

===========  =========  ==========  ==========  ==================
method       200 x 200  400 x 400   700 x 700   model
===========  =========  ==========  ==========  ==================
direct       150 MB     374 MB      972 MB      80 MB + 950 B/branch x fill growth
amg-cg       137 MB     259 MB      557 MB      100 MB + 520 B/branch
===========  =========  ==========  ==========  ==================

(80,000, 319,000 and 979,000 branches.) The sparse LU factor grows a little faster than the
branch count (nested-dissection fill of planar graphs grows as ``n log n``: A. George, SIAM J.
Numer. Anal. 10, 345–363, 1973), so the direct estimate is scaled by ``log2(m) / log2(10^6)``
above a million branches. The estimate covers reading's arrays, the checks, assembly, the solver
and the recovered quantities; the memory already in use is measured separately by the caller.
"""

from __future__ import annotations

import math

from .solvers import choose_method

MB = 1 << 20
FIXED = {"direct": 80 * MB, "amg-cg": 100 * MB}
PER_BRANCH = {"direct": 950, "amg-cg": 520}
FILL_FROM = 1_000_000          # branches beyond which the direct factor's fill grows


def solve_method(n_nodes: int, method: str = "auto") -> str:
    """The solver ``solve`` will use: ``auto`` resolved with the node count as unknowns."""
    return choose_method(n_nodes, method)


def estimate_solve_bytes(n_nodes: int, n_branches: int, method: str = "auto") -> int:
    """Bytes a solve of this size needs beyond the memory in use before it (see module notes)."""
    method = solve_method(n_nodes, method)
    per_branch = PER_BRANCH[method] * n_branches
    if method == "direct" and n_branches > FILL_FROM:
        per_branch *= math.log2(n_branches) / math.log2(FILL_FROM)
    return int(FIXED[method] + per_branch)
