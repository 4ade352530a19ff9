"""The one solve door: every capability on every back end, and no unproven vector downstream.

Each capability (network solve, effective resistance, Kron reduction, reading model values,
adjoint sensitivities, tolerance spread, Monte Carlo, diagnosis) runs on every registered back end
(``conftest.BACK_ENDS``) and is compared with a dense reference computed here with NumPy. Then a
back end that never reaches its target is registered, the direct fallback is forbidden, and every
capability must raise :class:`SolverFailed` instead of using the vector.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from conftest import BACK_ENDS

import ohmgraph.engine.session as session_module
import ohmgraph.engine.solvers.choice as choice_module
from ohmgraph.engine import (Network, ResistanceSolver, SolverFailed, SolveSession,
                             build_model, diagnose, kron_reduction, monte_carlo, solve,
                             tolerance_spread)
from ohmgraph.engine.readings.model import Readings
from ohmgraph.engine.readings.sensitivity import resistance_sensitivity, resistor_candidates
from ohmgraph.engine.solvers import SOLVERS, SPDSolver
from ohmgraph.engine.solvers.choice import Choice
from ohmgraph.engine.solvers.symbolic import column_counts
from reference_mna import mna_solve

RTOL = 1e-10


def supplied_grid(rows: int = 8, cols: int = 9, seed: int = 3) -> Network:
    """A grid of 1–2 ohm resistors, a 1.2 V pad at one corner and three 10 mA loads."""
    rng = np.random.default_rng(seed)
    graph = nx.relabel_nodes(nx.grid_2d_graph(rows, cols), lambda rc: f"n{rc[0]}_{rc[1]}")
    edges = list(graph.edges)
    frm = [u for u, _ in edges] + ["n0_0"] + ["n3_4", "n7_8", "n5_1"]
    to = [v for _, v in edges] + ["gnd"] * 4
    values = list(rng.uniform(1.0, 2.0, len(edges))) + [1.2] + [0.01] * 3
    kinds = ["R"] * len(edges) + ["V"] + ["I"] * 3
    return Network.from_arrays(frm, to, values, kinds, reference="gnd")


def dense_voltages(net: Network, ohms: np.ndarray | None = None) -> np.ndarray:
    """Node voltages by the full MNA system (Ho, Ruehli & Brennan 1975; scipy spsolve)."""
    return mna_solve(net if ohms is None else net.with_values(ohms)).node_voltage


def dense_resistance(net: Network, a: int, b: int, ohms: np.ndarray | None = None) -> float:
    """Two-point resistance from the Laplacian's pseudo-inverse (Klein & Randić 1993), NumPy."""
    ohms = net.value if ohms is None else ohms
    resistors = np.flatnonzero(net.kind == 0)
    laplacian = np.zeros((net.n_nodes, net.n_nodes))
    for k in resistors:
        i, j, g = net.from_node[k], net.to_node[k], 1.0 / ohms[k]
        laplacian[i, i] += g
        laplacian[j, j] += g
        laplacian[i, j] -= g
        laplacian[j, i] -= g
    pinv = np.linalg.pinv(laplacian, hermitian=True)
    return float(pinv[a, a] + pinv[b, b] - 2.0 * pinv[a, b])


def mixed_readings(net: Network) -> Readings:
    return Readings.from_labels(net, ["V", "V", "R", "R"], ["n2_2", "n7_7", "n0_8", "n1_1"],
                                ["", "n4_4", "n7_0", "n6_6"])


@pytest.mark.parametrize("method", BACK_ENDS)
def test_solve_on_every_back_end(method):
    net = supplied_grid()
    solution = solve(net, method=method, rtol=RTOL)
    assert solution.method == method and solution.relative_residual <= RTOL
    assert solution.session.stats.solves == 1
    np.testing.assert_allclose(solution.node_voltage, dense_voltages(net), rtol=0, atol=1e-9)


@pytest.mark.parametrize("method", BACK_ENDS)
def test_resistance_on_every_back_end(method):
    net = supplied_grid()
    solver = ResistanceSolver(net, method=method, rtol=RTOL)
    a = np.array([0, 5, 17, 40])
    b = np.array([71, 33, 2, 41])
    result = solver.pairs_by_index(a, b)
    reference = [dense_resistance(net, i, j) for i, j in zip(a, b)]
    np.testing.assert_allclose(result.ohms, reference, rtol=1e-9)
    assert solver.stats.method == method


