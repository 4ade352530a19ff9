"""Readings on real parts: fault trials on the invented 40 x 40 fixture and the large mesh.

Targets of issue 10 (numbers recorded in ``benchmarks/README.md``):

* 40 x 40 fixture (3,124 resistors of E24 values), ±1 % parts, 65 readings (40 node voltages,
  25 two-point resistances), ``OHMGRAPH_BENCH_TRIALS`` trials (default 200) per case: one planted
  fault (open, short, value change by a factor in [0.3, 0.8] or [1.2, 3]); no fault; a fault
  and a 1–5 ohm contact error on one resistance reading;
* a 100k-node mesh with 500 readings: ``compare`` with bands that include the parts and
  ``diagnose`` with the generalised least-squares fit.

Trials: :func:`ohmgraph.datasets.fixture.fault_trial` (full re-solve of the built copy, parts
uniform within tolerance, instrument errors uniform within accuracy).
"""

from __future__ import annotations

import itertools
import os
import time

import numpy as np
import pytest

from bench_diagnosis import scattered_mesh, voltage_readings
from ohmgraph.datasets.fixture import (FAULT_MODES, Accuracy, fault_trial, fixture_readings,
                                       probe_fixture, scattered, with_fault)
from ohmgraph.engine.network import RESISTOR
from ohmgraph.engine.readings.bands import part_spread, reading_bands
from ohmgraph.engine.readings.gls import diagnose_parts
from ohmgraph.engine.readings.model import Readings, build_model, compare
from ohmgraph.engine.readings.probes import choose_readings, unseparated_pairs

TRIALS = int(os.environ.get("OHMGRAPH_BENCH_TRIALS", "200"))
SIDE = int(os.environ.get("OHMGRAPH_BENCH_SIZE", "316"))
TOLERANCE = 0.01


@pytest.fixture(scope="module")
def fixture():
    net = probe_fixture(40, seed=1)
    template = fixture_readings(net, 40, 25, seed=2)
    return net, template, build_model(net, template).model_value


def _trials(fixture, seed, modes, contact=None):
    net, template, nominal = fixture
    rng = np.random.default_rng(seed)
    seconds, outcomes = [], []
    for trial in range(TRIALS):
        start = time.perf_counter()
        outcomes.append(fault_trial(net, template, nominal, TOLERANCE, Accuracy(), rng,
                                    modes[trial % len(modes)], contact))
        seconds.append(time.perf_counter() - start)
    return outcomes, seconds


def _share(flags) -> str:
    flags = list(flags)
    return f"{sum(flags)}/{len(flags)} = {sum(flags) / max(len(flags), 1):.1%}"


def test_fixture_fault_trials(benchmark, fixture):
    outcomes, seconds = benchmark.pedantic(_trials, args=(fixture, 11, FAULT_MODES),
                                           rounds=1, iterations=1)
    seen = [o for o in outcomes if o.detectable]
    sizes = [o.group_size for o in seen if o.rank == 1]
    line = (f"fault trials: {TRIALS}, signature above 3 sigma in "
            f"{_share(o.detectable for o in outcomes)}; "
            f"among those: first {_share(o.rank == 1 for o in seen)}, top 3 "
            f"{_share(1 <= o.rank <= 3 for o in seen)}, first as a single resistor "
            f"{_share(o.rank == 1 and o.group_size == 1 for o in seen)}, median group size "
            f"{np.median(sizes):.0f}, fault indicated {_share(o.fault_indicated for o in seen)}; "
            "a reading flagged (none corrupted) "
            f"{_share(bool(o.flagged) for o in outcomes)}; "
            "by mode first "
            + ", ".join(f"{m} {_share(o.rank == 1 for o in seen if o.mode == m)}"
                        for m in FAULT_MODES)
            + f"; median trial {np.median(seconds):.2f} s")
    print("\n" + line)
    benchmark.extra_info["result"] = line


def test_fixture_no_fault_trials(benchmark, fixture):
    outcomes, seconds = benchmark.pedantic(_trials, args=(fixture, 12, ("none",)),
                                           rounds=1, iterations=1)
    line = (f"no-fault trials: {TRIALS}; no fault indicated "
            f"{_share(not o.fault_indicated for o in outcomes)}; a reading flagged "
            f"{_share(bool(o.flagged) for o in outcomes)}; median trial {np.median(seconds):.2f} s")
    print("\n" + line)
    benchmark.extra_info["result"] = line


def test_fixture_contact_error_trials(benchmark, fixture):
    outcomes, seconds = benchmark.pedantic(_trials, args=(fixture, 13, FAULT_MODES, (1.0, 5.0)),
                                           rounds=1, iterations=1)
    both = [o for o in outcomes if o.detectable and o.contact_detectable]
    line = (f"contact-error trials: {TRIALS}, fault and contact error both above 3 sigma in "
            f"{_share(o.detectable and o.contact_detectable for o in outcomes)}; among those: "
            f"corrupted reading flagged {_share(o.contact_reading in o.flagged for o in both)}, "
            "another reading flagged "
            f"{_share(any(r != o.contact_reading for r in o.flagged) for o in both)}, "
            f"fault in the top 3 {_share(1 <= o.rank <= 3 for o in both)}, first "
            f"{_share(o.rank == 1 for o in both)}; median trial {np.median(seconds):.2f} s")
    print("\n" + line)
    benchmark.extra_info["result"] = line


