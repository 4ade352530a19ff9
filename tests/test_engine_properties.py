"""Circuit laws every solution must obey, on networks drawn by hypothesis: KCL, Tellegen's
theorem, reciprocity, superposition and how the solution scales with the resistances."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from ohmgraph.engine import Network, solve
from ohmgraph.engine.network import RESISTOR

SETTINGS = settings(max_examples=50, deadline=None)
OHMS = st.floats(0.1, 100.0)


@st.composite
def tree_edges(draw, n):
    """Edges ``(parent, child)`` of a spanning tree on ``n`` nodes, each child after its parent."""
    return [(draw(st.integers(0, child - 1)), child) for child in range(1, n)]


@st.composite
def networks(draw, voltage_sources=True, current_sources=True, ideal_connections=True):
    """A connected network: a resistor spanning tree, extra resistors, and optionally voltage
    sources / ideal connections on a subset of a second tree (so they close no loop of their
    own) and current sources between any two nodes. Reference ``"0"``."""
    n = draw(st.integers(2, 25))
    branches = [(a, b, "R", draw(OHMS)) for a, b in draw(tree_edges(n))]
    pair = st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)).filter(lambda p: p[0] != p[1])
    branches += [(a, b, "R", draw(OHMS)) for a, b in draw(st.lists(pair, max_size=2 * n))]
    constrained_kinds = ["V"] * voltage_sources + ["ideal"] * ideal_connections
    if constrained_kinds:
        for a, b in draw(tree_edges(n)):
            kind = draw(st.sampled_from([None, *constrained_kinds]))
            if kind == "V":
                branches.append((a, b, "V", draw(st.floats(-10.0, 10.0))))
            elif kind == "ideal":
                branches.append((a, b, "R", 0.0))
    if current_sources:
        branches += [(a, b, "I", draw(st.floats(-2.0, 2.0)))
                     for a, b in draw(st.lists(pair, min_size=1, max_size=n))]
    frm, to, kinds, values = zip(*branches)
    return Network.from_arrays(frm, to, values, kinds, reference="0", node_labels=range(n))


def incidence(net: Network) -> sp.csr_matrix:
    """Branch-node incidence matrix (+1 at ``from``, -1 at ``to``), built here from scratch."""
    m = net.n_branches
    rows = np.concatenate([np.arange(m), np.arange(m)])
    cols = np.concatenate([net.from_node, net.to_node])
    data = np.concatenate([np.ones(m), -np.ones(m)])
    return sp.csr_matrix((data, (rows, cols)), shape=(m, net.n_nodes))


@SETTINGS
@given(networks())
def test_kcl_holds_at_every_node(net):
    # KCL (Kirchhoff 1845): B^T i = 0 at every node, recomputed here from all branch currents.
    solution = solve(net)
    net_current = incidence(net).T @ solution.branch_current
    scale = np.abs(solution.branch_current).max() + 1.0
    assert np.abs(net_current).max() <= 1e-9 * scale
    assert solution.kcl_max_residual <= 1e-9 * scale


@SETTINGS
@given(networks())
def test_power_balances(net):
    # Tellegen's theorem (B. D. H. Tellegen, Philips Res. Rep. 7, 259-269, 1952): with branch
    # voltages from node potentials and currents obeying KCL, sum_k v_k i_k = 0.
    solution = solve(net)
    voltage = incidence(net) @ solution.node_voltage
    np.testing.assert_allclose(solution.branch_voltage, voltage, rtol=0, atol=1e-12)
    power = voltage * solution.branch_current
    assert abs(power.sum()) <= 1e-9 * (np.abs(power).sum() + 1e-12)
    # Resistors absorb what the sources deliver, and never a negative amount (passivity).
    resistor_power = power[net.kind == RESISTOR]
    assert resistor_power.min() >= -1e-12 * (np.abs(power).sum() + 1e-12)


def transfer_resistance(net: Network, drive: int, probe: int) -> float:
    """``V(probe)`` when 1 A is driven from the reference into node ``drive``."""
    driven = Network.from_arrays(
        np.append(net.from_node, net.reference), np.append(net.to_node, drive),
        np.append(net.value, 1.0), list(np.array(["R", "V", "I"])[net.kind]) + ["I"],
        reference=str(net.reference), node_labels=range(net.n_nodes))
    return float(solve(driven).node_voltage[probe])


@SETTINGS
@given(networks(voltage_sources=False, current_sources=False), st.data())
def test_transfer_resistance_is_reciprocal(net, data):
    # Reciprocity theorem for networks of resistors (e.g. C. A. Desoer & E. S. Kuh, *Basic
    # Circuit Theory*, 1969, ch. 16; recalled from memory): V(b) with 1 A into a equals V(a)
    # with 1 A into b.
    a = data.draw(st.integers(0, net.n_nodes - 1))
    b = data.draw(st.integers(0, net.n_nodes - 1))
    forward, backward = transfer_resistance(net, a, b), transfer_resistance(net, b, a)
    assert abs(forward - backward) <= 1e-9 * max(abs(forward), 1e-12)


@SETTINGS
@given(networks())
def test_superposition_of_voltage_and_current_sources(net):
    # Superposition (linear network; common practice): the solution with all sources equals the
    # sum of the solutions with only the voltage sources and with only the current sources.
    only_v = net.with_values(np.where(net.kind == 2, 0.0, net.value))
    only_i = net.with_values(np.where(net.kind == 1, 0.0, net.value))
    whole = solve(net)
    parts = solve(only_v).node_voltage + solve(only_i).node_voltage
    scale = np.abs(whole.node_voltage).max() + 1e-3
    np.testing.assert_allclose(whole.node_voltage, parts, rtol=0, atol=1e-9 * scale)


@SETTINGS
@given(networks(voltage_sources=False), st.floats(0.01, 100.0))
def test_current_driven_voltages_scale_with_resistance(net, k):
    # Driven by current sources only: KCL fixes the currents independently of a common factor
    # on every resistance, so all currents stay and all voltages scale by k (Ohm's law;
    # common practice).
    base = solve(net)
    scaled = solve(net.with_values(np.where(net.kind == RESISTOR, k * net.value, net.value)))
    np.testing.assert_allclose(scaled.node_voltage, k * base.node_voltage, rtol=1e-9,
                               atol=1e-12 * k * (np.abs(base.node_voltage).max() + 1e-3))
    np.testing.assert_allclose(scaled.branch_current, base.branch_current, rtol=1e-9,
                               atol=1e-12 * (np.abs(base.branch_current).max() + 1e-3))


@SETTINGS
@given(networks(current_sources=False), st.floats(0.01, 100.0))
def test_voltage_driven_currents_scale_inversely_with_resistance(net, k):
    # Driven by voltage sources only: KVL fixes the node voltages independently of a common
    # factor on every resistance, so all voltages stay and all currents scale by 1/k (Ohm's law;
    # common practice).
    base = solve(net)
    scaled = solve(net.with_values(np.where(net.kind == RESISTOR, k * net.value, net.value)))
    np.testing.assert_allclose(scaled.node_voltage, base.node_voltage, rtol=1e-9,
                               atol=1e-12 * (np.abs(base.node_voltage).max() + 1e-3))
    np.testing.assert_allclose(scaled.branch_current, base.branch_current / k, rtol=1e-9,
                               atol=1e-12 * (np.abs(base.branch_current).max() + 1e-3) / k)