@pytest.mark.parametrize("method", BACK_ENDS)
def test_kron_reduction_on_every_back_end(method):
    rng = np.random.default_rng(8)
    graph = nx.connected_watts_strogatz_graph(300, 4, 0.2, seed=8)
    laplacian = nx.laplacian_matrix(graph, weight=None).astype(float)
    laplacian = laplacian + 1e-3 * np.eye(300)          # a grounded (SPD) Laplacian
    terminals = rng.choice(300, 6, replace=False)
    dense = laplacian.toarray() if hasattr(laplacian, "toarray") else np.asarray(laplacian)
    interior = np.setdiff1d(np.arange(300), terminals)
    # Schur complement S = L_TT - L_TI L_II^-1 L_IT (Dörfler & Bullo 2013), dense NumPy.
    schur = (dense[np.ix_(terminals, terminals)] - dense[np.ix_(terminals, interior)]
             @ np.linalg.solve(dense[np.ix_(interior, interior)],
                               dense[np.ix_(interior, terminals)]))
    reduced = kron_reduction(laplacian, terminals, method, RTOL)
    np.testing.assert_allclose(reduced, schur, rtol=0, atol=1e-8 * np.abs(schur).max())


@pytest.mark.parametrize("method", BACK_ENDS)
def test_readings_sensitivity_and_spread_on_every_back_end(method):
    net = supplied_grid()
    readings = mixed_readings(net)
    model = build_model(net, readings, method=method, rtol=RTOL)
    volts = dense_voltages(net)
    ref = net.reference
    expected = [volts[readings.node_a[0]] - volts[ref],
                volts[readings.node_a[1]] - volts[readings.node_b[1]],
                dense_resistance(net, readings.node_a[2], readings.node_b[2]),
                dense_resistance(net, readings.node_a[3], readings.node_b[3])]
    np.testing.assert_allclose(model.model_value, expected, rtol=1e-8)

    # Adjoint sensitivities against central finite differences of the dense references.
    resistors = resistor_candidates(net)[:12]
    sensitivity = resistance_sensitivity(model, resistors)
    step = 1e-4
    for row, k in enumerate(resistors):
        up, down = net.value.copy(), net.value.copy()
        up[k] *= 1 + step
        down[k] *= 1 - step
        delta = 2 * step * net.value[k]
        dv = (dense_voltages(net, up) - dense_voltages(net, down)) / delta
        dr = [(dense_resistance(net, readings.node_a[i], readings.node_b[i], up)
               - dense_resistance(net, readings.node_a[i], readings.node_b[i], down)) / delta
              for i in (2, 3)]
        fd = [dv[readings.node_a[0]], dv[readings.node_a[1]] - dv[readings.node_b[1]], *dr]
        np.testing.assert_allclose(sensitivity[row], fd, rtol=1e-5, atol=1e-9)

    tolerance = np.full(net.n_branches, 0.01)
    spread = tolerance_spread(model, tolerance)
    assert np.all(spread.rss > 0) and np.all(spread.worst_case >= spread.rss)


@pytest.mark.parametrize("method", BACK_ENDS)
def test_monte_carlo_on_every_back_end(method):
    net = supplied_grid()
    readings = Readings.from_labels(net, ["V", "V"], ["n2_2", "n7_7"], ["", ""])
    model = build_model(net, readings, method=method, rtol=RTOL)
    tolerance = np.full(net.n_branches, 0.05)
    spread = monte_carlo(model, tolerance, samples=400, seed=1)
    linear = tolerance_spread(model, tolerance)
    # Uniform parts: the linear estimate of the standard deviation is rss / sqrt(3) (GUM, JCGM
    # 100:2008 §4.3.7); 400 samples hold it to well within 20 %.
    np.testing.assert_allclose(spread.std, linear.linear_std_uniform, rtol=0.2)