def test_probe_choice_against_random(benchmark, fixture):
    """K = 20 readings chosen from 200 candidates (20 test-point voltages and 180 of the
    resistances between them) against 2K = 40 drawn at random (mean over 50 draws)."""
    net, _, _ = fixture
    rng = np.random.default_rng(21)
    lattice = np.flatnonzero(np.char.startswith(net.node_labels.astype(str), "N"))
    points = rng.choice(lattice, 20, replace=False)
    pairs = np.array(list(itertools.combinations(points, 2)))
    pairs = pairs[np.sort(rng.choice(len(pairs), 180, replace=False))]
    kind = np.array(["V"] * 20 + ["R"] * 180)
    a = np.concatenate([points, pairs[:, 0]])
    b = np.concatenate([np.full(20, net.reference), pairs[:, 1]])
    blank = Readings(kind, a, b, np.full(200, -1), np.full(200, np.nan), np.full(200, np.nan))
    values = build_model(net, blank).model_value
    candidates = Readings(kind, a, b, blank.branch, blank.measured,
                          Accuracy().band(kind, values))
    tolerance = np.full(net.n_branches, TOLERANCE)

    def run():
        model = build_model(net, candidates)
        return choose_readings(model, tolerance, 20)

    start = time.perf_counter()
    plan = benchmark.pedantic(run, rounds=1, iterations=1)
    seconds = time.perf_counter() - start
    universe = np.vstack([plan.faults.scaled[plan.seen], np.zeros((1, 200))])
    drawn = [plan.total_pairs - unseparated_pairs(universe, rng.choice(200, 40, replace=False))
             for _ in range(50)]
    line = (f"probe choice: {plan.faults.branch.size} faults, {plan.seen.size} seen by some "
            f"candidate, {plan.total_pairs} pairs; the tool's 20 readings separate "
            f"{plan.separated_pairs} ({plan.separated_pairs / plan.total_pairs:.2%}); 40 random "
            f"readings separate {np.mean(drawn):.0f} on average (min {min(drawn)}, max "
            f"{max(drawn)}, 50 draws); {len(plan.groups)} indistinguishable groups, largest "
            f"{plan.groups[0].size if plan.groups else 0}; choice {seconds:.1f} s")
    print("\n" + line)
    benchmark.extra_info["result"] = line
    assert plan.separated_pairs >= np.mean(drawn)


@pytest.fixture(scope="module")
def large():
    net = scattered_mesh(SIDE, pads=20, loads=200, load_amps=0.5, seed=1)
    rng = np.random.default_rng(2)
    nodes = rng.choice(np.flatnonzero(net.node_labels != "0"), min(500, net.n_nodes - 1),
                       replace=False)
    return net, nodes, build_model(net, voltage_readings(net, nodes))


def test_compare_with_part_bands_500_readings(benchmark, large):
    net, nodes, nominal = large
    measured = nominal.model_value * (1 + 1e-4)
    tolerance = np.full(net.n_branches, TOLERANCE)

    def run():
        stages = {}
        start = time.perf_counter()
        model = build_model(net, voltage_readings(net, nodes, measured))
        stages["model"] = time.perf_counter() - start
        start = time.perf_counter()
        model.systems["powered"].solve_adjoint()
        stages["adjoint"] = time.perf_counter() - start
        start = time.perf_counter()
        bands = reading_bands(model.readings.band, part_spread(model, tolerance))
        stages["spread"] = time.perf_counter() - start
        return compare(model, bands.band), stages

    result, stages = benchmark.pedantic(run, rounds=1, iterations=1)
    line = (f"compare with part bands: {net.n_nodes} nodes, {net.n_branches} branches, "
            f"{nodes.size} readings, {result.passed.sum()} passed; seconds "
            + ", ".join(f"{k} {v:.1f}" for k, v in stages.items())
            + f", total {sum(stages.values()):.1f}")
    print("\n" + line)
    benchmark.extra_info["result"] = line


def test_diagnose_on_real_parts_500_readings(benchmark, large):
    net, nodes, nominal = large
    touching = np.flatnonzero(np.isin(net.from_node, nodes) & (net.kind == RESISTOR))
    branch = int(touching[np.argmax(np.abs(nominal.solution.branch_current[touching]))])
    rng = np.random.default_rng(3)
    built = scattered(with_fault(net, branch, "value", 1.2), TOLERANCE, rng)
    true = build_model(built, voltage_readings(net, nodes)).model_value
    band = voltage_readings(net, nodes, true).band
    readings = voltage_readings(net, nodes, true + band * rng.uniform(-1, 1, true.size))
    tolerance = np.full(net.n_branches, TOLERANCE)

    def run():
        stages = {}
        start = time.perf_counter()
        model = build_model(net, readings, solution=nominal.solution)
        model.systems["powered"].solve_adjoint()
        stages["model and adjoint"] = time.perf_counter() - start
        start = time.perf_counter()
        spread = part_spread(model, tolerance, covariance=True)
        bands = reading_bands(model.readings.band, spread)
        stages["covariance"] = time.perf_counter() - start
        start = time.perf_counter()
        result = diagnose_parts(model, bands, spread.covariance, top=5)
        stages["rank, flag"] = time.perf_counter() - start
        return result, stages

    result, stages = benchmark.pedantic(run, rounds=1, iterations=1)
    best = result.ranking.hypotheses[0]
    line = (f"diagnose on real parts: {result.ranking.candidates} candidate resistors, "
            f"{nodes.size} readings, fault +20 % planted, parts within 1 %; fault indicated "
            f"{result.fault_indicated}; planted resistor in the first group "
            f"{branch in best.branches} (group of {best.branches.size}); flagged "
            f"{len(result.flagged)}; seconds "
            + ", ".join(f"{k} {v:.1f}" for k, v in stages.items())
            + f" (of which {', '.join(f'{k} {v:.1f}' for k, v in result.timings.items())})"
            + f", total {sum(stages.values()):.1f}")
    print("\n" + line)
    benchmark.extra_info["result"] = line
