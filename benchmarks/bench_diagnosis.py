"""Benchmarks of readings against the model: compare, single-fault diagnosis, fault recovery.

Size: ``OHMGRAPH_BENCH_SIZE`` nodes per side of the square mesh (default 316: about 100k nodes
and 200k resistors). The fault-recovery benchmark runs on a mesh of at most 100 per side with
``OHMGRAPH_BENCH_TRIALS`` injected faults (default 200) so that it finishes in minutes.

The meshes are lattices from :func:`ohmgraph.datasets.generators.grid2d` with every resistance
scattered uniformly by ±20 % (an invented spread), voltage pads and current loads. Readings are
node voltages against the reference with an invented bench-meter accuracy of
±(0.01 % + 10 µV); faulty readings come from a full re-solve of the faulty network, never from
the rank-one updates under test.
"""

from __future__ import annotations

import os
import time

import numpy as np
import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.readings.diagnosis import diagnose
from ohmgraph.engine.readings.model import Readings, build_model, compare
from ohmgraph.engine.network import CURRENT_SOURCE, RESISTOR, Network
from ohmgraph.engine.readings.sensitivity import resistor_candidates

SIZE = int(os.environ.get("OHMGRAPH_BENCH_SIZE", "316"))
TRIALS = int(os.environ.get("OHMGRAPH_BENCH_TRIALS", "200"))
PERCENT, ABSOLUTE = 0.01, 10e-6


def scattered_mesh(side: int, pads: int, loads: int, load_amps: float, seed: int) -> Network:
    net = grid2d(side, side, pads=pads, loads=loads, load_amps=load_amps, supply_volts=1.0,
                 seed=seed)
    rng = np.random.default_rng(seed)
    ohms = net.value.copy()
    resistors = net.kind == RESISTOR
    ohms[resistors] *= rng.uniform(0.8, 1.2, int(resistors.sum()))
    return net.with_values(ohms)


def voltage_readings(net: Network, nodes: np.ndarray, measured=None) -> Readings:
    measured = np.full(nodes.size, np.nan) if measured is None else measured
    band = PERCENT / 100 * np.abs(measured) + ABSOLUTE
    return Readings(np.full(nodes.size, "V"), nodes, np.full(nodes.size, net.reference),
                    np.full(nodes.size, -1), measured, band)


def faulty(net: Network, branch: int, mode: str) -> Network:
    """The network with one fault: open (a 0 A current source keeps indices), short, ±20 %."""
    kind, value = net.kind.copy(), net.value.copy()
    if mode == "open":
        kind[branch], value[branch] = CURRENT_SOURCE, 0.0
    else:
        value[branch] *= {"short": 1e-6, "+20%": 1.2, "-20%": 0.8}[mode]
    return Network(net.node_labels, net.branch_names, kind, net.from_node, net.to_node, value,
                   net.reference)


@pytest.fixture(scope="module")
def large():
    net = scattered_mesh(SIZE, pads=20, loads=200, load_amps=0.5, seed=1)
    rng = np.random.default_rng(2)
    nodes = rng.choice(np.flatnonzero(net.node_labels != "0"), min(500, net.n_nodes - 1),
                       replace=False)
    return net, nodes, build_model(net, voltage_readings(net, nodes))


def test_compare_500_readings(benchmark, large):
    net, nodes, nominal = large
    measured = nominal.model_value * (1 + 1e-5)

    def run():
        model = build_model(net, voltage_readings(net, nodes, measured))
        return model, compare(model)

    model, result = benchmark.pedantic(run, rounds=1, iterations=1)
    print(f"\ncompare: {net.n_nodes} nodes, {net.n_branches} branches, {nodes.size} readings; "
          f"stages {model.timings}; {result.summary()['passed']} passed")


