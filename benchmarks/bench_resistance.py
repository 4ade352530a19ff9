"""Benchmarks of effective-resistance queries on a large square lattice.

Size: ``OHMGRAPH_BENCH_SIZE`` nodes per side (default 1000: one million nodes, two million
resistors). ``OHMGRAPH_BENCH_PAIRS`` random pairs (default 1000), ``OHMGRAPH_BENCH_SKETCH`` sketch
size for the across-resistor estimate (default 150: median relative error about
0.674 * sqrt(2/150) = 7.8 %), checked against exact pair solves on ``OHMGRAPH_BENCH_CHECKED``
random resistors (default 60). The comparison with ``networkx.resistance_distance`` runs on a
lattice of at most 40 x 40 = 1,600 nodes (3 pairs), where that dense method still runs.
``test_pairs_from_csv_stage_by_stage`` times what ``ohmgraph resistance NET.csv --pairs PAIRS.csv
-o OUT.csv`` does, stage by stage, on the lattice with 100 supply pads (zeroed, they ground it
through 100 nodes) written as CSV (the whole command: ``farm-bench`` on the same files).

Each benchmark prints its measured numbers; nothing here asserts a time.
"""

from __future__ import annotations

import os
import resource
import time
from pathlib import Path

import networkx as nx
import numpy as np
import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.network import RESISTOR
from ohmgraph.engine.resistance import ResistanceSolver
from ohmgraph.engine.solve import solve
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.pairs import read_pairs
from ohmgraph.io.reader import read_network
from ohmgraph.io.result_table import write_result_table

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


def test_pairs_from_csv_stage_by_stage(benchmark, tmp_path: Path):
    net_path, pairs_path = tmp_path / "net.csv", tmp_path / "pairs.csv"
    write_branch_table(net_path, grid2d(SIZE, SIZE, 1.0, pads=100, seed=1))
    rng = np.random.default_rng(1)
    x = rng.integers(0, SIZE, (4, PAIRS))
    pairs_path.write_text("a,b\n" + "".join(f"{p}_{q},{r}_{s}\n" for p, q, r, s in x.T))
    stages = {}

    def clock(name, function, *args, **kwargs):
        start = time.perf_counter()
        out = function(*args, **kwargs)
        stages[name] = time.perf_counter() - start
        return out

    def query():
        net = clock("read", read_network, net_path)
        solver = clock("grounding and checks", ResistanceSolver, net)
        labels_a, labels_b, a, b = clock("read pairs", read_pairs, pairs_path, net)
        clock("factorisation", solver.prepare, a.size)
        clock("reach check", solver.factor_pairs)
        result = clock("pairs (delta included)", solver.pairs_by_index, a, b)
        clock("write", write_result_table, tmp_path / "out.csv", "resistance",
              {"a": labels_a, "b": labels_b, "ohms": result.ohms, "accuracy": result.accuracy},
              force=True)
        return solver, result

    solver, result = benchmark.pedantic(query, rounds=1, iterations=1)
    benchmark.extra_info.update(stages, delta=solver.factor_delta,
                                worst_bound=float(result.accuracy.max()))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6
    print(f"\n{PAIRS} pairs on the {SIZE} x {SIZE} lattice from CSV, by stage (load "
          f"{os.getloadavg()[0]:.1f}): " + ", ".join(f"{k} {v:.2f} s" for k, v in stages.items())
          + f"; total {sum(stages.values()):.1f} s, peak {peak:.2f} GB (this process); "
          f"{result.method}, delta {solver.factor_delta:.2g}, worst bound "
          f"{result.accuracy.max():.2g}")
