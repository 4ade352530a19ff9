"""Adjoint sensitivities, tolerance spread and Monte Carlo."""

from __future__ import annotations

import numpy as np
import pytest

from ohmgraph.engine.readings.model import Readings, build_model
from ohmgraph.engine.network import CURRENT_SOURCE, RESISTOR, VOLTAGE_SOURCE, Network
from ohmgraph.engine.readings.sensitivity import (monte_carlo, resistance_sensitivity,
                                         resistor_candidates, tolerance_spread)


def divider(vin=12.0, r1=1500.0, r2=4700.0) -> Network:
    return Network.from_arrays(["in", "in", "out"], ["0", "out", "0"], [vin, r1, r2],
                               ["V", "R", "R"], ["VS", "R1", "R2"])


def test_divider_closed_form_sensitivities():
    # Differentiating Vout = Vin R2 / (R1 + R2): dVout/dR1 = -Vin R2/(R1+R2)^2 and
    # dVout/dR2 = Vin R1/(R1+R2)^2 (closed form; common practice).
    vin, r1, r2 = 12.0, 1500.0, 4700.0
    net = divider(vin, r1, r2)
    model = build_model(net, Readings.from_labels(net, ["V"], ["out"], [""]))
    resistors = resistor_candidates(net)
    sensitivity = resistance_sensitivity(model, resistors)[:, 0]
    assert sensitivity == pytest.approx([-vin * r2 / (r1 + r2) ** 2, vin * r1 / (r1 + r2) ** 2],
                                        rel=1e-12)


def test_divider_resistance_reading_sensitivity():
    # Sources zeroed, node "in" is grounded through the source, so R(out, 0) = R1 || R2 and
    # d(R1 R2/(R1+R2))/dR1 = (R2/(R1+R2))^2 (closed form; common practice).
    r1, r2 = 1500.0, 4700.0
    net = divider(12.0, r1, r2)
    model = build_model(net, Readings.from_labels(net, ["R"], ["out"], ["0"]))
    assert model.model_value[0] == pytest.approx(r1 * r2 / (r1 + r2), rel=1e-12)
    sensitivity = resistance_sensitivity(model, resistor_candidates(net))[:, 0]
    assert sensitivity == pytest.approx([(r2 / (r1 + r2)) ** 2, (r1 / (r1 + r2)) ** 2], rel=1e-12)


def _mixed_readings(net: Network, rng: np.random.Generator) -> Readings:
    """Voltage, current (resistor, V source, ideal connection, I source) and resistance readings."""
    nodes = net.node_labels
    picks = rng.choice(nodes.size, 8, replace=False)
    ideal = np.flatnonzero((net.kind == RESISTOR) & (net.value == 0))[:1]
    branches = np.concatenate([resistor_candidates(net)[:2],
                               np.flatnonzero(net.kind == VOLTAGE_SOURCE)[:2], ideal,
                               np.flatnonzero(net.kind == CURRENT_SOURCE)[:1]])
    kinds = ["V", "V", "V"] + ["I"] * branches.size + ["R", "R"]
    a = list(nodes[picks[:3]]) + list(net.branch_names[branches]) + list(nodes[picks[3:5]])
    b = ["", nodes[picks[5]], ""] + [""] * branches.size + list(nodes[picks[6:8]])
    return Readings.from_labels(net, kinds, a, b)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_adjoint_sensitivities_match_central_differences(make_network, seed):
    # Reference: central finite differences of re-solved networks, (r(R+h) - r(R-h)) / 2h,
    # truncation error O(h^2) (common practice).
    net = make_network(seed, n_nodes=40, extra_resistors=40)
    rng = np.random.default_rng(seed)
    readings = _mixed_readings(net, rng)
    model = build_model(net, readings)
    assert model.usable.all()
    resistors = resistor_candidates(net)
    chosen = rng.choice(resistors, 12, replace=False)
    adjoint = resistance_sensitivity(model, chosen)
    for row, branch in enumerate(chosen):
        step = 1e-5 * net.value[branch]
        values = []
        for sign in (1.0, -1.0):
            ohms = net.value.copy()
            ohms[branch] += sign * step
            values.append(build_model(net.with_values(ohms), readings).model_value)
        central = (values[0] - values[1]) / (2 * step)
        scale = np.abs(adjoint).max(axis=0) + 1e-300
        assert np.all(np.abs(central - adjoint[row]) <= 1e-6 * scale)


def test_tolerance_spread_of_divider():
    # Worst case of a divider at tolerance t on both resistors: |dV/dR1| t R1 + |dV/dR2| t R2
    # = 2 t Vin R1 R2/(R1+R2)^2, and the root-sum-square is sqrt(2) t Vin R1 R2/(R1+R2)^2
    # (first-order tolerance analysis; common practice).
    vin, r1, r2, t = 12.0, 1500.0, 4700.0, 0.01
    net = divider(vin, r1, r2)
    model = build_model(net, Readings.from_labels(net, ["V"], ["out"], [""]))
    spread = tolerance_spread(model, np.full(net.n_branches, t))
    unit = t * vin * r1 * r2 / (r1 + r2) ** 2
    assert spread.worst_case[0] == pytest.approx(2 * unit, rel=1e-12)
    assert spread.rss[0] == pytest.approx(np.sqrt(2) * unit, rel=1e-12)
    assert spread.resistors[spread.top_contributors(0, 1)[0]] in (1, 2)


def test_monte_carlo_agrees_with_linear_rss_for_small_tolerances(make_network):
    # For values uniform within +-t the variance of each term is (t R dV/dR)^2 / 3 and
    # independent variances add (Bienaymé), so the linear model predicts std = rss / sqrt(3).
    # The sample std of N draws is within a few times 1/sqrt(2N) of the truth (sampling error
    # of a standard deviation; common practice): here 1/sqrt(2*800) = 2.5 %, we allow 10 %.
    net = make_network(11, n_nodes=30, extra_resistors=20)
    labels = net.node_labels[[3, 9, 17]]
    readings = Readings.from_labels(net, ["V"] * 3, labels, [""] * 3)
    model = build_model(net, readings)
    tolerance = np.full(net.n_branches, 0.002)
    spread = tolerance_spread(model, tolerance)
    carlo = monte_carlo(model, tolerance, samples=800, seed=3)
    assert carlo.std == pytest.approx(spread.linear_std_uniform, rel=0.10)
    # Every sample lies within the first-order worst case (triangle inequality on the linear
    # model; second-order terms at t = 0.2 % are far smaller than the slack allowed here).
    deviation = np.abs(carlo.values - model.model_value).max(axis=0)
    assert np.all(deviation <= spread.worst_case * 1.01)


def test_monte_carlo_of_current_and_resistance_readings():
    # Each sample re-builds the model of the sampled divider: I(R1) = Vin/(R1+R2) and
    # R(out, 0) = R1 R2/(R1+R2) (closed forms; common practice) with the sampled values.
    net = divider()
    model = build_model(net, Readings.from_labels(net, ["I", "R"], ["R1", "out"], ["", "0"]))
    tolerance = np.full(net.n_branches, 0.01)
    carlo = monte_carlo(model, tolerance, samples=3, seed=5)
    rng = np.random.default_rng(5)
    resistors = resistor_candidates(net)
    for sample in range(3):
        ohms = net.value[resistors] * (1 + 0.01 * rng.uniform(-1, 1, resistors.size))
        r1, r2 = ohms
        assert carlo.values[sample] == pytest.approx([12.0 / (r1 + r2), r1 * r2 / (r1 + r2)],
                                                     rel=1e-10)
