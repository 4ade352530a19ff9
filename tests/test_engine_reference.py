"""The engine against reference libraries: full MNA solved by scipy, networkx resistance distance,
scipy's sparse solver for the SPD back ends, and the solver fallback path."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ohmgraph.engine import Network, SolverFailed, SolveSession, solve, solve_spd
from ohmgraph.engine import solvers
from ohmgraph.engine.network import RESISTOR
from conftest import BACK_ENDS
from reference_mna import mna_solve

METHODS = BACK_ENDS
SIZES = list(enumerate([60, 150, 300, 700, 1200, 2000]))


def voltage_tolerance(solution, reference_voltage) -> float:
    """Error bound for the node voltages of a solve, from its measured residual.

    For ``A x = b`` with relative residual ``rho``, ``||x - x*|| <= cond(A) rho ||x*||`` (the
    standard perturbation bound; Golub & Van Loan, *Matrix Computations*, 4th ed., §2.6). Node
    voltages are reduced unknowns plus exact offsets, so the same bound holds for them. The
    floor (1e-14 relative) covers rounding in the direct solve and in the MNA reference itself.
    """
    matrix = solution.system.matrix
    x = spla.spsolve(matrix.tocsc(), solution.system.rhs)
    largest = spla.eigsh(matrix, k=1, which="LA", return_eigenvectors=False)[0]
    smallest = spla.eigsh(matrix, k=1, sigma=0, which="LM", return_eigenvectors=False)[0]
    rho = max(solution.relative_residual, 1e-14)
    scale = max(np.abs(reference_voltage).max(), 1.0)
    return largest / smallest * rho * np.linalg.norm(x) + 1e-12 * scale


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("seed, n_nodes", SIZES)
def test_random_network_matches_full_mna(make_network, seed, n_nodes, method):
    # Sizes above 500 unknowns make amg-cg iterate (pyamg solves smaller ones on its coarse grid).
    net = make_network(seed, n_nodes=n_nodes, extra_resistors=n_nodes)
    solution = solve(net, method=method)
    # Reference: full MNA (Ho, Ruehli & Brennan, IEEE TCAS 22(6), 1975) solved by scipy spsolve.
    reference = mna_solve(net)

    v_tol = voltage_tolerance(solution, reference.node_voltage)
    np.testing.assert_allclose(solution.node_voltage, reference.node_voltage, rtol=0, atol=v_tol)
    # Currents of V sources and ideal connections (positive from -> to through the branch). Each
    # is a sum of resistor currents and source values along a tree (KCL), and a resistor current
    # is off by at most 2 * v_tol * g, so the sum of all conductances bounds the error.
    resistive = (net.kind == RESISTOR) & (net.value > 0)
    i_tol = 2 * v_tol * np.sum(1.0 / net.value[resistive]) + 1e-12
    np.testing.assert_allclose(solution.branch_current[reference.constrained_branches],
                               reference.constrained_current, rtol=0, atol=i_tol)
    assert solution.current_determined.all()
    assert solution.method == method and not solution.notes


@pytest.mark.parametrize("seed, n_nodes", SIZES)
def test_generator_mixes_grounded_and_floating_sources(make_network, seed, n_nodes):
    """The random networks above really hold grounded and floating V sources."""
    net = make_network(seed, n_nodes=n_nodes, extra_resistors=n_nodes)
    volts = net.branches_of_kind("V")
    grounded = ((net.from_node[volts] == net.reference) | (net.to_node[volts] == net.reference))
    assert grounded.any() and (~grounded).sum() >= 4
    assert ((net.kind == RESISTOR) & (net.value == 0)).sum() > 0


def test_floating_islands_pinned_match_mna(make_network):
    """Two random networks side by side, only the first grounded: with floating allowed, the
    engine pins one node of the island, and MNA holding that same node at 0 V agrees."""
    first = make_network(11, n_nodes=50)
    second = make_network(12, n_nodes=40)
    offset = first.n_nodes
    frm = np.concatenate([first.from_node, second.from_node + offset])
    to = np.concatenate([first.to_node, second.to_node + offset])
    kinds = np.array(["R", "V", "I"])[np.concatenate([first.kind, second.kind])]
    net = Network.from_arrays(frm, to, np.concatenate([first.value, second.value]), kinds,
                              reference="0", node_labels=np.arange(offset + second.n_nodes))
    solution = solve(net, allow_floating=True)
    pinned = solution.report.pinned_nodes
    assert pinned.size == 1 and pinned[0] >= offset
    reference = mna_solve(net, held_nodes=pinned)  # Ho, Ruehli & Brennan 1975 + scipy spsolve
    np.testing.assert_allclose(solution.node_voltage, reference.node_voltage, rtol=0,
                               atol=voltage_tolerance(solution, reference.node_voltage))


def effective_resistance(graph: nx.Graph, a, b, method: str) -> float:
    """Drive 1 A into ``a`` out of ``b`` with a current source, ground ``b``, read ``V(a)``."""
    edges = list(graph.edges(data="ohms"))
    frm = [u for u, _, _ in edges] + [b]
    to = [v for _, v, _ in edges] + [a]      # the source pushes 1 A into a, draws it out of b
    values = [r for _, _, r in edges] + [1.0]
    kinds = ["R"] * len(edges) + ["I"]
    net = Network.from_arrays(frm, to, values, kinds, reference=str(b))
    solution = solve(net, method=method)
    return float(solution.node_voltage[net.node_index(str(a))[0]])


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("seed", range(4))
def test_effective_resistance_matches_networkx(seed, method):
    rng = np.random.default_rng(100 + seed)
    graph = nx.connected_watts_strogatz_graph(60 + 20 * seed, 4, 0.3, seed=seed)
    for u, v in graph.edges:
        graph.edges[u, v]["ohms"] = float(10.0 ** rng.uniform(-1, 1))
    for a, b in rng.choice(graph.number_of_nodes(), size=(3, 2), replace=False):
        # Reference: networkx.resistance_distance (Klein & Randic, J. Math. Chem. 12, 1993).
        expected = nx.resistance_distance(graph, a, b, weight="ohms", invert_weight=True)
        assert effective_resistance(graph, a, b, method) == pytest.approx(expected, rel=1e-8)


def grounded_grid_laplacian(side: int) -> sp.csr_matrix:
    """Laplacian of a ``side`` x ``side`` grid of 1-ohm resistors with node 0 grounded."""
    laplacian = nx.laplacian_matrix(nx.grid_2d_graph(side, side)).astype(float)
    return sp.csr_matrix(laplacian[1:, 1:])


def condition_number(matrix) -> float:
    """``lambda_max / lambda_min`` of a symmetric positive-definite sparse matrix (ARPACK)."""
    largest = spla.eigsh(matrix, k=1, which="LA", return_eigenvectors=False)[0]
    smallest = spla.eigsh(matrix, k=1, sigma=0, which="LM", return_eigenvectors=False)[0]
    return float(largest / smallest)


@pytest.mark.parametrize("method", METHODS)
def test_solve_spd_matches_scipy_spsolve(method):
    matrix = grounded_grid_laplacian(40)
    b = np.random.default_rng(5).standard_normal(matrix.shape[0])
    expected = spla.spsolve(matrix.tocsc(), b)  # scipy reference
    session = SolveSession(matrix, method, rtol=1e-10)
    x = session.solve(b)
    info = session.last
    assert info.method == method and not session.stats.notes
    assert info.relative_residual <= 1e-10
    # Perturbation bound ||x - x*|| <= cond(A) * residual * ||x*|| (Golub & Van Loan, §2.6).
    bound = condition_number(matrix) * max(info.relative_residual, 1e-15) * np.linalg.norm(expected)
    assert np.linalg.norm(x - expected) <= bound
    # solve_spd takes the same path (up to rounding in the iteration).
    x_spd = solve_spd(matrix, b, rtol=1e-10, method=method)
    limit = condition_number(matrix) * 1e-10 * np.linalg.norm(expected)
    assert np.linalg.norm(x_spd - expected) <= limit


def test_amg_cg_block_of_columns_matches_spsolve():
    matrix = grounded_grid_laplacian(40)
    b = np.random.default_rng(6).standard_normal((matrix.shape[0], 3))
    expected = spla.spsolve(matrix.tocsc(), b)  # scipy reference, column by column
    session = SolveSession(matrix, "amg-cg", rtol=1e-10)
    x = session.solve(b)
    info = session.last
    assert info.converged and info.iterations > 1
    bound = condition_number(matrix) * info.relative_residual * np.linalg.norm(expected, axis=0)
    assert np.all(np.linalg.norm(x - expected, axis=0) <= bound)


def test_amg_cg_falls_back_to_direct_and_says_so(make_network, monkeypatch):
    # Over pyamg's coarse-grid size (500 unknowns), so one CG iteration cannot converge.
    monkeypatch.setattr(solvers.AmgCgSolver, "max_iterations", 1)
    net = make_network(3, n_nodes=1000, extra_resistors=1000)
    solution = solve(net, method="amg-cg")
    assert solution.method == "direct"
    assert any("fell back to direct" in note for note in solution.notes)
    reference = mna_solve(net)  # Ho, Ruehli & Brennan 1975 + scipy spsolve
    np.testing.assert_allclose(solution.node_voltage, reference.node_voltage, rtol=0,
                               atol=voltage_tolerance(solution, reference.node_voltage))


def test_solver_failed_when_no_fallback_applies(make_network, monkeypatch):
    monkeypatch.setattr(solvers.AmgCgSolver, "max_iterations", 1)
    with pytest.raises(SolverFailed, match="over the memory budget of 1e-06 GB"):
        solve(make_network(3, n_nodes=1000, extra_resistors=1000), method="amg-cg",
              memory_budget=1000)


@pytest.mark.parametrize("side, max_coarse", [(40, 50), (40, 500), (6, 500)],
                         ids=["four levels", "two levels", "one level"])
def test_amg_v_cycle_is_pyamgs_own_to_the_last_bit(side, max_coarse, monkeypatch):
    # Reference: pyamg's MultilevelSolver.aspreconditioner(cycle="V") on the same hierarchy;
    # every level in one thread (the two-thread cycle is tests/test_amg_cycle.py's).
    import pyamg
    import scipy.sparse as sp

    from ohmgraph.engine.solvers import amg_cycle

    monkeypatch.setattr(amg_cycle, "SPLIT_MIN_NONZEROS", 10**18)

    matrix = (pyamg.gallery.poisson((side, side), format="csr")
              + sp.diags(np.r_[1.0, np.zeros(side * side - 1)])).tocsr()
    hierarchy = pyamg.ruge_stuben_solver(
        matrix, CF=("RS", {"second_pass": True}), interpolation="direct",
        presmoother=("gauss_seidel", {"sweep": "forward"}),
        postsmoother=("gauss_seidel", {"sweep": "backward"}), max_coarse=max_coarse,
        coarse_solver="splu")
    b = np.random.default_rng(side).standard_normal(matrix.shape[0])
    expected = hierarchy.aspreconditioner(cycle="V") @ b
    np.testing.assert_array_equal(amg_cycle.VCycle(hierarchy).operator() @ b, expected)
    assert np.abs(expected).max() > 0
