"""The issue-8 end-to-end grids as branch-table CSV, with a fixed seed.

Usage: ``python benchmarks/grid_table.py SIDE OUT.csv`` (``SIDE`` 1000, 2000 or 3000).

A ``SIDE`` x ``SIDE`` lattice of 1-ohm resistors (:func:`ohmgraph.datasets.generators.grid2d`),
one 1 V voltage-source pad to the reference ``0`` per 10,000 nodes (100 at 1000 x 1000, scaled
with the area), and a 1 uA current load to ``0`` at every node; pads and loads are seeded
(:data:`SEED`). Rows: ``2 SIDE (SIDE - 1)`` resistors, the pads, ``SIDE**2`` loads — 2,998,100 at
1000 (95 MB), 11,996,400 at 2000, 26,994,900 at 3000.
"""

from __future__ import annotations

import sys
import time

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.network import Network
from ohmgraph.io.branch_table import write_branch_table

SEED = 8
NODES_PER_PAD = 10_000
LOAD_AMPS = 1e-6
SUPPLY_VOLTS = 1.0


def grid(side: int) -> Network:
    """The ``side`` x ``side`` end-to-end grid (see the module docstring)."""
    nodes = side * side
    return grid2d(side, side, 1.0, pads=max(1, nodes // NODES_PER_PAD), loads=nodes,
                  load_amps=LOAD_AMPS, supply_volts=SUPPLY_VOLTS, seed=SEED)


def main(argv: list[str]) -> None:
    side, path = int(argv[0]), argv[1]
    start = time.perf_counter()
    net = grid(side)
    write_branch_table(path, net, force=True)
    print(f"{path}: {side} x {side}, {net.n_nodes:,} nodes, {net.n_branches:,} branches, "
          f"{time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main(sys.argv[1:])
