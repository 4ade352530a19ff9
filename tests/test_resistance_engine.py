"""Effective resistance engine: pairs, terminal reduction, every resistor, Kirchhoff index."""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.resistance.kron import kron_reduction, reduced_resistances
from ohmgraph.engine.network import Network
from ohmgraph.engine.resistance.reach import pair_energies_reference
from ohmgraph.engine.resistance import ResistanceSolver


def weighted_random_graph(seed: int, n: int = 80, m: int = 200) -> nx.Graph:
    """A connected random graph with resistances 0.1–10 ohm (log-uniform) in ``ohms``."""
    rng = np.random.default_rng(seed)
    graph = nx.gnm_random_graph(n, m, seed=seed)
    graph = graph.subgraph(max(nx.connected_components(graph), key=len)).copy()
    for u, v in graph.edges:
        graph[u][v]["ohms"] = float(10 ** rng.uniform(-1, 1))
    return graph


def resistor_network(edges, ohms=1.0, reference="0", kinds=None) -> Network:
    frm = [str(u) for u, _ in edges]
    to = [str(v) for _, v in edges]
    values = np.broadcast_to(np.asarray(ohms, float), (len(edges),))
    return Network.from_arrays(frm, to, values, kinds, reference=reference)


def labels(names):
    """Node labels (the text of each name) as a NumPy string array."""
    return np.array([str(x) for x in names])


# ------------------------------------------------------------------ pairs against networkx
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_pairs_match_networkx_resistance_distance(seed):
    graph = weighted_random_graph(seed)
    nodes = list(graph.nodes)
    net = Network.from_networkx(graph, reference=str(nodes[0]), ohms="ohms")
    method, path = {1: ("direct", "factor reach"), 2: ("amg-cg", "pair solves"),
                    3: ("direct", "factor reach")}[seed]
    solver = ResistanceSolver(net, method=method)
    rng = np.random.default_rng(seed)
    a, b = rng.integers(0, len(nodes), (2, 40))
    result = solver.pairs(labels(np.array(nodes)[a]), labels(np.array(nodes)[b]))
    assert result.method == path
    # Reference library: networkx.resistance_distance (dense Laplacian pseudo-inverse).
    expected = [0.0 if i == j else nx.resistance_distance(graph, nodes[i], nodes[j],
                                                          weight="ohms", invert_weight=True)
                for i, j in zip(a, b)]
    np.testing.assert_allclose(result.ohms, expected, rtol=1e-9, atol=1e-12)
    assert np.all(result.accuracy < 1e-9)


def test_terminal_reduction_matches_pair_solves_and_networkx():
    graph = weighted_random_graph(7, n=120, m=300)
    nodes = np.array(list(graph.nodes))
    net = Network.from_networkx(graph, reference=str(nodes[0]), ohms="ohms")
    solver = ResistanceSolver(net)
    terminals = nodes[:12]
    a, b = np.triu_indices(12, 1)
    reduced = solver.pairs(labels(terminals[a]), labels(terminals[b]))
    assert reduced.method == "terminal reduction" and reduced.solves <= 12
    direct = solver._pairs_by_solves(
        np.stack([solver.supernode[net.node_index(labels(terminals[a]))],
                  solver.supernode[net.node_index(labels(terminals[b]))]]), None)[0]
    np.testing.assert_allclose(reduced.ohms, direct, rtol=1e-10)
    # Reference library: networkx.resistance_distance.
    expected = [nx.resistance_distance(graph, terminals[i], terminals[j], weight="ohms",
                                       invert_weight=True) for i, j in zip(a, b)]
    np.testing.assert_allclose(reduced.ohms, expected, rtol=1e-9)


def test_kron_reduction_keeps_resistances_among_terminals():
    graph = weighted_random_graph(11, n=60, m=150)
    nodes = np.array(list(graph.nodes))
    net = Network.from_networkx(graph, reference=str(nodes[0]), ohms="ohms")
    solver = ResistanceSolver(net)
    picked = labels(nodes[[3, 9, 17, 25, 40]])
    supers, reduced = solver.kron_reduction(picked)
    # Dörfler & Bullo, IEEE TCAS-I 60(1), 2013: the Kron-reduced matrix is a Laplacian
    # (zero row sums, non-positive off-diagonal) with the same resistances among terminals.
    np.testing.assert_allclose(reduced.sum(axis=1), 0.0, atol=1e-10)
    assert np.all(reduced[~np.eye(5, dtype=bool)] <= 1e-12)
    from_reduced = reduced_resistances(reduced)
    a, b = np.triu_indices(5, 1)
    direct = solver.pairs(picked[a], picked[b]).ohms
    np.testing.assert_allclose(from_reduced[a, b], direct, rtol=1e-9)


