"""Factor-reach values and their rigorous bound (engine/resistance/reach.py, factor_bound.py)."""

from __future__ import annotations

import math

import mpmath
import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.network import RESISTOR, Network
from ohmgraph.engine.resistance import ResistanceSolver
from ohmgraph.engine.resistance.factor_bound import (factor_rho, factor_rho_reference,
                                                     pair_bounds)
from ohmgraph.engine.resistance.reach import (FactorPairs, column_rounding, column_rounding_reference,
                                              pair_energies_reference, tree_closed,
                                              tree_closed_reference)
from ohmgraph.engine.resistance.accuracy import UNIT_ROUNDOFF


def reach_solver(net: Network, pairs: int = 100) -> ResistanceSolver:
    solver = ResistanceSolver(net, method="direct")
    solver.prepare(pairs)
    assert solver.factor_pairs() is not None
    return solver


def random_lattice(side: int, seed: int, pads: int = 3) -> Network:
    net = grid2d(side, side, 1.0, pads=pads, seed=seed)
    resistors = net.kind == RESISTOR
    values = net.value.copy()
    values[resistors] = np.random.default_rng(seed).uniform(0.2, 5.0, resistors.sum())
    return net.with_values(values)


# ------------------------------------------------------------------ kernels against references
def test_kernels_match_their_references():
    solver = reach_solver(random_lattice(24, 1))
    reach = solver.factor_pairs()
    lu = solver.session.factors
    np.testing.assert_allclose(column_rounding(reach.indptr, reach.indices, reach.data,
                                               reach.row_count, UNIT_ROUNDOFF),
                               column_rounding_reference(reach.lower, reach.row_count),
                               rtol=1e-12)
    assert tree_closed(reach.indptr, reach.indices, reach.parent)
    assert tree_closed_reference(reach.lower)
    np.testing.assert_allclose(factor_rho(reach.lower, lu.U.tocsc(), reach.pivot),
                               factor_rho_reference(reach.lower, lu.U.tocsc()), rtol=1e-12)
    rng = np.random.default_rng(2)
    into, out = rng.integers(-1, solver.free.size, (2, 60))      # -1: the grounded node
    a, b = reach.positions(into), reach.positions(out)
    expected = pair_energies_reference(lu.L, reach.pivot, a, b)
    assert reach.top < reach.n
    np.testing.assert_allclose(reach.energies(into, out), expected, rtol=1e-12)
    # all sparse, and a larger dense trailing block: the same values and rounding terms
    for dense in (0, 200):
        other = FactorPairs(lu, dense_top=dense)
        np.testing.assert_allclose(other.energies(into, out), expected, rtol=1e-12)
        np.testing.assert_allclose(other.forward(into, out)[1], reach.forward(into, out)[1],
                                   rtol=1e-10)


def test_a_pattern_not_closed_along_its_tree_is_refused():
    # column 0 reaches rows 1 and 3, its parent (row 1) does not reach row 3
    lower = sp.csc_matrix(np.array([[1, 0, 0, 0], [1, 1, 0, 0], [0, 1, 1, 0], [1, 0, 1, 1.0]]))
    parent = np.array([1, 2, 3, -1])
    assert not tree_closed(lower.indptr.astype(np.int64), lower.indices, parent)
    assert not tree_closed_reference(lower)


# ------------------------------------------------------------------ the bound holds
def exact_resistances(net: Network, a, b, digits: int = 30) -> np.ndarray:
    """Resistances from the Laplacian solved in mpmath at ``digits`` digits (a reference
    independent of float64; definition R_ab = (e_a - e_b)^T L^+ (e_a - e_b), Klein & Randić,
    J. Math. Chem. 12, 81-95, 1993), grounding node 0 of a connected resistor network."""
    mpmath.mp.dps = digits
    n = net.n_nodes
    laplacian = mpmath.zeros(n - 1, n - 1)
    for f, t, r in zip(net.from_node, net.to_node, net.value):
        g = 1 / mpmath.mpf(float(r))
        for i, j, s in ((f, f, 1), (t, t, 1), (f, t, -1), (t, f, -1)):
            if i > 0 and j > 0:
                laplacian[i - 1, j - 1] += s * g
    inverse = laplacian ** -1
    out = []
    for i, j in zip(a, b):
        def green(p, q):
            return inverse[p - 1, q - 1] if p > 0 and q > 0 else 0
        out.append(float(green(i, i) + green(j, j) - 2 * green(i, j)))
    return np.array(out)


