"""Variants: a network with some branches changed, re-solved by reusing what the base solve set
up.

A change (:class:`BranchChanges`) sets the value of existing branches (``inf`` opens a
resistor: it is removed) and adds new branches. :func:`apply_changes` builds the changed
network. :func:`resolve` solves it:

* When only resistor values change (finite and positive before and after) and current-source
  values, the supernodes, the unknowns and the solvability are those of the base network, so the
  check is skipped and the reduced system is updated in place of a new assembly: each changed
  resistor adds ``dg = 1/R_new - 1/R_old`` to its two diagonal entries and ``-dg`` to its
  off-diagonal pair, and the right-hand side changes by the same terms. The system is then
  solved by conjugate gradient preconditioned by the base session's set-up (its AMG hierarchy,
  or its factorisation, which for few changed branches makes CG finish in about as many steps
  as branches changed, like a Sherman–Morrison–Woodbury update), started from the base
  solution. The measured residual of the changed system proves the result; if CG misses
  ``rtol``, a session of its own is set up for the changed matrix.
* Any other change (a source voltage, an opened or added branch, an ideal connection) goes the
  whole way through :func:`~ohmgraph.engine.solve.solve`, started from the base voltages.

Either way the KCL residual and the power balance are recomputed from the new currents.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from .network import CURRENT_SOURCE, RESISTOR, Network
from .solve import Solution, finish, solve
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
    """Whether the changes keep the structure: only resistors that stay finite and positive,
    and current sources, change value; nothing is added or opened."""
    if changes.new_names.size:
        return False
    kind = net.kind[changes.index]
    old, new = net.value[changes.index], changes.value
    resistor = kind == RESISTOR
    resistors_ok = np.all(np.isfinite(old[resistor]) & (old[resistor] > 0)
                          & np.isfinite(new[resistor]) & (new[resistor] > 0))
    sources_ok = np.all(np.isfinite(new[kind == CURRENT_SOURCE]))
    return bool(resistors_ok and sources_ok and np.all(resistor | (kind == CURRENT_SOURCE)))


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
            method: str = "auto") -> Solution:
    """Solve the network ``base`` with ``changes``, reusing the base solve's set-up.

    Parameters
    ----------
    base : Solution
        A fresh solution (with its ``system`` and ``session``).
    changes : BranchChanges
    rtol : float, optional
        Relative residual target (default the base's).
    method : str
        Back end of a solve from scratch, when one is needed.

    Returns
    -------
    Solution
        Of the changed network; its ``notes`` say how it was solved. It has no ``session`` of
        its own when the base set-up served.

    Raises
    ------
    NetworkNotSolvable, SolverFailed
        As :func:`~ohmgraph.engine.solve.solve`.
    """
    rtol = base.rtol if rtol is None else float(rtol)
    changed = apply_changes(base.network, changes)
    start_voltage = np.full(changed.n_nodes, np.nan)
    start_voltage[:base.network.n_nodes] = base.node_voltage
    if not (values_only(base.network, changes) and base.system is not None
            and base.session is not None and base.session.rtol <= rtol):
        solution = solve(changed, method=method, rtol=rtol, start_voltage=start_voltage)
        solution.notes.append("changed network solved from scratch, started from the base "
                              "voltages")
        return solution

    timings = {}
    start = time.perf_counter()
    system = _updated_system(base, changed, changes.index)
    timings["update"] = time.perf_counter() - start
    x0 = system.unknowns_from_voltages(base.node_voltage)
    session = base.session
    try:
        x = session.solve_nearby(system.matrix, system.rhs, x0)
        info = session.last
        note = (f"re-solved by {info.method} (the base set-up), {info.iterations} iteration(s) "
                "from the base solution")
    except SolverFailed as error:
        solution = solve(changed, method=method, rtol=rtol, report=base.report,
                         start_voltage=start_voltage)
        solution.notes.append(f"the base set-up missed rtol ({error}); solved afresh")
        return solution
    timings["solve"] = info.solve_seconds
    solution = finish(changed, base.report, system, session, x, rtol, timings)
    solution.timings = {"update": timings["update"], "setup": 0.0,
                        "solve": info.solve_seconds, "recover": timings["recover"]}
    solution.method, solution.iterations = info.method, info.iterations
    solution.relative_residual = info.relative_residual
    solution.notes = [note]
    solution.session = None
    return solution