def test_kron_reduction_of_a_star_is_the_triangle_of_the_star_mesh_transform():
    # Star-mesh (Y-Delta) transform, A. E. Kennelly, Electrical World 34, 413 (1899; reference
    # recalled from memory): a star of conductances g_i gives mesh conductances g_i g_j / sum(g).
    g = np.array([1.0, 2.0, 4.0])
    laplacian = np.zeros((4, 4))
    for i, gi in enumerate(g):
        laplacian[[i, 3], [i, 3]] += gi
        laplacian[i, 3] = laplacian[3, i] = -gi
    reduced = kron_reduction(laplacian, [0, 1, 2])
    for i, j in [(0, 1), (0, 2), (1, 2)]:
        assert reduced[i, j] == pytest.approx(-g[i] * g[j] / g.sum(), rel=1e-12)


def test_factor_reach_kernel_matches_its_reference():
    net = grid2d(30, 20, 1.0).with_values(np.random.default_rng(0).uniform(0.5, 2.0, 1150))
    solver = ResistanceSolver(net)
    solver.prepare(100)
    reach = solver.factor_pairs()
    lu = solver.session.factors
    rng = np.random.default_rng(1)
    into, out = rng.integers(-1, solver.free.size, (2, 50))   # -1: the grounded node
    a = np.where(into >= 0, reach.position[np.maximum(into, 0)], -1)
    b = np.where(out >= 0, reach.position[np.maximum(out, 0)], -1)
    np.testing.assert_allclose(reach.energies(into, out),
                               pair_energies_reference(lu.L, lu.U.diagonal(), a, b), rtol=1e-10)
    # and the shortcut agrees with full solves through the public query
    direct = solver._pairs_by_solves(np.stack([solver.free[into[into >= 0]],
                                               solver.free[out[into >= 0]]]), None)[0]
    np.testing.assert_allclose(reach.energies(into[into >= 0], out[into >= 0]), direct,
                               rtol=1e-10)


# ------------------------------------------------------------------ circuit rules
def test_series_and_parallel():
    # Series resistances add, parallel conductances add (common practice).
    net = resistor_network([(0, 1), (1, 2), (2, 3), (0, 3)], ohms=[2.0, 3.0, 5.0, 10.0])
    solver = ResistanceSolver(net)
    ohms, accuracy = solver.pair(*labels([0, 3]))
    assert ohms == pytest.approx(1.0 / (1 / 10.0 + 1 / 10.0), rel=1e-12)
    ohms, _ = solver.pair(*labels([0, 2]))
    assert ohms == pytest.approx(1.0 / (1 / 5.0 + 1 / 15.0), rel=1e-12)
    assert accuracy < 1e-14


def test_cube_values():
    # Unit-resistor cube: body diagonal 5/6, face diagonal 3/4, edge 7/12 ohm
    # (F. J. van Steenwijk, Am. J. Phys. 66, 90 (1998); values recalled from memory).
    corners = range(8)
    edges = [(u, v) for u in corners for v in corners if u < v and bin(u ^ v).count("1") == 1]
    net = resistor_network(edges)
    solver = ResistanceSolver(net)
    result = solver.pairs(labels([0, 0, 0]), labels([7, 3, 1]))
    np.testing.assert_allclose(result.ohms, [5 / 6, 3 / 4, 7 / 12], rtol=1e-12)


def test_sources_are_zeroed_and_ideal_connections_merge_nodes():
    # Two-point resistance is measured with the sources zeroed (common practice): V -> short,
    # I -> open.
    net = resistor_network([(0, 1), (1, 2), (2, 3), (3, 4), (5, 6), (1, 7)],
                           ohms=[4.0, 6.0, 9.0, 0.0, 1.0, 2.0],
                           kinds=["R", "R", "V", "R", "R", "I"])
    solver = ResistanceSolver(net)
    a = labels([0, 2, 0, 0, 5, 3, 1])
    b = labels([4, 4, 5, 0, 6, 4, 7])
    result = solver.pairs(a, b)
    np.testing.assert_allclose(result.ohms, [10.0, 0.0, np.inf, 0.0, 1.0, 0.0, np.inf])
    assert result.ohms[1] == 0.0 and result.accuracy[2] == 0.0


def test_to_reference_is_the_pair_with_the_reference():
    graph = weighted_random_graph(5)
    nodes = np.array(list(graph.nodes))
    net = Network.from_networkx(graph, reference=str(nodes[4]), ohms="ohms")
    solver = ResistanceSolver(net)
    picked = labels(nodes[:10])
    driving = solver.to_reference(picked).ohms
    pairs = solver.pairs(picked, np.full(10, net.reference_label)).ohms
    np.testing.assert_allclose(driving, pairs, rtol=1e-12)
    assert driving[4] == 0.0


