"""Benchmarks of effective-resistance queries on a large square lattice.

Size: ``OHMGRAPH_BENCH_SIZE`` nodes per side (default 1000: one million nodes, two million
resistors). ``OHMGRAPH_BENCH_PAIRS`` random pairs (default 1000), ``OHMGRAPH_BENCH_SKETCH`` sketch
size for the across-resistor estimate (default 150: median relative error about
0.674 * sqrt(2/150) = 7.8 %), checked against exact pair solves on ``OHMGRAPH_BENCH_CHECKED``
random resistors (default 60). The comparison with ``networkx.resistance_distance`` runs on a
lattice of at most 40 x 40 = 1,600 nodes (3 pairs), where that dense method still runs.

Each benchmark prints its measured numbers; nothing here asserts a time.
"""

from __future__ import annotations

import os
import time

import networkx as nx
import numpy as np
import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.network import RESISTOR
from ohmgraph.engine.resistance import ResistanceSolver
from ohmgraph.engine.solve import solve

SIZE = int(os.environ.get("OHMGRAPH_BENCH_SIZE", "1000"))
PAIRS = int(os.environ.get("OHMGRAPH_BENCH_PAIRS", "1000"))
SKETCH = int(os.environ.get("OHMGRAPH_BENCH_SKETCH", "150"))
CHECKED = int(os.environ.get("OHMGRAPH_BENCH_CHECKED", "60"))
NETWORKX_SIDE = min(SIZE, 40)
NETWORKX_PAIRS = 3


@pytest.fixture(scope="module")
def lattice():
    """The lattice with a few supply pads and loads (zeroed for resistance queries)."""
    return grid2d(SIZE, SIZE, 1.0, pads=4, loads=100, seed=1)


@pytest.fixture(scope="module")
def shared_solver(lattice):
    start = time.perf_counter()
    solver = ResistanceSolver(lattice)
    print(f"\ncontraction, islands and grounding: {time.perf_counter() - start:.2f} s "
          f"({solver.stats.unknowns} unknowns; the solver is set up by the first query)")
    return solver


def test_one_pair_versus_one_full_solve(benchmark, lattice):
    rng = np.random.default_rng(0)
    a, b = rng.integers(0, lattice.n_nodes, 2)

    def one_pair():
        solver = ResistanceSolver(lattice)            # set-up included: a fresh network
        return solver.pair_by_index(a, b)

    start = time.perf_counter()
    solution = solve(lattice)
    full_seconds = time.perf_counter() - start
    (ohms, accuracy) = benchmark.pedantic(one_pair, rounds=1, iterations=1)
    pair_seconds = benchmark.stats.stats.median
    print(f"\n{lattice.n_nodes} nodes: one pair (set-up included) {pair_seconds:.2f} s, "
          f"R = {ohms:.6g} ohm (relative error <= {accuracy:.1e}); one full solve "
          f"({solution.method}) {full_seconds:.2f} s; ratio {pair_seconds / full_seconds:.2f}")


def test_random_pairs(benchmark, lattice, shared_solver):
    rng = np.random.default_rng(1)
    a, b = rng.integers(0, lattice.n_nodes, (2, PAIRS))
    result = benchmark.pedantic(shared_solver.pairs_by_index, args=(a, b), rounds=1, iterations=1)
    print(f"\n{PAIRS} random pairs on {lattice.n_nodes} nodes: {result.seconds:.1f} s with the "
          f"{shared_solver.stats.method} set-up ({shared_solver.stats.setup_seconds:.1f} s) "
          f"included ({result.method}, {result.solves} solves); "
          f"median R {np.median(result.ohms):.4g} ohm; worst relative error bound "
          f"{result.accuracy.max():.1e}")


def test_sketch_across_all_resistors(benchmark, lattice, shared_solver):
    result = benchmark.pedantic(shared_solver.across_resistors,
                                kwargs={"exact": False, "k": SKETCH, "seed": 2},
                                rounds=1, iterations=1)
    rng = np.random.default_rng(3)
    checked = rng.choice(result.branches.size, min(CHECKED, result.branches.size), replace=False)
    branches = result.branches[checked]
    exact = shared_solver.pairs_by_index(lattice.from_node[branches],
                                         lattice.to_node[branches]).ohms
    relative = np.abs(result.ohms[checked] / exact - 1.0)
    share = (result.ohms / result.resistor_ohms).sum()
    print(f"\nsketch of {result.branches.size} resistors (k = {result.sketch_size}): "
          f"{result.seconds:.1f} s; against {checked.size} exact values: median relative error "
          f"{100 * np.median(relative):.1f} %, max {100 * relative.max():.1f} % "
          f"(stated standard deviation {100 * result.accuracy[0]:.1f} %); sketched Foster sum "
          f"{share:.0f} vs exact {shared_solver.graph.n_supernodes - shared_solver.n_islands}")


def test_against_networkx(benchmark):
    net = grid2d(NETWORKX_SIDE, NETWORKX_SIDE, 1.0)
    graph = nx.Graph()
    resistors = net.kind == RESISTOR
    graph.add_weighted_edges_from(zip(net.from_node[resistors].tolist(),
                                      net.to_node[resistors].tolist(),
                                      net.value[resistors].tolist()), weight="ohms")
    rng = np.random.default_rng(4)
    a, b = rng.integers(0, net.n_nodes, (2, NETWORKX_PAIRS))
    b = np.where(a == b, (b + 1) % net.n_nodes, b)

    def ours():
        return ResistanceSolver(net).pairs_by_index(a, b).ohms

    values = benchmark.pedantic(ours, rounds=3, iterations=1)
    ours_seconds = benchmark.stats.stats.median
    start = time.perf_counter()
    reference = [nx.resistance_distance(graph, int(u), int(v), weight="ohms", invert_weight=True)
                 for u, v in zip(a, b)]
    networkx_seconds = time.perf_counter() - start
    np.testing.assert_allclose(values, reference, rtol=1e-8)
    print(f"\n{net.n_nodes}-node lattice, {NETWORKX_PAIRS} pairs: ohmgraph {ours_seconds:.3f} s "
          f"(set-up included), networkx.resistance_distance {networkx_seconds:.2f} s; "
          f"ratio {networkx_seconds / ours_seconds:.0f}x; max |difference| "
          f"{np.max(np.abs(values - reference)):.1e} ohm")