@pytest.mark.parametrize("method", BACK_ENDS)
def test_diagnosis_on_every_back_end(method):
    net = supplied_grid()
    faulty_branch = int(np.flatnonzero(net.branch_names == net.branch_names[20])[0])
    ohms = net.value.copy()
    ohms[faulty_branch] *= 4.0
    labels = net.node_labels
    picks = labels[np.arange(0, net.n_nodes - 1, 3)]
    readings = Readings.from_labels(net, ["V"] * picks.size, picks, [""] * picks.size)
    volts = dense_voltages(net, ohms)
    measured = volts[readings.node_a] - volts[net.reference]
    readings = Readings(readings.kind, readings.node_a, readings.node_b, readings.branch,
                        measured, np.full(picks.size, 1e-6))
    model = build_model(net, readings, method=method, rtol=RTOL)
    result = diagnose(model, top=3)
    assert faulty_branch in result.hypotheses[0].branches
    assert result.hypotheses[0].estimated_ohms[0] == pytest.approx(ohms[faulty_branch], rel=1e-3)


class NeverConverges(SPDSolver):
    """A back end whose every answer misses its target (returns zeros)."""

    method = "never"

    def _setup(self) -> None:
        pass

    def _solve(self, b, x0=None):
        return np.zeros_like(b), 1

    def preconditioner(self, matrix=None):
        return spla.aslinearoperator(sp.identity(self.matrix.shape[0]))


@pytest.fixture
def failing_back_end(monkeypatch):
    monkeypatch.setitem(SOLVERS, "never", NeverConverges)
    monkeypatch.setattr(session_module, "direct_fallback_allowed",
                        lambda matrix, budget=None, analysis=None:
                        (False, "the fallback is forbidden here", analysis))
    return "never"


def test_session_refuses_an_unproven_vector(failing_back_end):
    matrix = nx.laplacian_matrix(nx.path_graph(5)).astype(float) + np.eye(5)
    session = SolveSession(matrix, failing_back_end, RTOL)
    with pytest.raises(SolverFailed, match="relative residual 1 .*forbidden") as caught:
        session.solve(np.ones(5))
    assert caught.value.info.relative_residual == pytest.approx(1.0)
    assert session.stats.solves == 0 and session.last is None


def test_every_capability_raises_instead_of_using_a_failed_solve(failing_back_end):
    net = supplied_grid()
    with pytest.raises(SolverFailed):
        solve(net, method=failing_back_end)
    with pytest.raises(SolverFailed):
        ResistanceSolver(net, method=failing_back_end).pair("n0_0", "n3_3")
    with pytest.raises(SolverFailed):
        kron_reduction(nx.laplacian_matrix(nx.path_graph(6)).astype(float) + np.eye(6),
                       np.array([0, 5]), failing_back_end)
    with pytest.raises(SolverFailed):
        build_model(net, mixed_readings(net), method=failing_back_end)


def test_fallback_to_direct_is_recorded():
    matrix = nx.laplacian_matrix(nx.grid_2d_graph(40, 40)).astype(float)
    matrix = matrix + 1e-2 * np.eye(1600)

    class OneIteration(NeverConverges):
        method = "amg-cg"

    session = SolveSession(matrix, "direct", RTOL)
    session._set_up("amg-cg", "test")           # noqa: SLF001 — force the iterative start
    session._solver = OneIteration(matrix, RTOL)  # noqa: SLF001
    x = session.solve(np.ones(1600))
    assert session.method == "direct" and "fallback" in session.stats.reason
    assert any("fell back to direct" in note for note in session.stats.notes)
    assert np.linalg.norm(matrix @ x - 1.0) <= RTOL * np.sqrt(1600)


def test_unknown_method_is_refused():
    with pytest.raises(ValueError, match="unknown method 'fast'"):
        SolveSession(np.eye(3), "fast")


def test_on_solved_counts_every_proven_right_hand_side():
    matrix = nx.laplacian_matrix(nx.path_graph(50)).astype(float) + np.eye(50)
    session = SolveSession(matrix, "direct", RTOL)
    counted = []
    session.on_solved = counted.append
    session.solve(np.ones(50))
    session.solve(np.ones((50, 7)))
    assert counted == [1, 7] and session.stats.solves == 8


def _lattice(side: int = 60) -> sp.csr_matrix:
    """A grounded lattice Laplacian (1 S branches, a small conductance to ground everywhere)."""
    laplacian = nx.laplacian_matrix(nx.grid_2d_graph(side, side)).astype(float)
    return sp.csr_matrix(laplacian + 1e-2 * sp.eye(side * side))


