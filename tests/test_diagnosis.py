"""Single-fault diagnosis: Sherman–Morrison predictions, injected faults, groups."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from ohmgraph.engine.readings.diagnosis import diagnose, predicted_change
from ohmgraph.engine.readings.model import Readings, build_model, compare
from ohmgraph.engine.network import CURRENT_SOURCE, RESISTOR, VOLTAGE_SOURCE, Network
from ohmgraph.engine.readings.sensitivity import resistor_candidates
from ohmgraph.engine.solve import NetworkNotSolvable


def without(net: Network, branch: int) -> Network:
    """The network with one branch open: made a 0 A current source, so indices stay valid."""
    kind, value = net.kind.copy(), net.value.copy()
    kind[branch], value[branch] = CURRENT_SOURCE, 0.0
    return Network(net.node_labels, net.branch_names, kind, net.from_node, net.to_node, value,
                   net.reference)


def mesh(rows: int, cols: int, seed: int) -> Network:
    """A grid of 1-2 ohm resistors fed by two 3.3 V pads, with five 50 mA loads."""
    rng = np.random.default_rng(seed)
    graph = nx.relabel_nodes(nx.grid_2d_graph(rows, cols), lambda rc: f"{rc[0]}_{rc[1]}")
    edges = list(graph.edges)
    frm = [u for u, _ in edges] + ["0_0", f"{rows - 1}_{cols - 1}"]
    to = [v for _, v in edges] + ["0", "0"]
    values = list(rng.uniform(1.0, 2.0, len(edges))) + [3.3, 3.3]
    kinds = ["R"] * len(edges) + ["V", "V"]
    labels = np.array(list(graph.nodes))
    for node in rng.choice(labels, 5, replace=False):
        frm.append(str(node))
        to.append("0")
        values.append(0.05)
        kinds.append("I")
    return Network.from_arrays(frm, to, values, kinds)


def mixed_readings(net: Network, rng: np.random.Generator) -> Readings:
    nodes = net.node_labels
    picks = rng.choice(nodes.size, 8, replace=False)
    branches = np.concatenate([resistor_candidates(net)[:2],
                               np.flatnonzero(net.kind == VOLTAGE_SOURCE)[:1],
                               np.flatnonzero((net.kind == RESISTOR) & (net.value == 0))[:1]])
    kinds = ["V", "V", "V"] + ["I"] * branches.size + ["R", "R"]
    a = list(nodes[picks[:3]]) + list(net.branch_names[branches]) + list(nodes[picks[3:5]])
    b = ["", nodes[picks[5]], ""] + [""] * branches.size + list(nodes[picks[6:8]])
    return Readings.from_labels(net, kinds, a, b)


@pytest.mark.parametrize("seed", [4, 5])
def test_sherman_morrison_matches_full_resolve(make_network, seed):
    # Reference: a full re-solve of the network with the branch changed (or removed, for an
    # open); the rank-one update is exact (Sherman & Morrison, Ann. Math. Statist. 21, 1950).
    net = make_network(seed, n_nodes=40, extra_resistors=40)
    rng = np.random.default_rng(seed)
    readings = mixed_readings(net, rng)
    model = build_model(net, readings)
    checked = 0
    for branch in rng.choice(resistor_candidates(net), 8, replace=False):
        for factor in (1.3, 0.5, 1e-6, np.inf):
            if np.isinf(factor):
                try:
                    changed = build_model(without(net, branch), readings)
                except NetworkNotSolvable:
                    continue                      # the open would leave part of it floating
            else:
                ohms = net.value.copy()
                ohms[branch] *= factor
                changed = build_model(net.with_values(ohms), readings)
            if not changed.usable.all():
                continue
            expected = changed.model_value - model.model_value
            predicted = predicted_change(model, int(branch), net.value[branch] * factor)
            scale = np.maximum(np.abs(model.model_value), np.abs(changed.model_value)) + 1e-12
            assert np.all(np.abs(predicted - expected) <= 1e-7 * scale)
            checked += 1
    assert checked >= 20


def _trial(net, model_net, branch, mode, readings):
    """Readings taken on the network with one injected fault (a full re-solve)."""
    if mode == "open":
        faulty = without(net, branch)
    else:
        ohms = net.value.copy()
        ohms[branch] *= {"short": 1e-6, "+20%": 1.2, "-20%": 0.8}[mode]
        faulty = net.with_values(ohms)
    measured = build_model(faulty, readings).model_value
    return Readings(readings.kind, readings.node_a, readings.node_b, readings.branch, measured,
                    1e-3 * np.abs(measured) + 1e-4)


def test_injected_single_faults_are_ranked_first():
    # Acceptance rule of the fault benchmark: where the readings exceed their accuracy, the
    # injected branch (or its indistinguishable group) is ranked first in >= 95 % of trials.
    # Readings are exact re-solves of the faulty network (a full solve per trial, independent
    # of the rank-one updates being tested).
    net = mesh(9, 9, seed=8)
    rng = np.random.default_rng(8)
    labels = rng.choice(net.node_labels, 24, replace=False)
    pairs = rng.choice(net.node_labels[net.node_labels != "0"], (3, 2), replace=False)
    template = Readings.from_labels(net, ["V"] * 24 + ["R"] * 3,
                                    list(labels) + list(pairs[:, 0]), [""] * 24 + list(pairs[:, 1]))
    nominal = build_model(net, template)
    counted = first = 0
    for trial, branch in enumerate(rng.choice(resistor_candidates(net), 24, replace=False)):
        mode = ("open", "short", "+20%", "-20%")[trial % 4]
        readings = _trial(net, nominal, int(branch), mode, template)
        model = build_model(net, readings, solution=nominal.solution)
        if compare(model).all_passed:
            continue
        counted += 1
        result = diagnose(model, top=3)
        best = result.hypotheses[0]
        first += int(branch in best.branches)
        if branch in best.branches and mode in ("open", "short"):
            assert best.kinds[list(best.branches).index(branch)] == mode
    assert counted >= 12
    assert first >= 0.95 * counted


def test_series_resistors_form_one_group():
    # Two resistors in series carry one current; from outside only their sum is seen, so a
    # value change of either explains the readings equally (series rule; common practice).
    # The supply current tells a change of the shunt RC apart from one of the series pair.
    net = Network.from_arrays(
        ["s", "s", "m", "x", "x", "y"], ["0", "m", "x", "0", "y", "0"],
        [5.0, 100.0, 220.0, 330.0, 470.0, 560.0], ["V", "R", "R", "R", "R", "R"],
        ["VS", "RA", "RB", "RC", "RD", "RE"])
    ohms = net.value.copy()
    ohms[2] = 300.0                                  # RB fitted wrong: 300 instead of 220 ohm
    faulty = net.with_values(ohms)
    template = Readings.from_labels(net, ["V", "V", "I"], ["x", "y", "VS"], ["", "", ""])
    measured = build_model(faulty, template).model_value
    readings = Readings(template.kind, template.node_a, template.node_b, template.branch,
                        measured, np.array([1e-4, 1e-4, 1e-7]))
    result = diagnose(build_model(net, readings), top=3)
    best = result.hypotheses[0]
    assert sorted(net.branch_names[best.branches].tolist()) == ["RA", "RB"]
    assert best.chi2 == pytest.approx(0.0, abs=1e-6)
    # Each member's estimate keeps the series sum: 100 + 300 = 400 ohm.
    estimates = dict(zip(net.branch_names[best.branches].tolist(), best.estimated_ohms))
    assert estimates["RB"] == pytest.approx(300.0, rel=1e-5)
    assert estimates["RA"] == pytest.approx(180.0, rel=1e-5)


def test_no_fault_readings_rank_with_baseline_chi2():
    net = mesh(5, 5, seed=2)
    template = Readings.from_labels(net, ["V"] * 4, ["1_1", "2_3", "4_4", "3_0"], [""] * 4)
    nominal = build_model(net, template).model_value
    readings = Readings(template.kind, template.node_a, template.node_b, template.branch,
                        nominal, np.full(4, 1e-3))
    result = diagnose(build_model(net, readings), top=2)
    assert result.baseline_chi2 == pytest.approx(0.0, abs=1e-12)
    assert result.exact and len(result.hypotheses) == 2
    assert result.solves["adjoint"] == 4
