"""Choosing readings: fault signatures against full re-solves, greedy against exhaustive search."""

from __future__ import annotations

import itertools
import json
from importlib import resources

import numpy as np
import pytest

from ohmgraph.datasets.fixture import with_fault
from ohmgraph.engine.readings.model import Readings, build_model
from ohmgraph.engine.readings.probes import choose_readings, fault_signatures, FAULT_KINDS
from ohmgraph.io.cli import main
from test_diagnosis import mesh

TOLERANCE = 0.01


def candidates(net, count_v=6, count_r=6, seed=0):
    rng = np.random.default_rng(seed)
    nodes = np.flatnonzero(net.node_labels != "0")
    volt = rng.choice(nodes, count_v, replace=False)
    pairs = [rng.choice(nodes, 2, replace=False) for _ in range(count_r)]
    kind = np.array(["V"] * count_v + ["R"] * count_r)
    a = np.concatenate([volt, [p[0] for p in pairs]])
    b = np.concatenate([np.full(count_v, net.reference), [p[1] for p in pairs]])
    blank = Readings(kind, a, b, np.full(kind.size, -1), np.full(kind.size, np.nan),
                     np.full(kind.size, np.nan))
    values = build_model(net, blank).model_value
    band = np.where(kind == "V", 1e-3 * np.abs(values) + 1e-4, 2e-3 * values + 0.01)
    return build_model(net, Readings(kind, a, b, blank.branch, blank.measured, band))


def brute_unseparated(rows: np.ndarray) -> int:
    """Pairs of rows within 1 of each other in every column (all pairs compared)."""
    distance = np.abs(rows[:, None, :] - rows[None, :, :]).max(axis=2, initial=0.0)
    return int(np.triu(distance <= 1.0, k=1).sum())


def test_signatures_match_full_resolves():
    # Reference: the readings of the faulty network re-solved in full (open: the resistor
    # removed; short: 1e-6 x; high/low: x 1.2 / x 0.8), minus the nominal ones, over 3 sigma.
    net = mesh(4, 4, seed=1)
    model = candidates(net)
    faults = fault_signatures(model, np.full(net.n_branches, TOLERANCE))
    readings = model.readings
    template = Readings(readings.kind, readings.node_a, readings.node_b, readings.branch,
                        readings.measured, readings.band)
    for row in [0, 7, 30, 31 + 24, 2 * 24 + 5, 3 * 24 + 11]:
        branch, kind = int(faults.branch[row]), faults.kind[row]
        faulty = {"open": with_fault(net, branch, "open"),
                  "short": with_fault(net, branch, "short"),
                  "high": with_fault(net, branch, "value", 1.2),
                  "low": with_fault(net, branch, "value", 0.8)}[kind]
        change = build_model(faulty, template).model_value - model.model_value
        assert faults.scaled[row] * 3 * faults.sigma == pytest.approx(change, rel=1e-6,
                                                                      abs=1e-9)


def test_greedy_against_exhaustive_search():
    # Greedy choice on a coverage function: the first pick is the best single reading and the
    # pair is within 1 - 1/e of the best pair (Nemhauser, Wolsey & Fisher, 1978); the counts
    # agree with an all-pairs count.
    net = mesh(4, 4, seed=2)
    model = candidates(net, 5, 5, seed=2)
    tolerance = np.full(net.n_branches, TOLERANCE)
    plan = choose_readings(model, tolerance, 2)
    universe = np.vstack([plan.faults.scaled[plan.seen], np.zeros((1, model.readings.n))])
    total = plan.total_pairs
    assert total == universe.shape[0] * (universe.shape[0] - 1) // 2
    singles = [total - brute_unseparated(universe[:, [c]]) for c in range(model.readings.n)]
    assert plan.gains[0] == max(singles)
    pairs = [total - brute_unseparated(universe[:, list(c)])
             for c in itertools.combinations(range(model.readings.n), 2)]
    assert plan.separated_pairs == total - brute_unseparated(universe[:, plan.chosen])
    assert plan.separated_pairs >= (1 - 1 / np.e) * max(pairs)
    assert plan.separated_pairs == plan.gains.sum()
    assert set(FAULT_KINDS) == set(plan.faults.kind)


def test_pick_readings_on_the_coupon(tmp_path, capsys):
    # RF1 and RF2 are in series (only the jumper JP1 follows): opening either cuts the feed,
    # so no reading can tell the two opens apart (common practice).
    examples = resources.files("ohmgraph.datasets") / "examples"
    points = tmp_path / "tp.csv"
    points.write_text("node\nTP_1_1\nTP_1_3\nTP_2_2\nTP_2_4\nTP_3_1\nTP_3_3\n")
    out = tmp_path / "plan.csv"
    code = main(["pick-readings", str(examples / "trim_coupon.csv"), "--test-points",
                 str(points), "--budget", "4", "--accuracy", "0.05%+0.5mV", "--accuracy",
                 "0.2%+0.05ohm", "--default", "1%", "-o", str(out), "--json"])
    report = json.loads(capsys.readouterr().out)
    assert code == 0
    summary = report["summary"]
    assert summary["candidates"] == 6 + 15 and summary["chosen"] == 4
    assert summary["faults"] == 4 * 21
    assert ["RF1 open", "RF2 open"] in report["indistinguishable"]
    steps = [row["separated_total"] for row in report["readings"]]
    assert steps == sorted(steps) and steps[-1] == summary["pairs_separated"]
    assert out.read_text().startswith("step,kind,a,b,model,sigma")