def _free_factorisation(monkeypatch):
    """Make ``direct`` predicted free of cost, so any measured iterative pace is dearer."""
    for name in ("ANALYSIS_SECONDS_PER_ENTRY", "FACTOR_SECONDS_PER_FLOP",
                 "FACTOR_SECONDS_PER_ENTRY", "SOLVE_SECONDS_PER_FACTOR_ENTRY",
                 "SOLVE_SECONDS_PER_UNKNOWN"):
        monkeypatch.setattr(choice_module, name, 0.0)


def _iterative_first(monkeypatch, method: str = "ac-cg"):
    """Make ``auto``'s first choice ``method``, whatever the predictions say, so that only the
    re-decision from measured solves can bring in a factorisation."""
    real = session_module.choose

    def first_choice(matrix, solves, *args, **kwargs):
        choice = real(matrix, solves, *args, **kwargs)
        return Choice(method, "forced by the test", choice.predicted, choice.analysis)

    monkeypatch.setattr(session_module, "choose", first_choice)


def _auto_session_forced_iterative(monkeypatch):
    """An ``auto`` session on :func:`_lattice` whose first choice is ac-cg while a
    factorisation is predicted free: every query of more than one column switches."""
    _free_factorisation(monkeypatch)
    _iterative_first(monkeypatch)
    matrix = _lattice()
    return SolveSession(matrix, "auto", RTOL), matrix


def test_auto_switches_to_direct_when_the_measured_pace_is_slower(monkeypatch):
    _free_factorisation(monkeypatch)
    _iterative_first(monkeypatch)
    matrix = _lattice()
    session = SolveSession(matrix, "auto", RTOL)
    session.expect(40)
    rng = np.random.default_rng(1)
    first = rng.standard_normal(matrix.shape[0])
    heard = []
    session.on_switch = heard.append
    x = session.solve(first)
    # decided now; said and set up at the start of the next solve
    assert session.method == "ac-cg" and heard == []
    assert session.pending_switch.startswith("switched to direct after 1 of 40 right-hand sides")
    assert "reconsidered_remaining" not in session.stats.predicted   # recorded when it is made
    block = rng.standard_normal((matrix.shape[0], 39))
    y = session.solve(block)
    assert session.method == "direct" and session.stats.reason.startswith("measured pace")
    assert session.stats.notes[-1].startswith("switched to direct after 1 of 40")
    assert session.pending_switch is None and session.stats.solves == 40
    assert session.stats.predicted["reconsidered_remaining"] == 39
    assert len(heard) == 1 and heard[0].startswith("the iterative solves so far take")
    # every vector handed out is proven, before and after the switch
    assert np.linalg.norm(matrix @ x - first) <= RTOL * np.linalg.norm(first)
    assert np.all(np.linalg.norm(matrix @ y - block, axis=0)
                  <= RTOL * np.linalg.norm(block, axis=0))


def test_auto_keeps_the_iterative_back_end_when_a_factorisation_is_dearer(monkeypatch):
    monkeypatch.setattr(choice_module, "FACTOR_SECONDS_PER_ENTRY", 1.0)   # 18,000 s predicted
    _iterative_first(monkeypatch)
    matrix = _lattice()
    session = SolveSession(matrix, "auto", RTOL)
    session.expect(40)
    session.solve(np.ones(matrix.shape[0]))
    session.solve(np.ones((matrix.shape[0], 39)))
    assert session.method == "ac-cg" and session.stats.solves == 40
    assert not any("switched" in note for note in session.stats.notes)


def test_a_block_opening_a_query_is_timed_on_its_first_column(monkeypatch):
    _free_factorisation(monkeypatch)
    _iterative_first(monkeypatch)
    matrix = _lattice()
    session = SolveSession(matrix, "auto", RTOL)
    counted = []
    session.on_solved = counted.append
    block = np.random.default_rng(4).standard_normal((matrix.shape[0], 25))
    x = session.solve(block)                      # no expect(): the block is the query
    assert counted == [1, 24] and session.stats.solves == 25
    assert session.method == "direct"
    assert session.stats.notes[-1].startswith("switched to direct after 1 of 25")
    assert x.shape == block.shape
    assert np.all(np.linalg.norm(matrix @ x - block, axis=0)
                  <= RTOL * np.linalg.norm(block, axis=0))