def test_iterative_accuracy_bound_holds():
    net = grid2d(40, 40, 1.0)
    exact = ResistanceSolver(net, method="direct")
    loose = ResistanceSolver(net, method="amg-cg", rtol=1e-3)
    rng = np.random.default_rng(0)
    a, b = rng.integers(0, net.n_nodes, (2, 20))
    truth = exact.pairs_by_index(a, b).ohms
    estimate = loose.pairs_by_index(a, b)
    # The energy estimate is a lower bound and the error is within the stated bound (module
    # notes; Rayleigh monotonicity, common practice for grounded Laplacians).
    done = truth > 0
    assert np.all(estimate.ohms[done] <= truth[done] * (1 + 1e-12))
    assert np.all(truth[done] <= estimate.ohms[done] * (1 + estimate.accuracy[done]) + 1e-12)
    assert estimate.accuracy.max() > np.finfo(float).eps   # the bound is not a constant


# ------------------------------------------------------------------ whole-network quantities
@pytest.mark.parametrize("seed", [3, 4])
def test_foster_theorem(seed):
    graph = weighted_random_graph(seed, n=150, m=400)
    net = Network.from_networkx(graph, reference=str(next(iter(graph.nodes))), ohms="ohms")
    result = ResistanceSolver(net).across_resistors(exact=True)
    # R. M. Foster (1949): on a connected network, sum over resistors of R_eff/R = n - 1.
    assert (result.ohms / result.resistor_ohms).sum() == pytest.approx(net.n_nodes - 1,
                                                                      rel=1e-10)
    # Reference library: networkx.resistance_distance on a few resistors.
    for k in range(0, result.branches.size, 97):
        u = net.node_labels[net.from_node[result.branches[k]]]
        v = net.node_labels[net.to_node[result.branches[k]]]
        u, v = int(u), int(v)
        assert result.ohms[k] == pytest.approx(
            nx.resistance_distance(graph, u, v, weight="ohms", invert_weight=True), rel=1e-9)


def test_foster_theorem_counts_supernodes_when_sources_short_nodes():
    # Foster's theorem on the contracted graph (Foster 1949): n - 1 with n the merged nodes.
    net = resistor_network([(0, 1), (1, 2), (2, 0), (2, 3), (3, 0), (1, 3)],
                           ohms=[1.0, 2.0, 3.0, 1.5, 5.0, 5.0],
                           kinds=["R", "R", "R", "R", "R", "V"])
    result = ResistanceSolver(net).across_resistors(exact=True)
    assert (result.ohms / result.resistor_ohms).sum() == pytest.approx(2.0, rel=1e-12)


def path_graph(n):
    return resistor_network([(i, i + 1) for i in range(n - 1)])


def cycle_graph(n):
    return resistor_network([(i, (i + 1) % n) for i in range(n)])


def complete_graph(n):
    return resistor_network([(i, j) for i in range(n) for j in range(i + 1, n)])


@pytest.mark.parametrize("build, formula", [
    # Klein & Randić, J. Math. Chem. 12, 81–95 (1993), unit resistors.
    (path_graph, lambda n: (n ** 3 - n) / 6),
    (cycle_graph, lambda n: (n ** 3 - n) / 12),
    (complete_graph, lambda n: n - 1),
])
@pytest.mark.parametrize("n", [5, 30])
def test_kirchhoff_index_exact(build, formula, n):
    result = ResistanceSolver(build(n)).kirchhoff_index(exact=True)
    assert result.exact and result.value == pytest.approx(formula(n), rel=1e-10)
    # the stated bound covers the error and is small
    assert abs(result.value - formula(n)) <= result.accuracy * result.value
    assert result.accuracy <= 1e-9 and result.low <= formula(n) <= result.high


def test_kirchhoff_index_counts_merged_nodes():
    # Kirchhoff index as the sum over all node pairs (Klein & Randić 1993); two nodes joined by
    # an ideal connection are 0 ohm apart. Path 0-1-2 of 1-ohm resistors plus node 3 shorted
    # to node 2: pairs 01=1, 02=2, 03=2, 12=1, 13=1, 23=0 -> 7 ohm.
    net = resistor_network([(0, 1), (1, 2), (2, 3)], ohms=[1.0, 1.0, 0.0])
    assert ResistanceSolver(net).kirchhoff_index(exact=True).value == pytest.approx(7.0)