@pytest.mark.parametrize("seed", [1, 2])
def test_the_bound_holds_against_an_exact_reference(seed):
    graph = nx.random_geometric_graph(30, 0.35, seed=seed)
    graph = graph.subgraph(max(nx.connected_components(graph), key=len)).copy()
    graph = nx.convert_node_labels_to_integers(graph)
    rng = np.random.default_rng(seed)
    for u, v in graph.edges:
        graph[u][v]["ohms"] = float(rng.uniform(0.1, 10.0))
    net = Network.from_networkx(graph, reference="0", ohms="ohms")
    solver = reach_solver(net)
    a, b = rng.integers(0, net.n_nodes, (2, 40))
    b = np.where(a == b, (b + 1) % net.n_nodes, b)
    result = solver.pairs_by_index(a, b)
    assert result.method == "factor reach"
    truth = exact_resistances(net, a, b)
    error = np.abs(result.ohms / truth - 1.0)
    assert np.all(error <= result.accuracy)
    assert np.all(result.accuracy < 1e-10)
    # and against the reference library (networkx.resistance_distance, dense pseudo-inverse)
    node = [int(label) for label in net.node_labels]
    expected = [nx.resistance_distance(graph, node[i], node[j], weight="ohms",
                                       invert_weight=True) for i, j in zip(a[:5], b[:5])]
    np.testing.assert_allclose(result.ohms[:5], expected, rtol=1e-10)


def test_the_bound_is_below_1e_8_on_a_mid_size_lattice_and_holds():
    net = random_lattice(150, 3, pads=9)
    solver = reach_solver(net, 400)
    rng = np.random.default_rng(4)
    a, b = rng.integers(0, net.n_nodes, (2, 400))
    result = solver.pairs_by_index(a, b)
    assert result.method == "factor reach"
    assert 0 < solver.factor_delta < result.accuracy.min()
    assert result.accuracy.max() <= 1e-8
    # the first 20 by full solves, whose energy estimates carry bounds of their own (pairs.py)
    solves = ResistanceSolver(net, method="direct")
    reference = solves._pairs_by_solves(np.stack([solves.supernode[a[:20]],
                                                  solves.supernode[b[:20]]]))
    gap = np.abs(result.ohms[:20] / reference[0] - 1.0)
    assert np.all(gap <= result.accuracy[:20] + reference[1])


def test_the_diagonal_of_a_large_lattice_is_near_the_infinite_lattice_value():
    # Infinite square lattice of resistors R: diagonal neighbours 2R/pi (J. Cserti, Am. J.
    # Phys. 68, 896 (2000)); far from the edges of a 101 x 101 lattice the finite value is
    # within 1e-3 of it (boundary effect, measured), and the stated bound is far tighter.
    net = grid2d(101, 101, 1.0)
    solver = reach_solver(net)
    centre = net.node_index(["50_50", "49_49", "20_70"])
    result = solver.pairs_by_index(centre[[0, 0]], centre[[1, 2]])
    assert result.method == "factor reach"
    assert result.ohms[0] == pytest.approx(2 / math.pi, rel=1e-3)
    assert result.accuracy.max() < 1e-8


def test_pair_bounds_grow_with_each_term():
    base = pair_bounds(np.array([1.0]), np.array([0.0]), np.array([10]), 0.0, np.array([1.0]))
    assert base[0] < 1e-14
    assert pair_bounds(np.array([1.0]), np.array([0.0]), np.array([10]), 1e-9,
                       np.array([1.0]))[0] > 1e-9
    assert pair_bounds(np.array([1.0]), np.array([1e-10]), np.array([10]), 0.0,
                       np.array([100.0]))[0] > 2e-9
    assert math.isinf(pair_bounds(np.array([1.0]), np.array([0.0]), np.array([1]), 1.0,
                                  np.array([1.0]))[0])


def test_grounding_the_strongest_node_keeps_values_and_tightens_the_bound():
    # A lattice held at one corner, with 9 pads elsewhere merged by their zeroed sources: no
    # resistance depends on the grounded node (common practice), the bound does.
    net = random_lattice(60, 6, pads=9).with_reference("0_0")
    rng = np.random.default_rng(7)
    a, b = rng.integers(0, net.n_nodes, (2, 300))
    corner = ResistanceSolver(net, method="direct")
    strongest = ResistanceSolver(net, method="direct", ground_at="strongest")
    assert strongest.ground[0] == strongest.supernode[net.node_index("0")[0]]   # the pads
    first, second = corner.pairs_by_index(a, b), strongest.pairs_by_index(a, b)
    assert first.method == second.method == "factor reach"
    live = second.ohms > 0                     # pairs within one supernode read 0 both ways
    assert np.all(first.ohms[~live] == 0) and live.sum() > 250
    gap = np.abs(first.ohms[live] / second.ohms[live] - 1.0)
    assert np.all(gap <= first.accuracy[live] + second.accuracy[live])
    assert strongest.factor_delta < corner.factor_delta / 2
    with pytest.raises(ValueError, match="ground_at"):
        ResistanceSolver(net, ground_at="middle")