def test_diagnose_single_fault(benchmark, large):
    net, nodes, nominal = large
    # Of the resistors touching a read node, the one carrying most current, 20 % high, so that
    # the readings see it (a fault the readings cannot see has nothing to diagnose).
    touching = np.flatnonzero(np.isin(net.from_node, nodes) & (net.kind == RESISTOR))
    branch = int(touching[np.argmax(np.abs(nominal.solution.branch_current[touching]))])
    measured = build_model(faulty(net, branch, "+20%"), voltage_readings(net, nodes)).model_value
    readings = voltage_readings(net, nodes, measured)

    def run():
        model = build_model(net, readings, solution=nominal.solution)
        return model, diagnose(model, top=5)

    model, result = benchmark.pedantic(run, rounds=1, iterations=1)
    best = result.hypotheses[0]
    print(f"\ndiagnose: {result.candidates} candidate resistors, {nodes.size} readings "
          f"({int((~compare(model).passed).sum())} outside accuracy); stages {result.timings}; "
          f"evaluated exactly {result.evaluated}; ranking exact {result.exact}; injected "
          f"{net.branch_names[branch]} ranked first: {branch in best.branches} "
          f"({best.kinds[0]}, estimated {best.estimated_ohms[0]:.5g} ohm vs injected "
          f"{1.2 * net.value[branch]:.5g} ohm)")
    assert branch in best.branches


@pytest.mark.parametrize("noise", [0.0, 0.5])
def test_injected_fault_recovery(benchmark, noise):
    """Rank of injected faults; ``noise`` is the reading error as a fraction of its band."""
    side = min(SIZE, 100)
    net = scattered_mesh(side, pads=4, loads=20, load_amps=0.5, seed=3)
    rng = np.random.default_rng(4)
    nodes = rng.choice(np.flatnonzero(net.node_labels != "0"), max(10, side * side // 100),
                       replace=False)
    nominal = build_model(net, voltage_readings(net, nodes))
    candidates = resistor_candidates(net)
    modes = ("open", "short", "+20%", "-20%")

    def run():
        counted, first, seconds = {m: 0 for m in modes}, {m: 0 for m in modes}, []
        top3 = tied = 0
        for trial in range(TRIALS):
            mode = modes[trial % 4]
            branch = int(rng.choice(candidates))
            try:
                exact = build_model(faulty(net, branch, mode),
                                    voltage_readings(net, nodes)).model_value
            except ValueError:
                continue                      # the open left part of the mesh floating
            band = voltage_readings(net, nodes, exact).band
            measured = exact + noise * band * rng.uniform(-1, 1, exact.size)
            model = build_model(net, voltage_readings(net, nodes, measured),
                                solution=nominal.solution)
            if compare(model).all_passed:
                continue
            start = time.perf_counter()
            result = diagnose(model, top=3)
            seconds.append(time.perf_counter() - start)
            counted[mode] += 1
            first[mode] += int(branch in result.hypotheses[0].branches)
            top3 += int(any(branch in h.branches for h in result.hypotheses))
            leaders = result.hypotheses[:result.tied_with_best()]
            tied += int(any(branch in h.branches for h in leaders))
        return counted, first, seconds, top3, tied

    counted, first, seconds, top3, tied = benchmark.pedantic(run, rounds=1, iterations=1)
    total, hits = sum(counted.values()), sum(first.values())
    print(f"\nfault recovery (noise {noise:g} band): mesh {side}x{side}, {nodes.size} readings, "
          f"{TRIALS} trials, {total} with readings outside accuracy; injected branch or its "
          f"group ranked first in {hits}/{total} = {hits / max(total, 1):.1%}; by mode "
          + ", ".join(f"{m} {first[m]}/{counted[m]}" for m in modes)
          + f"; in the top 3: {top3}/{total}; among those tied with the first (chi2 + 1): "
          f"{tied}/{total}; median diagnose {np.median(seconds or [np.nan]):.2f} s")
    if noise == 0.0:
        assert hits >= 0.95 * total
