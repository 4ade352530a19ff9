"""Peak memory of a solve, estimated from the network's size and the solver before it runs.

The model is a fixed part, a part per branch and a part per node, fitted to ``ohmgraph solve``
runs (peak resident memory of the process less that of the imports alone, about 240 MB; 2 cores;
``benchmarks/bench_memory.py``) by a linear programme that keeps every estimate as far inside
-10 % / +30 % of its measurement as possible:

============================  =======  =========  ===============  ===============
network                       nodes    branches   direct MB        amg-cg MB
                                                  measured / est.  measured / est.
============================  =======  =========  ===============  ===============
lattice 200 x 200, loads       40,001     79,658  150 / 193        137 / 164
lattice 400 x 400, loads      160,001    319,258  374 / 444        259 / 297
lattice 700 x 700, loads      490,001    979,258  972 / 1,134      557 / 662
the same, other pad places    490,001    978,658  882 / 1,134      550 / 661
two-layer mesh 400 x 400      200,001    439,008  580-600 / 548    365 / 363
6-nearest-neighbour graph     100,001    353,218  314 / 397        272 / 315
6-nearest-neighbour graph     300,001  1,058,030  756-761 / 972    588-592 / 706
============================  =======  =========  ===============  ===============

Every estimate is within -10 % and +30 % of its measurement. The sparse LU factor's fill grows
faster than the node count on large meshes (nested-dissection fill of planar graphs grows as
``n log n``: A. George, SIAM J. Numer. Anal. 10, 345–363, 1973), so beyond the largest measured
size the direct estimate is scaled by ``log2(n) / log2(FILL_FROM)``. The caller compares the
estimate with the memory still available (the imports and the read network are in use already).
"""

from __future__ import annotations

import math


MB = 1 << 20
FIXED = {"direct": 109 * MB, "amg-cg": 120 * MB}
PER_BRANCH = {"direct": 538, "amg-cg": 580}
PER_NODE = {"direct": 1119, "amg-cg": 0}
# ac-cg peaks below amg-cg (2026-12-03, engine solve of a 700 x 700 lattice, measured beside
# amg-cg in one run: see benchmarks/README.md), so amg-cg's model bounds it.
for _table in (FIXED, PER_BRANCH, PER_NODE):
    _table["ac-cg"] = _table["amg-cg"]
FILL_FROM = 500_000            # nodes beyond which the direct factor's fill is extrapolated


def solve_method(n_nodes: int, method: str = "auto") -> str:
    """The back end whose estimate the guard uses: the one asked for, or for ``auto`` the
    leaner ``amg-cg`` (``auto`` itself never sets a factorisation up beyond its memory budget,
    :mod:`ohmgraph.engine.solvers.choice`, so the multigrid need is what ``auto`` cannot go
    below)."""
    return "amg-cg" if method == "auto" else method


def estimate_solve_bytes(n_nodes: int, n_branches: int, method: str = "auto") -> int:
    """Bytes a solve of this size needs beyond the memory in use before it (see module notes)."""
    method = solve_method(n_nodes, method)
    scaled = PER_BRANCH[method] * n_branches + PER_NODE[method] * n_nodes
    if method == "direct" and n_nodes > FILL_FROM:
        scaled *= math.log2(n_nodes) / math.log2(FILL_FROM)
    return int(FIXED[method] + scaled)