def test_a_new_query_drops_a_pending_switch(monkeypatch):
    session, matrix = _auto_session_forced_iterative(monkeypatch)
    session.expect(40)
    session.solve(np.ones(matrix.shape[0]))
    assert session.pending_switch is not None
    session.expect(1)                  # the rest of that query never comes: nothing factorised
    session.solve(np.ones(matrix.shape[0]))
    assert session.pending_switch is None and session.method == "ac-cg"
    assert not any("switched" in note for note in session.stats.notes)
    assert "reconsidered_remaining" not in session.stats.predicted


def test_a_query_without_more_right_hand_sides_is_not_reconsidered(monkeypatch):
    session, matrix = _auto_session_forced_iterative(monkeypatch)
    session.solve(np.ones(matrix.shape[0]))        # a query of one right-hand side
    session.solve(np.ones(matrix.shape[0]))        # and another
    assert session.method == "ac-cg" and session.pending_switch is None
    asked = SolveSession(matrix, "ac-cg", RTOL)    # a method asked for is kept
    asked.expect(40)
    asked.solve(np.ones((matrix.shape[0], 40)))
    assert asked.method == "ac-cg" and not asked.stats.notes


def test_direct_for_the_rest_weighs_the_measured_pace_against_the_prediction():
    matrix = _lattice(30)
    analysis = column_counts(matrix)
    direct_s, direct_b = choice_module.direct_prediction(matrix, analysis.factor_nonzeros,
                                                         analysis.flops, 10)
    margin = choice_module.RECONSIDER_MARGIN
    switch, reason, predicted, _ = choice_module.direct_for_the_rest(
        matrix, 1.01 * margin * direct_s, 10, 1e12, analysis)
    assert switch and "remaining 10 right-hand side(s)" in reason
    assert predicted["direct_seconds_for_the_rest"] == pytest.approx(direct_s)
    assert not choice_module.direct_for_the_rest(matrix, 0.99 * margin * direct_s, 10, 1e12,
                                                 analysis)[0]
    assert not choice_module.direct_for_the_rest(matrix, 1e9, 10, 0.5 * direct_b, analysis)[0]
    assert not choice_module.direct_for_the_rest(matrix, 1e9, 0, 1e12, analysis)[0]


def test_pairs_after_auto_switches_are_solved_by_the_factorisation(monkeypatch):
    _free_factorisation(monkeypatch)
    _iterative_first(monkeypatch, "amg-cg")
    net = supplied_grid()
    a = [f"n{r}_0" for r in range(8)] + ["n0_1", "n7_1"]          # 20 distinct terminals
    b = [f"n{r}_8" for r in range(8)] + ["n0_7", "n7_7"]
    solver = ResistanceSolver(net, "auto", RTOL)
    result = solver.pairs(a, b)
    assert result.method == "pair solves" and result.solves == 10
    assert solver.stats.method == "direct"
    assert any(note.startswith("switched to direct after 1 of 10") for note in solver.stats.notes)
    index = {label: k for k, label in enumerate(net.node_labels)}
    expected = [dense_resistance(net, index[p], index[q]) for p, q in zip(a, b)]
    np.testing.assert_allclose(result.ohms, expected, rtol=1e-12)
    # each bound holds, allowing for the dense pseudo-inverse's own rounding (up to 1e-14 here)
    assert np.all(result.accuracy > 0) and np.all(result.accuracy < 1e-12)
    assert np.all(np.abs(result.ohms - expected) <= (result.accuracy + 1e-13) * np.abs(expected))


def test_direct_for_the_rest_analyses_only_when_a_factorisation_could_win():
    matrix = _lattice(30)
    floor = choice_module.direct_floor(matrix, 10)
    below = choice_module.direct_for_the_rest(matrix, floor, 10, 1e12, None)
    assert below == (False, "", {}, None)                  # no analysis made
    switch, _, predicted, analysis = choice_module.direct_for_the_rest(matrix, 1e9, 10, 1e12,
                                                                       None)
    assert switch and analysis is not None
    assert analysis.factor_nonzeros == column_counts(matrix).factor_nonzeros
    assert predicted["direct_seconds_for_the_rest"] == pytest.approx(
        choice_module.direct_prediction(matrix, analysis.factor_nonzeros, analysis.flops, 10)[0])
