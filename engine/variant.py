"""Variants: a network with some branches changed, re-solved by reusing what the base solve set
up.

A change (:class:`BranchChanges`) sets the value of existing branches (``inf`` opens a
resistor: it is removed) and adds new branches. :func:`apply_changes` builds the changed
network. :func:`resolve` solves it, reusing as much of the base solve as the change allows:

1. **Values only** (resistors that stay finite and positive, current sources): the check is
   not re-run, because nothing it decides except the resistance spread depends on these values
   (:func:`changed_report` says why and recomputes the spread), and the reduced system is
   updated instead of assembled: each changed resistor adds ``dg = 1/R_new - 1/R_old`` to its
   two diagonal entries and ``-dg`` to its off-diagonal pair, and the right-hand side changes by
   the same terms.
2. **Structure changed, unknowns kept** (an opened resistor, an added resistor or current
   source between existing nodes): the changed network is checked in full — an opened resistor
   can cut nodes off, which must be refused with the check's finding — and assembled, and its
   supernodes and free supernodes are compared with the base's.

In both cases the system is solved by conjugate gradient preconditioned by the base session's
set-up (its AMG hierarchy with the changed matrix on the finest level, or its factorisation),
started from the base solution, through :meth:`SolveSession.solve_nearby
<ohmgraph.engine.session.SolveSession.solve_nearby>`: the target is the fresh solve's,
``||b - A x|| <= rtol ||b||`` for the changed system (absolute, not relative to the starting
residual), and the measured residual proves the result.

3. **Anything else** (new nodes, a voltage source set or added, an ideal connection), and a
   re-solve whose CG missed ``rtol``: the changed network goes the whole way through
   :func:`~ohmgraph.engine.solve.solve` with its check report, started from the base voltages.

Every way the branch currents, the KCL residual and the power balance are recomputed from the
new voltages: the evidence of a variant is that of a fresh solve.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from .checks import (ERROR, INFO, SMALLEST_RESISTANCE, WARNING, CheckReport, check,
                     conductance_spread, spread_finding)
from .formulation import assemble
from .network import CURRENT_SOURCE, RESISTOR, Network
from .solve import NetworkNotSolvable, Solution, finish, solve
from .solvers import SolverFailed


@dataclass(frozen=True)
class BranchChanges:
    """Changes to a network's branches.

    Attributes
    ----------
    index : ndarray of int64
        Existing branches whose value is set.
    value : ndarray of float64
        Their new values (``inf`` on a resistor opens it: the branch is removed).
    new_names : ndarray of str
    new_kind : ndarray of uint8
    new_from, new_to : ndarray of str
        Endpoint labels of added branches (new labels add nodes).
    new_value : ndarray of float64
    """

    index: np.ndarray
    value: np.ndarray
    new_names: np.ndarray = field(default_factory=lambda: np.empty(0, str))
    new_kind: np.ndarray = field(default_factory=lambda: np.empty(0, np.uint8))
    new_from: np.ndarray = field(default_factory=lambda: np.empty(0, str))
    new_to: np.ndarray = field(default_factory=lambda: np.empty(0, str))
    new_value: np.ndarray = field(default_factory=lambda: np.empty(0))

    def __post_init__(self) -> None:
        setter = object.__setattr__.__get__(self)
        for name, dtype in (("index", np.int64), ("value", np.float64), ("new_names", str),
                            ("new_kind", np.uint8), ("new_from", str), ("new_to", str),
                            ("new_value", np.float64)):
            setter(name, np.asarray(getattr(self, name), dtype=dtype))
        if self.index.shape != self.value.shape:
            raise ValueError("index and value must have the same length")

    @property
    def opened(self) -> np.ndarray:
        """Existing branches opened (set to ``inf``)."""
        return self.index[np.isinf(self.value)]


def apply_changes(net: Network, changes: BranchChanges) -> Network:
    """The changed network: values set, opened resistors removed, new branches (and nodes)
    appended. Node indices of existing nodes are kept."""
    value = net.value.copy()
    value[changes.index] = changes.value
    if changes.new_names.size == 0 and changes.opened.size == 0:
        return net.with_values(value)
    keep = np.ones(net.n_branches, bool)
    keep[changes.opened] = False
    labels = net.node_labels
    new_labels = np.concatenate([changes.new_from, changes.new_to]).astype(str)
    index = net.label_index
    fresh = [label for label in dict.fromkeys(new_labels.tolist()) if label not in index]
    if fresh:
        labels = np.concatenate([labels, np.asarray(fresh, dtype=str)])
        index = {**index, **{label: net.n_nodes + k for k, label in enumerate(fresh)}}
    ends = np.asarray([index[label] for label in new_labels.tolist()], dtype=np.int64)
    m = changes.new_names.size
    return Network(labels, np.concatenate([net.branch_names[keep], changes.new_names]),
                   np.concatenate([net.kind[keep], changes.new_kind]),
                   np.concatenate([net.from_node[keep], ends[:m]]),
                   np.concatenate([net.to_node[keep], ends[m:]]),
                   np.concatenate([value[keep], changes.new_value]), net.reference)


def values_only(net: Network, changes: BranchChanges) -> bool:
    """Whether the changes keep the structure: only resistors that stay finite and at least
    :data:`~ohmgraph.engine.checks.SMALLEST_RESISTANCE`, and current sources, change value;
    nothing is added or opened."""
    if changes.new_names.size:
        return False
    kind = net.kind[changes.index]
    old, new = net.value[changes.index], changes.value
    resistor = kind == RESISTOR
    resistors_ok = np.all(np.isfinite(old[resistor]) & (old[resistor] >= SMALLEST_RESISTANCE)
                          & np.isfinite(new[resistor]) & (new[resistor] >= SMALLEST_RESISTANCE))
    sources_ok = np.all(np.isfinite(new[kind == CURRENT_SOURCE]))
    return bool(resistors_ok and sources_ok and np.all(resistor | (kind == CURRENT_SOURCE)))


def changed_report(report: CheckReport, net: Network, changes: BranchChanges,
                   changed: Network) -> CheckReport | None:
    """The check report of ``changed`` derived from the base network's ``report`` without a
    new check, when the changes cannot alter any finding but the value spread; else None.

    With :func:`values_only` changes every structural finding stays as it was: the contraction
    and its loops depend only on the voltage sources and ideal connections, the components and
    floating islands only on which branches exist, branch names and self-loops are untouched,
    and every changed value is finite and its conductance too. Only the ``ill-conditioned``
    warning and the summary's conductance spread depend on the resistor values; they are
    recomputed. A base with pinned floating islands is excluded (whether such an island breaks
    KCL depends on the current-source values), as is a base report without its contraction.
    """
    if (report is None or report.contraction is None or report.pinned_nodes.size
            or not report.solvable or not values_only(net, changes)):
        return None
    findings = [f for f in report.findings if f.code != "ill-conditioned"]
    spread = spread_finding(changed)
    if spread is not None:
        findings.append(spread)
    order = {ERROR: 0, WARNING: 1, INFO: 2}
    findings.sort(key=lambda f: order[f.severity])
    summary = {**report.summary, "conductance_spread": conductance_spread(changed),
               "warnings": sum(f.severity == WARNING for f in findings)}
    return CheckReport(findings, summary, report.contraction, report.pinned_nodes)


def _updated_system(base: Solution, changed: Network, index: np.ndarray):
    """The base reduced system with the changed resistor and current-source values."""
    system, net = base.system, base.network
    contraction = system.contraction
    supernode, offset = contraction.supernode, contraction.offset
    n = contraction.n_supernodes
    unknown_of = np.full(n, -1, np.int64)
    unknown_of[system.free] = np.arange(system.free.size)
    rhs = np.zeros(n)

    resistors = index[net.kind[index] == RESISTOR]
    a, b = supernode[net.from_node[resistors]], supernode[net.to_node[resistors]]
    between = a != b
    resistors, a, b = resistors[between], a[between], b[between]
    dg = 1.0 / changed.value[resistors] - 1.0 / net.value[resistors]
    drive = dg * (offset[net.from_node[resistors]] - offset[net.to_node[resistors]])
    rhs += np.bincount(b, drive, minlength=n) - np.bincount(a, drive, minlength=n)
    known = system.known_potential
    ua, ub = unknown_of[a], unknown_of[b]
    rhs += np.bincount(a[(ua >= 0) & (ub < 0)], (dg * known[b])[(ua >= 0) & (ub < 0)],
                       minlength=n)
    rhs += np.bincount(b[(ua < 0) & (ub >= 0)], (dg * known[a])[(ua < 0) & (ub >= 0)],
                       minlength=n)
    both = (ua >= 0) & (ub >= 0)
    rows = np.concatenate([ua[ua >= 0], ub[ub >= 0], ua[both], ub[both]])
    cols = np.concatenate([ua[ua >= 0], ub[ub >= 0], ub[both], ua[both]])
    data = np.concatenate([dg[ua >= 0], dg[ub >= 0], -dg[both], -dg[both]])
    k = system.free.size
    matrix = system.matrix + sp.csr_matrix((data, (rows, cols)), shape=(k, k))

    sources = index[net.kind[index] == CURRENT_SOURCE]
    amps = changed.value[sources] - net.value[sources]
    rhs += (np.bincount(supernode[net.to_node[sources]], amps, minlength=n)
            - np.bincount(supernode[net.from_node[sources]], amps, minlength=n))

    graph = system.graph
    position = np.searchsorted(graph.branches, resistors)
    conductance = graph.conductance.copy()
    conductance[position] = 1.0 / changed.value[resistors]
    graph = type(graph)(graph.branches, graph.a, graph.b, conductance, graph.n_supernodes)
    return type(system)(matrix, system.rhs + rhs[system.free], system.free, known, contraction,
                        graph)


def resolve(base: Solution, changes: BranchChanges, *, rtol: float | None = None,
            method: str = "auto", allow_floating: bool = False) -> Solution:
    """Solve the network ``base`` with ``changes``, reusing what the base solve set up.

    Parameters
    ----------
    base : Solution
        A fresh solution (with its ``report``, ``system`` and ``session``).
    changes : BranchChanges
    rtol : float, optional
        Relative residual target ``||b - A x|| / ||b||`` of the changed system (default the
        base's), the criterion of a fresh solve.
    method : str
        Back end of a solve from scratch, when one is needed.
    allow_floating : bool
        As for :func:`~ohmgraph.engine.solve.solve`, for the check of a changed structure.

    Returns
    -------
    Solution
        Of the changed network; its ``notes`` say how it was solved and its ``timings`` hold
        ``check``, ``update`` (or ``assemble``), ``setup`` (0 when the base set-up served),
        ``solve`` and ``recover``. It has no ``session`` of its own when the base set-up
        served.

    Raises
    ------
    NetworkNotSolvable
        When the changed network fails its checks (the report holds the findings).
    SolverFailed
        As :func:`~ohmgraph.engine.solve.solve`.
    """
    rtol = base.rtol if rtol is None else float(rtol)
    changed = apply_changes(base.network, changes)
    start_voltage = np.full(changed.n_nodes, np.nan)
    start_voltage[:base.network.n_nodes] = base.node_voltage
    reusable = (base.system is not None and base.session is not None
                and base.session.rtol <= rtol)
    timings = {}
    start = time.perf_counter()
    report = changed_report(base.report, base.network, changes, changed) if reusable else None
    if report is not None:
        system = _updated_system(base, changed, changes.index)
        timings["check"], timings["update"] = 0.0, time.perf_counter() - start
    else:
        report = check(changed, allow_floating=allow_floating)
        timings["check"] = time.perf_counter() - start
        if not report.solvable:
            raise NetworkNotSolvable(report)
        system = None
        if reusable:
            start = time.perf_counter()
            system = assemble(changed, report.contraction, report.pinned_nodes)
            timings["assemble"] = time.perf_counter() - start
            if not _same_unknowns(base, changed, system):
                system = None
    if system is None:
        solution = solve(changed, method=method, rtol=rtol, report=report,
                         start_voltage=start_voltage)
        solution.timings["check"] = timings["check"]
        solution.notes.append("changed network solved from scratch, started from the base "
                              "voltages")
        return solution

    x0 = system.unknowns_from_voltages(start_voltage)
    session = base.session
    try:
        x = session.solve_nearby(system.matrix, system.rhs, x0)
    except SolverFailed as error:
        solution = solve(changed, method=method, rtol=rtol, report=report,
                         start_voltage=start_voltage)
        solution.notes.append(f"the base set-up missed rtol ({error}); solved afresh")
        return solution
    info = session.last
    solution = finish(changed, report, system, session, x, rtol, timings)
    solution.timings = {**timings, "setup": 0.0, "solve": info.solve_seconds,
                        "recover": timings["recover"]}
    solution.method, solution.iterations = info.method, info.iterations
    solution.relative_residual = info.relative_residual
    pinned = solution.notes[len(session.stats.notes):]
    structure = "" if "update" in timings else "; the changed structure checked and assembled"
    solution.notes = [f"re-solved by {info.method} (the base set-up), {info.iterations} "
                      f"iteration(s) from the base solution{structure}", *pinned]
    solution.session = None
    return solution


def _same_unknowns(base: Solution, changed: Network, system) -> bool:
    """Whether ``system`` (of the changed network) has the base system's unknowns: the same
    nodes, supernodes and free supernodes, so the base set-up fits its matrix."""
    old = base.system
    return (changed.n_nodes == base.network.n_nodes
            and system.matrix.shape == old.matrix.shape
            and np.array_equal(system.contraction.supernode, old.contraction.supernode)
            and np.array_equal(system.free, old.free))
