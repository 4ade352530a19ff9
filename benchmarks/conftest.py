"""Shared set-up of the benchmark suite (``make bench``; pytest-benchmark).

``OHMGRAPH_BENCH_SIZE`` sets the side of the square lattice the solver and end-to-end benchmarks
use (default 1000: one million nodes, two million resistors); ``OHMGRAPH_BENCH_SIZE=200`` runs
the whole suite in about a minute. Benchmarks print their numbers and store them in
``benchmark.extra_info`` (kept by ``--benchmark-json``); nothing here asserts a time.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np
import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.checks import check
from ohmgraph.engine.formulation import ReducedSystem, assemble
from ohmgraph.engine.network import Network

SIZE = int(os.environ.get("OHMGRAPH_BENCH_SIZE", "1000"))
RTOL = 1e-10
PG1 = Path(__file__).resolve().parents[1].parent / "shared" / "validation" / "pg1.csv.gz"


def supplied_lattice(side: int) -> Network:
    """A ``side`` x ``side`` lattice of 1-ohm resistors with supply pads and current loads.

    One pad (1 V to the reference) per 10,000 nodes, at least four, and a load of 0.1 mA on a
    tenth of the nodes, all at seeded random places.
    """
    nodes = side * side
    return grid2d(side, side, 1.0, pads=max(4, nodes // 10_000), loads=max(1, nodes // 10),
                  load_amps=1e-4, supply_volts=1.0, seed=1)


def reduced_system(net: Network) -> ReducedSystem:
    """The grounded-Laplacian system ``solve`` would hand to its solver."""
    report = check(net)
    return assemble(net, report.contraction, report.pinned_nodes)


def relative_residual(matrix, x: np.ndarray, b: np.ndarray) -> float:
    """``||A x - b|| / ||b||``."""
    return float(np.linalg.norm(matrix @ x - b) / np.linalg.norm(b))


class Stopwatch:
    """Wall-clock seconds of every call of a function, so the best one can be reported even
    when pytest-benchmark is disabled."""

    def __init__(self, function):
        self.function = function
        self.seconds: list[float] = []

    def __call__(self, *args, **kwargs):
        start = time.perf_counter()
        result = self.function(*args, **kwargs)
        self.seconds.append(time.perf_counter() - start)
        return result

    @property
    def best(self) -> float:
        return min(self.seconds)


@pytest.fixture(scope="session")
def lattice() -> Network:
    start = time.perf_counter()
    net = supplied_lattice(SIZE)
    print(f"\nlattice {SIZE} x {SIZE}: {net.n_nodes} nodes, {net.n_branches} branches, "
          f"generated in {time.perf_counter() - start:.1f} s")
    return net


@pytest.fixture(scope="session")
def lattice_system(lattice) -> ReducedSystem:
    return reduced_system(lattice)


@pytest.fixture(scope="session")
def pg1_system() -> ReducedSystem:
    """The reduced system of the IBM power-grid benchmark pg1 (skips when it is absent)."""
    if not PG1.is_file():
        pytest.skip(f"{PG1} is absent")
    from ohmgraph.io.reader import read_network

    return reduced_system(read_network(PG1))