def test_kirchhoff_index_hutchinson_interval_covers_the_cycle():
    n = 200
    result = ResistanceSolver(cycle_graph(n)).kirchhoff_index(exact=False, samples=400, seed=1)
    truth = (n ** 3 - n) / 12     # Klein & Randić 1993
    assert not result.exact and result.samples == 400
    assert result.low <= truth <= result.high
    assert result.std_error < 0.05 * truth


def test_kirchhoff_index_of_two_islands_is_infinite():
    net = resistor_network([(0, 1), (2, 3)])
    assert math.isinf(ResistanceSolver(net).kirchhoff_index().value)


def torus(side: int) -> Network:
    """A ``side x side`` periodic square lattice of 1-ohm resistors."""
    nodes = np.arange(side * side).reshape(side, side)
    right = np.stack([nodes.ravel(), np.roll(nodes, -1, axis=1).ravel()], axis=1)
    down = np.stack([nodes.ravel(), np.roll(nodes, -1, axis=0).ravel()], axis=1)
    return resistor_network(np.concatenate([right, down]).tolist())


def test_sketch_error_statistics_on_a_10k_node_network():
    side = 100
    net = torus(side)                                # 10,000 nodes, 20,000 resistors
    n, m = side * side, 2 * side * side
    # Exact values: every resistor of the torus is alike (edge-transitive), so Foster's theorem
    # (R. M. Foster, 1949: sum of R_eff/R = n - 1) gives R_eff = (n - 1) / m on each.
    exact = (n - 1) / m
    solver = ResistanceSolver(net)
    k = 200
    sketch = solver.across_resistors(exact=False, k=k, seed=3)
    relative = sketch.ohms / exact - 1.0
    # Spielman & Srivastava (STOC 2008): each estimate is R chi2_k / k in distribution for
    # Gaussian projections (relative standard deviation sqrt(2/k)); the ±1 projection is no
    # worse (Achlioptas 2003). The median |error| of a normal is 0.674 standard deviations.
    std = math.sqrt(2.0 / k)
    assert sketch.sketch_size == k and not sketch.exact and sketch.solves == k
    assert abs(relative.mean()) < 0.1 * std
    assert 0.8 * std < relative.std() < 1.2 * std
    assert np.median(np.abs(relative)) < 0.674 * std * 1.2
    np.testing.assert_allclose(sketch.accuracy, std)
    assert sketch.epsilon_all == pytest.approx(math.sqrt(24 * math.log(n) / k))


def test_exact_across_resistors_on_a_small_torus_is_uniform():
    # Edge-transitivity + Foster's theorem (Foster 1949): R_eff = (n - 1) / m on every resistor.
    net = torus(12)
    result = ResistanceSolver(net).across_resistors()
    assert result.exact
    np.testing.assert_allclose(result.ohms, (144 - 1) / 288, rtol=1e-10)


def test_auto_sets_the_solver_up_for_the_query(monkeypatch):
    import ohmgraph.engine.solvers.choice as choice

    # Pretend a factorisation is dear and amg-cg needs no set-up: one right-hand side then goes
    # to amg-cg, fifty to one factorisation.
    monkeypatch.setattr(choice, "FACTOR_SECONDS_PER_ENTRY", 3e-6)
    monkeypatch.setattr(choice, "AMG_SETUP_SECONDS", 0.0)
    net = grid2d(20, 20, 1.0)
    solver = ResistanceSolver(net)
    assert solver.session.method == "not set up"
    one = solver.pair_by_index(0, 399)
    assert solver.stats.method == "amg-cg"                       # one pair: no factorisation
    many = solver.pairs_by_index(np.arange(50), np.arange(50, 100))
    assert solver.stats.method == "direct" and many.method == "factor reach"
    assert any("switched to direct" in note for note in solver.stats.notes)
    # Two solvers of the same system must agree (common practice).
    assert solver.pair("0_0", "19_19")[0] == pytest.approx(one[0], rel=1e-9)


def test_kirchhoff_index_is_the_sum_over_node_pairs_with_sources(make_network):
    # Definition (Klein & Randić 1993): the sum of R_ij over all node pairs; here on a network
    # whose voltage sources and ideal connections merge nodes, so the weighted formulas are used.
    net = make_network(5, n_nodes=60, extra_resistors=80)
    solver = ResistanceSolver(net)
    a, b = np.triu_indices(net.n_nodes, 1)
    total = solver.pairs_by_index(a, b).ohms.sum()
    exact = solver.kirchhoff_index(exact=True)
    assert exact.value == pytest.approx(total, rel=1e-10)
    estimate = solver.kirchhoff_index(exact=False, samples=600, seed=2)
    assert estimate.low <= total <= estimate.high
    assert estimate.std_error < 0.05 * total
