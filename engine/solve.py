"""The one entry point for "just solve it": check, contract, assemble, solve, recover, verify.

After the solve two checks independent of the solver prove the result: the KCL residual at every
node, recomputed from the branch currents through the incidence matrix, and the power balance,
whose sum over all branches is zero by Tellegen's theorem (B. D. H. Tellegen, Philips Res. Rep. 7,
259–269, 1952). Both are returned, and stored with the solution.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from .checks import CheckReport, check
from .formulation import ReducedSystem, assemble
from .network import CURRENT_SOURCE, RESISTOR, VOLTAGE_SOURCE, Network
from .recovery import branch_quantities, kcl_residual
from .session import SolveSession
from .solvers import DEFAULT_RTOL, SolverFailed


class NetworkNotSolvable(ValueError):
    """The network failed its checks; ``report`` says why."""

    def __init__(self, report: CheckReport):
        errors = report.of_severity("error")
        super().__init__("; ".join(f"{f.code}: {f.message}" for f in errors))
        self.report = report


@dataclass
class Solution:
    """Node voltages, branch currents, voltages and powers, and the evidence behind them.

    Attributes
    ----------
    network : Network
    node_voltage : ndarray, volts, shape (n,)
    branch_current : ndarray, amperes, positive from ``from`` to ``to``
    branch_voltage : ndarray, volts, ``V(from) - V(to)``
    branch_power : ndarray, watts absorbed (negative where a source delivers)
    current_determined : ndarray of bool
        False on source/ideal branches whose current a loop of them leaves free (given 0 A on
        the loop-closing branch).
    method : str
        Solver that produced the result (after any fallback).
    method_reason : str
        Why that solver: the choice of ``auto`` with its predicted cost, "asked for", or the
        fallback (:attr:`SessionStats.reason`).
    rtol : float
        Requested relative residual.
    iterations : int
    relative_residual : float
        ``||A x - b|| / ||b||`` of the reduced system.
    kcl_max_residual : float
        Largest net current (A) leaving any node, recomputed from all branch currents.
    kcl_worst_node : int
    power_balance : float
        Sum of all branch powers (W), zero by Tellegen's theorem.
    power_dissipated : float
        Sum of resistor powers (W).
    timings : dict
        Seconds per stage (``check``, ``assemble``, ``setup``, ``solve``, ``recover``).
    notes : list of str
    report : CheckReport
    system : ReducedSystem
        Kept for reuse (further right-hand sides, sensitivities); None after
        :meth:`release_solver`.
    session : SolveSession
        The solve session of the reduced system, set up and reusable for further right-hand
        sides (adjoint solves, sensitivities); None after :meth:`release_solver`.
    unknowns : int or None
        Unknowns of the reduced system.
    """

    network: Network
    node_voltage: np.ndarray
    branch_current: np.ndarray
    branch_voltage: np.ndarray
    branch_power: np.ndarray
    current_determined: np.ndarray
    method: str
    rtol: float
    iterations: int
    relative_residual: float
    kcl_max_residual: float
    kcl_worst_node: int
    power_balance: float
    power_dissipated: float
    timings: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    method_reason: str = ""
    report: CheckReport | None = None
    system: ReducedSystem | None = None
    session: SolveSession | None = None
    unknowns: int | None = None

    def release_solver(self) -> None:
        """Let go of the reduced system and the solve session (matrix, solver set-up and
        supernode graph: often the largest arrays held) once no further right-hand side will
        come."""
        self.system = self.session = None

    def kept_setup(self):
        """The solver set-up as plain arrays with the fingerprint of the reduced matrix
        (:meth:`SolveSession.kept_setup <ohmgraph.engine.session.SolveSession.kept_setup>`),
        to be stored with the solution and rebuilt by a later :func:`solve` (``kept_setup=``);
        None when the back end cannot export its set-up or the solver was released."""
        return None if self.session is None else self.session.kept_setup()

    @property
    def power_delivered(self) -> float:
        """Power delivered by the sources that supply power (W, the sum of ``-p`` over sources
        whose power ``p`` is negative)."""
        sources = self.branch_power[self.network.kind != RESISTOR]
        return float(-sources[sources < 0].sum())

    @property
    def power_absorbed_by_sources(self) -> float:
        """Power absorbed by sources (W), for example current-source loads or a charged supply.

        ``power_delivered = power_dissipated + power_absorbed_by_sources + power_balance``.
        """
        sources = self.branch_power[self.network.kind != RESISTOR]
        return float(sources[sources > 0].sum())

    def summary(self, top: int = 5) -> dict:
        """Plain-data summary: voltage range, largest currents and powers, evidence, timings."""
        net = self.network
        labels, names = net.node_labels, net.branch_names

        def largest(values, mask):
            """The ``top`` largest |values| among the branches of ``mask`` (None: all)."""
            if mask is None:
                picked = largest_first(np.abs(values), top)
            else:
                index = np.flatnonzero(mask)
                picked = index[largest_first(np.abs(values[index]), top)]
            return [{"branch": str(names[k]), "kind": "RVI"[net.kind[k]],
                     "from": str(labels[net.from_node[k]]), "to": str(labels[net.to_node[k]]),
                     "value": float(values[k])} for k in picked]

        v = self.node_voltage
        low, high = int(np.argmin(v)), int(np.argmax(v))
        return {
            "nodes": net.n_nodes,
            "branches": net.n_branches,
            "reference": net.reference_label,
            "method": self.method,
            "method_reason": self.method_reason,
            "rtol": self.rtol,
            "iterations": self.iterations,
            "unknowns": self.unknowns,
            "relative_residual": self.relative_residual,
            "kcl_max_residual_A": self.kcl_max_residual,
            "kcl_worst_node": str(labels[self.kcl_worst_node]),
            "power_balance_W": self.power_balance,
            "power_delivered_W": self.power_delivered,
            "power_absorbed_by_sources_W": self.power_absorbed_by_sources,
            "power_dissipated_W": self.power_dissipated,
            "voltage_min": {"node": str(labels[low]), "volts": float(v[low])},
            "voltage_max": {"node": str(labels[high]), "volts": float(v[high])},
            "largest_currents_A": largest(self.branch_current, None),
            "largest_resistor_powers_W": largest(self.branch_power, net.kind == RESISTOR),
            "source_powers_W": largest(self.branch_power,
                                       (net.kind == VOLTAGE_SOURCE) | (net.kind == CURRENT_SOURCE)),
            "undetermined_currents": int((~self.current_determined).sum()),
            "timings_s": dict(self.timings),
            "notes": list(self.notes),
        }


def largest_first(magnitude: np.ndarray, top: int) -> np.ndarray:
    """Positions of the ``top`` largest entries, largest first, ties in position order: the
    first ``top`` of ``np.argsort(-magnitude, kind="stable")``, found by a partition (linear
    time) so that only the chosen entries are sorted."""
    if magnitude.size <= top or np.isnan(magnitude).any():     # NaN: the plain sort puts it last
        return np.argsort(-magnitude, kind="stable")[:top]
    threshold = np.partition(magnitude, magnitude.size - top)[magnitude.size - top]
    above = np.flatnonzero(magnitude > threshold)
    tied = np.flatnonzero(magnitude == threshold)[:top - above.size]
    chosen = np.concatenate([above, tied])
    return chosen[np.argsort(-magnitude[chosen], kind="stable")]


def solve(net: Network, *, method: str = "auto", rtol: float = DEFAULT_RTOL,
          allow_floating: bool = False, report: CheckReport | None = None,
          memory_budget: float | None = None,
          start_voltage: np.ndarray | None = None, kept_setup=None) -> Solution:
    """Solve a network: every node voltage and every branch current, voltage and power.

    Parameters
    ----------
    net : Network
    method : str
        ``"auto"`` or a back end of :data:`ohmgraph.engine.solvers.SOLVERS`, through one
        :class:`~ohmgraph.engine.session.SolveSession`.
    rtol : float
        Relative residual the reduced system's solution must reach.
    allow_floating : bool
        Pin one node of every island without a path to the reference at 0 V.
    report : CheckReport, optional
        A report from :func:`check` with the same ``allow_floating``, to avoid checking twice.
    memory_budget : float, optional
        Bytes the solver's set-up may use (``auto`` chooses within it).
    start_voltage : ndarray, optional
        Node voltages to start an iterative solver from (a warm start, for example a stored
        solution of a nearby network; NaN where unknown). The result is held to ``rtol`` all
        the same.
    kept_setup : KeptSetup, optional
        A solver set-up kept with an earlier solution (:meth:`Solution.kept_setup`), used
        instead of a new set-up when it was made for a reduced system of the same unknowns
        (free supernodes, node-to-supernode map) and sparsity pattern — the same network or one
        with some resistor or source values changed — and otherwise ignored with a note.

    Raises
    ------
    NetworkNotSolvable
        When the checks find an error.
    SolverFailed
        When no solver reaches the accuracy asked for, or the voltages, currents or powers
        overflow double precision.
    """
    timings = {}
    start = time.perf_counter()
    if report is None:
        report = check(net, allow_floating=allow_floating)
    timings["check"] = time.perf_counter() - start
    if not report.solvable:
        raise NetworkNotSolvable(report)

    start = time.perf_counter()
    system = assemble(net, report.contraction, report.pinned_nodes)
    timings["assemble"] = time.perf_counter() - start

    session = SolveSession(system.matrix, method, rtol, memory_budget=memory_budget,
                           kept=kept_setup,
                           placement=(system.free, system.contraction.supernode))
    x0 = None if start_voltage is None else system.unknowns_from_voltages(start_voltage)
    x = session.solve(system.rhs, x0)
    return finish(net, report, system, session, x, rtol, timings)


def finish(net: Network, report: CheckReport, system: ReducedSystem, session: SolveSession,
           x: np.ndarray, rtol: float, timings: dict) -> Solution:
    """Recover node voltages and branch quantities from the reduced solution ``x`` and prove
    them (KCL residual, power balance): the last stage of :func:`solve`, shared with
    re-solves of changed networks (:mod:`ohmgraph.engine.variant`).

    Raises
    ------
    SolverFailed
        When the voltages, currents or powers overflow double precision.
    """
    stats = session.stats
    timings["setup"], timings["solve"] = stats.setup_seconds, stats.solve_seconds

    start = time.perf_counter()
    voltage = system.node_voltages(x)
    branches = branch_quantities(net, report.contraction, voltage)
    if not all(np.isfinite(values).all()
               for values in (voltage, branches.current, branches.power)):
        raise SolverFailed("the solution overflows double precision (IEEE 754 binary64): "
                           "rescale the values, for example to other units")
    residual = np.abs(kcl_residual(net, branches.current))
    worst = int(np.argmax(residual)) if residual.size else 0
    timings["recover"] = time.perf_counter() - start
    return Solution(
        network=net, node_voltage=voltage, branch_current=branches.current,
        branch_voltage=branches.voltage, branch_power=branches.power,
        current_determined=branches.determined, method=stats.method, rtol=rtol,
        iterations=stats.max_iterations, relative_residual=stats.max_relative_residual,
        kcl_max_residual=float(residual[worst]) if residual.size else 0.0, kcl_worst_node=worst,
        power_balance=float(branches.power.sum()),
        power_dissipated=float(branches.power[net.kind == RESISTOR].sum()),
        timings=timings, notes=stats.notes + _pinned_notes(net, report), report=report,
        system=system, session=session, method_reason=stats.reason,
        unknowns=system.n_unknowns)


def _pinned_notes(net: Network, report: CheckReport) -> list:
    if report.pinned_nodes.size == 0:
        return []
    shown = ", ".join(map(str, net.node_labels[report.pinned_nodes[:5]]))
    more = f" and {report.pinned_nodes.size - 5} more" if report.pinned_nodes.size > 5 else ""
    return [f"floating islands pinned at 0 V at node(s) {shown}{more}"]
