"""Supply drop per net and limit checks (engine) on hand-worked networks and a generated mesh."""

from __future__ import annotations

import numpy as np
import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine import Network, solve
from ohmgraph.engine.drop import Threshold, find_nets, supply_drop
from ohmgraph.engine.limits import branch_utilisation, check_limits


def divider():
    """5 V across 2 ohm + 3 ohm: 1 A, V(mid) = 3 V (common practice: Ohm's law)."""
    return Network.from_arrays(["in", "in", "mid"], ["0", "mid", "0"], [5.0, 2.0, 3.0],
                               ["V", "R", "R"], names=["V1", "R1", "R2"])


def loaded_ladder():
    """10 V pad at a; a-b 1 ohm, b-c 1 ohm; 1 A drawn at b and at c.

    Worked by hand (KCL, Ohm's law; common practice): 2 A in a-b, 1 A in b-c, V(b) = 8 V,
    V(c) = 7 V; drops 2 V (20 %) and 3 V (30 %); powers 4 W and 1 W.
    """
    return Network.from_arrays(["a", "a", "b", "b", "c"], ["0", "b", "c", "0", "0"],
                               [10.0, 1.0, 1.0, 1.0, 1.0], ["V", "R", "R", "I", "I"],
                               names=["pad", "Rab", "Rbc", "Ib", "Ic"])


def supply_and_ground():
    """A 5 V pad feeding vdd through 0.5 ohm; a 1 A load from vdd into the ground net g,
    which returns to the reference through 0.2 ohm.

    By hand (common practice): V(vdd) = 5 - 0.5 = 4.5 V (drop 0.5 V, 10 %);
    V(g) = 0.2 V, a 0 V net, so its drop is |V| = 0.2 V (ground bounce).
    """
    return Network.from_arrays(["pad", "pad", "vdd", "g"], ["0", "vdd", "g", "0"],
                               [5.0, 0.5, 1.0, 0.2], ["V", "R", "I", "R"],
                               names=["V1", "Rpad", "load", "Rgnd"])


def test_divider_drop():
    net = divider()
    drop = supply_drop(net, solve(net).node_voltage)
    mid = net.node_index("mid")[0]
    assert drop.n_nets == 1 and drop.nominal[0] == pytest.approx(5.0)
    assert drop.drop[mid] == pytest.approx(2.0)
    assert drop.worst_node[0] == mid and drop.worst_drop[0] == pytest.approx(2.0)
    assert drop.held[net.node_index("in")[0]] and np.isnan(drop.drop[net.reference])
    np.testing.assert_array_equal(drop.over[0], [1, 1, 1, 1])       # 40 % is over 1..10 %


def test_ladder_drop_and_thresholds():
    net = loaded_ladder()
    solution = solve(net)
    thresholds = (Threshold(0.25, True), Threshold(2.5, False))
    drop = supply_drop(net, solution.node_voltage, thresholds=thresholds)
    b, c = net.node_index(["b", "c"])
    assert drop.drop[b] == pytest.approx(2.0) and drop.drop[c] == pytest.approx(3.0)
    np.testing.assert_array_equal(drop.over[0], [1, 1])              # only c: 30 % > 25 %, 3 > 2.5 V
    np.testing.assert_array_equal(drop.worst_nodes(5), [c, b])
    # an imposed nominal moves every drop by the same amount
    imposed = supply_drop(net, solution.node_voltage, nominal=12.0)
    assert imposed.drop[c] == pytest.approx(5.0)


def test_ground_net_drop_is_magnitude():
    net = supply_and_ground()
    drop = supply_drop(net, solve(net).node_voltage)
    vdd, g = net.node_index(["vdd", "g"])
    assert drop.n_nets == 2                            # the current source joins no nets
    assert drop.nominal[drop.node_net[vdd]] == pytest.approx(5.0)
    assert drop.nominal[drop.node_net[g]] == 0.0
    assert drop.drop[vdd] == pytest.approx(0.5) and drop.drop[g] == pytest.approx(0.2)
    assert (drop.over[drop.node_net[g]] == -1).all()   # a percentage of 0 V does not apply


def test_nets_ignore_sources_and_reference():
    net = loaded_ladder()
    node_net, count = find_nets(net)
    assert count == 1 and node_net[net.reference] == -1


def test_limits_on_the_ladder():
    net = loaded_ladder()
    solution = solve(net)
    drop = supply_drop(net, solution.node_voltage)
    max_current = np.array([np.nan, 1.5, 2.0, np.nan, np.nan])     # Rab carries 2 A: 133 %
    max_power = np.array([np.nan, np.nan, 0.5, np.nan, np.nan])    # Rbc dissipates 1 W: 200 %
    found = check_limits(net, drop, solution.branch_current, solution.branch_power,
                         max_drop=Threshold(0.25, True), max_current=max_current,
                         max_power=max_power)
    assert list(found.quantity) == ["power", "current", "drop"]
    np.testing.assert_allclose(found.utilisation, [2.0, 2 / 1.5, 3 / 2.5])
    rab, rbc = 1, 2
    assert list(found.index) == [rbc, rab, net.node_index("c")[0]]
    # a global current limit applies to resistors only, and the smaller limit wins
    found = check_limits(net, drop, solution.branch_current, solution.branch_power,
                         max_current=max_current, global_current=0.5)
    assert sorted(found.index.tolist()) == [rab, rbc]
    assert found.limit.tolist() == [0.5, 0.5]
    utilisation = branch_utilisation(net, solution.branch_current, solution.branch_power,
                                     max_current, max_power)
    np.testing.assert_allclose(utilisation[[rab, rbc]], [2 / 1.5, 2.0])
    assert np.isnan(utilisation[0])


def test_generated_mesh_drop_matches_direct_computation():
    net = grid2d(40, 40, 0.01, pads=4, loads=200, load_amps=1e-3, supply_volts=0.9, seed=7)
    solution = solve(net)
    drop = supply_drop(net, solution.node_voltage)
    held = drop.held
    mesh = np.flatnonzero((np.arange(net.n_nodes) != net.reference) & ~held)
    expected = 0.9 - solution.node_voltage[mesh]
    assert drop.n_nets == 1 and drop.nominal[0] == pytest.approx(0.9)
    np.testing.assert_allclose(drop.drop[mesh], expected, atol=1e-12)
    assert drop.worst_drop[0] == pytest.approx(expected.max())
    assert drop.over[0, 0] == int(np.count_nonzero(expected > 0.009))
    assert held.sum() == 4 and drop.size[0] == 1600


def test_worst_per_net_agrees_with_sorting():
    from ohmgraph.engine.drop import _worst_per_net, _worst_per_net_reference

    rng = np.random.default_rng(5)
    for _ in range(300):
        n, k = int(rng.integers(1, 40)), int(rng.integers(1, 5))
        node_net = rng.integers(-1, k, n)
        drop = rng.integers(0, 4, n).astype(float)         # ties on purpose
        counted = (node_net >= 0) & (rng.random(n) < 0.8)
        fast = _worst_per_net(node_net, drop, counted, k)
        plain = _worst_per_net_reference(node_net, drop, counted, k)
        np.testing.assert_array_equal(fast[0], plain[0])
        np.testing.assert_array_equal(fast[1], plain[1])
