"""Readings of a built network and their model values, as linear functionals of the nodal unknowns.

Three kinds of reading are modelled:

* ``V``: the voltage of node ``a`` relative to node ``b`` on the powered network;
* ``I``: the current of one branch on the powered network (positive from its ``from`` node to its
  ``to`` node);
* ``R``: the two-point resistance between ``a`` and ``b`` with every source zeroed
  (:meth:`Network.passive`): the voltage between them when 1 A is driven in at ``a`` and out at
  ``b``, ``R = w^T A^{-1} w`` with ``w = e_a - e_b`` (Klein & Randić, J. Math. Chem. 12, 1993).

Every reading is written over the reduced nodal system of the network it is read on
(:mod:`ohmgraph.engine.formulation`): a weight vector ``w`` over the unknowns (so that a small
change ``dx`` of the unknowns changes the reading by ``w^T dx``) and, for currents, coefficients
``beta`` of the resistor currents that make it up. A voltage reading is ``w = e_a - e_b``. A
resistor's current is ``g (c^T x + d)`` with ``c`` its incidence vector over the unknowns, so
``w = g c`` and ``beta`` is 1 on that resistor. The current of a contracted branch (a voltage
source or an ideal connection on the spanning forest of the contraction) is, by KCL over the set
of nodes on its ``from`` side, minus the net current leaving that set through every other branch
(a cut set; Chua, Desoer & Kuh, *Linear and Nonlinear Circuits*, 1987, ch. 10).

The adjoint solution ``lambda = A^{-1} w`` of a reading (one solve per reading, the matrix being
symmetric) gives its sensitivity to every resistor at once (:mod:`ohmgraph.engine.readings.sensitivity`)
and the single-fault predictions of :mod:`ohmgraph.engine.readings.diagnosis`.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from ..checks import check
from ..formulation import ReducedSystem, assemble
from ..network import CURRENT_SOURCE, RESISTOR, Network
from ..solve import NetworkNotSolvable, Solution, solve
from ..session import SolveSession
from ..solvers import DEFAULT_RTOL, SolveInfo

READING_KINDS = ("V", "R", "I")
POWERED, PASSIVE = "powered", "passive"


@dataclass(frozen=True)
class Readings:
    """Readings resolved against a network.

    Attributes
    ----------
    kind : ndarray of str
        ``"V"``, ``"R"`` or ``"I"`` per reading.
    node_a, node_b : ndarray of int64
        Node indices of ``V`` and ``R`` readings (``node_b`` is the reference when the reading
        names none); -1 for ``I`` readings.
    branch : ndarray of int64
        Branch index of ``I`` readings; -1 otherwise.
    measured : ndarray of float64
        Measured values (volts, ohms, amperes); NaN for a quantity that is only observed.
    band : ndarray of float64
        Allowed deviation ``|measured - model|`` (same unit), from the instrument's accuracy.
    """

    kind: np.ndarray
    node_a: np.ndarray
    node_b: np.ndarray
    branch: np.ndarray
    measured: np.ndarray
    band: np.ndarray

    def __post_init__(self) -> None:
        setter = object.__setattr__.__get__(self)
        setter("kind", np.char.upper(np.asarray(self.kind, dtype=str)))
        for name in ("node_a", "node_b", "branch"):
            setter(name, np.asarray(getattr(self, name), dtype=np.int64))
        for name in ("measured", "band"):
            setter(name, np.asarray(getattr(self, name), dtype=np.float64))
        n = self.kind.shape[0]
        for name in ("node_a", "node_b", "branch", "measured", "band"):
            if getattr(self, name).shape != (n,):
                raise ValueError(f"{name} has shape {getattr(self, name).shape}, expected ({n},)")
        if not np.all(np.isin(self.kind, READING_KINDS)):
            raise ValueError("reading kinds must be V, R or I")

    @property
    def n(self) -> int:
        return int(self.kind.shape[0])

    @classmethod
    def from_labels(cls, net: Network, kinds, a, b, measured=None, band=None) -> "Readings":
        """Resolve readings given by node labels and branch names.

        Parameters
        ----------
        net : Network
        kinds : sequence of str
            ``V``, ``R`` or ``I``.
        a, b : sequence of str
            Node labels (``V``, ``R``; an empty ``b`` means the reference) or, for ``I``, the
            branch name in ``a`` (``b`` unused).
        measured, band : sequence of float, optional
            Default NaN (quantities only observed).

        Raises
        ------
        ValueError
            Naming the first reading (0-based) with an unknown kind, node or branch.
        TypeError
            When a node label or branch name is not a ``str`` (an empty ``b`` may be None).
        """
        kinds = [str(k).strip().upper() for k in kinds]
        count = len(kinds)
        node_a = np.full(count, -1, np.int64)
        node_b = np.full(count, -1, np.int64)
        branch = np.full(count, -1, np.int64)
        names = {}
        for index, name in enumerate(net.branch_names.tolist()):
            names.setdefault(name, []).append(index)
        for row, (kind, first, second) in enumerate(zip(kinds, a, b)):
            for label in (first, second):
                if label is not None and not isinstance(label, str):
                    raise TypeError(f"reading {row}: a node label or branch name must be a "
                                    f"str, not {type(label).__name__} ({label!r})")
            first, second = first.strip(), (second or "").strip()
            if kind == "I":
                matches = names.get(first, [])
                if len(matches) != 1:
                    problem = "no branch" if not matches else f"{len(matches)} branches"
                    raise ValueError(f"reading {row}: {problem} named {first!r}")
                branch[row] = matches[0]
            elif kind in ("V", "R"):
                try:
                    node_a[row] = net.node_index(first)[0]
                    node_b[row] = (net.reference if not second
                                   else net.node_index(second)[0])
                except KeyError as error:
                    raise ValueError(f"reading {row}: {error.args[0]}") from None
            else:
                raise ValueError(f"reading {row}: unknown kind {kind!r} (expected V, R or I)")
        nan = np.full(count, np.nan)
        return cls(np.array(kinds, dtype=str), node_a, node_b, branch,
                   nan if measured is None else measured, nan if band is None else band)


def node_unknowns(system: ReducedSystem, nodes) -> np.ndarray:
    """Unknown index of each node's supernode in ``system`` (-1 where its potential is known)."""
    unknown = np.full(system.contraction.n_supernodes, -1, np.int64)
    unknown[system.free] = np.arange(system.free.size)
    return unknown[system.contraction.supernode[np.asarray(nodes, np.int64)]]


@dataclass
class ReadingSystem:
    """The readings taken on one network (powered or passive) and their adjoint solutions.

    Attributes
    ----------
    name : {"powered", "passive"}
    system : ReducedSystem
    session : SolveSession
        Set up once; solves the adjoint block (every solution proven to its ``rtol``).
    rows : ndarray of int64
        Indices (into the readings) of the readings on this network.
    weights : scipy.sparse.csc_matrix, shape (n_unknowns, len(rows))
        ``w`` of every reading.
    direct : scipy.sparse.csr_matrix, shape (len(rows), n_branches)
        ``beta``: coefficient of each resistor's current in each current reading.
    branch_voltage : ndarray or None
        Branch voltages of the powered solution (None for the passive network, whose state
        differs for every ``R`` reading).
    adjoint : ndarray or None, shape (n_unknowns + 1, len(rows))
        ``A^{-1} w`` of every reading and a zero last row, once :meth:`solve_adjoint` has run.
    adjoint_info : SolveInfo or None
    """

    name: str
    system: ReducedSystem
    session: SolveSession
    rows: np.ndarray
    weights: sp.csc_matrix
    direct: sp.csr_matrix
    branch_voltage: np.ndarray | None
    adjoint: np.ndarray | None = None
    adjoint_info: SolveInfo | None = None

    def node_unknown(self, nodes) -> np.ndarray:
        """Unknown index of each node's supernode (-1 where its potential is known)."""
        return node_unknowns(self.system, nodes)

    def solve_adjoint(self) -> np.ndarray:
        """Solve ``A lambda = w`` for every reading of this network (one block solve).

        Returns
        -------
        ndarray, shape (n_unknowns + 1, len(rows))
            The adjoint solutions with one extra zero row last, standing for the unknowns with
            a known potential (so that :meth:`incidence_products` can gather without branching).
        """
        if self.adjoint is None:
            self.session.expect(self.weights.shape[1])
            solved = self.session.solve(self.weights.toarray())
            self.adjoint_info = self.session.last
            self.adjoint = np.vstack([solved, np.zeros((1, solved.shape[1]))])
        return self.adjoint

    def incidence_products(self, net: Network, branches: np.ndarray,
                           padded: np.ndarray) -> np.ndarray:
        """``c_k^T M`` for the resistors ``branches``: row ``u(from_k)`` minus row ``u(to_k)``.

        ``padded`` is ``M`` with an extra zero last row (as :meth:`solve_adjoint` returns), so a
        resistor inside one supernode or between two known potentials gives a zero row.
        """
        last = padded.shape[0] - 1
        ua = self.node_unknown(net.from_node[branches])
        ub = self.node_unknown(net.to_node[branches])
        return padded[np.where(ua < 0, last, ua)] - padded[np.where(ub < 0, last, ub)]


@dataclass
class ReadingModel:
    """Model values of readings and the systems they were computed on.

    Attributes
    ----------
    network : Network
    readings : Readings
    model_value : ndarray of float64
        Model value of every reading (``inf`` for a resistance between unconnected nodes).
    usable : ndarray of bool
        False where the model cannot give a finite, unique value (an undetermined current, an
        infinite resistance).
    systems : dict
        ``"powered"`` and/or ``"passive"`` :class:`ReadingSystem`.
    solution : Solution or None
        The powered solution (when there are ``V`` or ``I`` readings).
    notes : list of str
    timings : dict
        Seconds per stage.
    """

    network: Network
    readings: Readings
    model_value: np.ndarray
    usable: np.ndarray
    systems: dict
    solution: Solution | None
    notes: list = field(default_factory=list)
    timings: dict = field(default_factory=dict)

    def system_of(self) -> np.ndarray:
        """Name of the network each reading is read on."""
        return np.where(self.readings.kind == "R", PASSIVE, POWERED)


def _unit_weights(system: ReducedSystem, columns: np.ndarray, a: np.ndarray, b: np.ndarray,
                  n_columns: int) -> sp.csc_matrix:
    """``e_u(a) - e_u(b)`` in the given columns, dropping unknowns with a known potential."""
    rows = np.concatenate([node_unknowns(system, a), node_unknowns(system, b)])
    cols = np.concatenate([columns, columns])
    data = np.concatenate([np.ones(a.size), -np.ones(b.size)])
    keep = rows >= 0
    n = system.n_unknowns
    return sp.csc_matrix((data[keep], (rows[keep], cols[keep])), shape=(n, n_columns))


def cut_coefficients(net: Network, contraction, branch: int) -> np.ndarray:
    """Coefficients ``beta`` of every branch current in the current of a contracted tree branch.

    The nodes left on the ``from`` side when ``branch`` is removed from the spanning forest form
    a set ``S``; by KCL over ``S``, ``I(branch) = -sum_k (1_S[from_k] - 1_S[to_k]) I_k`` over the
    other branches ``k``.
    """
    tree = contraction.source_branches[contraction.tree]
    others = tree[tree != branch]
    graph = sp.coo_matrix((np.ones(others.size, np.int8),
                           (net.from_node[others], net.to_node[others])),
                          shape=(net.n_nodes, net.n_nodes))
    _, label = connected_components(graph, directed=False)
    inside = (label == label[net.from_node[branch]]).astype(np.float64)
    beta = -(inside[net.from_node] - inside[net.to_node])
    beta[branch] = 0.0
    return beta


def _current_coefficients(net: Network, solution: Solution, branch: int) -> np.ndarray:
    """``beta`` over all branches for the current of one branch (zero for a current source)."""
    beta = np.zeros(net.n_branches)
    if net.kind[branch] == CURRENT_SOURCE:
        return beta
    if net.kind[branch] == RESISTOR and net.value[branch] > 0:
        beta[branch] = 1.0
        return beta
    return cut_coefficients(net, solution.report.contraction, branch)


def _powered_system(net: Network, readings: Readings, rows: np.ndarray,
                    solution: Solution) -> ReadingSystem:
    system = solution.system
    resistive = (net.kind == RESISTOR) & (net.value > 0)
    conductance = np.where(resistive, 1.0 / np.where(resistive, net.value, 1.0), 0.0)
    beta_rows, beta_cols, beta_data = [], [], []
    for column, reading in enumerate(rows):
        if readings.kind[reading] != "I":
            continue
        beta = _current_coefficients(net, solution, int(readings.branch[reading]))
        beta[~resistive] = 0.0
        touched = np.flatnonzero(beta)
        beta_rows.append(np.full(touched.size, column))
        beta_cols.append(touched)
        beta_data.append(beta[touched])
    direct = sp.csr_matrix(
        (np.concatenate(beta_data or [np.empty(0)]),
         (np.concatenate(beta_rows or [np.empty(0, np.int64)]),
          np.concatenate(beta_cols or [np.empty(0, np.int64)]))),
        shape=(rows.size, net.n_branches))
    voltage = np.flatnonzero(readings.kind[rows] == "V")
    weights = _unit_weights(system, voltage, readings.node_a[rows[voltage]],
                            readings.node_b[rows[voltage]], rows.size)
    # Current readings: w = sum_k beta_k g_k c_k over the resistors between supernodes. The
    # incidence matrix has one extra leading column collecting the known potentials.
    graph_branches = system.graph.branches
    count = graph_branches.size
    incidence = sp.csr_matrix(
        (np.concatenate([np.ones(count), -np.ones(count)]),
         (np.concatenate([np.arange(count)] * 2),
          np.concatenate([node_unknowns(system, net.from_node[graph_branches]),
                          node_unknowns(system, net.to_node[graph_branches])]) + 1)),
        shape=(count, system.n_unknowns + 1))
    scaled = direct[:, graph_branches].multiply(conductance[graph_branches]).tocsr()
    current_weights = (scaled @ incidence).T.tocsc()[1:]
    return ReadingSystem(POWERED, system, solution.session, rows,
                         sp.csc_matrix(weights + current_weights), direct,
                         solution.branch_voltage)


def _passive_system(net: Network, readings: Readings, rows: np.ndarray, method: str,
                    rtol: float, memory_budget: float | None = None
                    ) -> tuple[ReadingSystem, np.ndarray]:
    passive = net.passive()
    report = check(passive, allow_floating=True)
    if not report.solvable:
        raise NetworkNotSolvable(report)
    system = assemble(passive, report.contraction, report.pinned_nodes)
    session = SolveSession(system.matrix, method, rtol, memory_budget=memory_budget)
    session.expect(rows.size)
    a, b = readings.node_a[rows], readings.node_b[rows]
    rs = ReadingSystem(PASSIVE, system, session, rows,
                       _unit_weights(system, np.arange(rows.size), a, b, rows.size),
                       sp.csr_matrix((rows.size, net.n_branches)), None)
    adjoint = rs.solve_adjoint()
    resistance = np.asarray(rs.weights.multiply(adjoint[:-1]).sum(axis=0)).ravel()
    graph = sp.coo_matrix((np.ones(passive.n_branches, np.int8),
                           (passive.from_node, passive.to_node)),
                          shape=(net.n_nodes, net.n_nodes))
    _, component = connected_components(graph, directed=False)
    resistance[component[a] != component[b]] = np.inf
    return rs, resistance


def build_model(net: Network, readings: Readings, *, method: str = "auto",
                rtol: float = DEFAULT_RTOL, solution: Solution | None = None,
                allow_floating: bool = False,
                memory_budget: float | None = None) -> ReadingModel:
    """Model value of every reading, with the systems set up for adjoint solves.

    ``V`` and ``I`` readings come from one solve of the powered network (reused when
    ``solution`` is given); ``R`` readings from the passive network, one solve per reading
    (which is also that reading's adjoint solve).

    Parameters
    ----------
    net : Network
    readings : Readings
    method, rtol
        Linear solver and relative residual target (:mod:`ohmgraph.engine.solvers`).
    solution : Solution, optional
        An existing powered solution of ``net``.
    allow_floating : bool
        Pin floating islands of the powered network at 0 V.
    memory_budget : float, optional
        Bytes a solver set-up may use (None: the default, :mod:`ohmgraph.engine.memory`).

    Raises
    ------
    NetworkNotSolvable
        When the powered (or, for ``R`` readings, the passive) network has no unique solution.
    SolverFailed
    """
    timings, notes, systems = {}, [], {}
    model = np.full(readings.n, np.nan)
    usable = np.ones(readings.n, bool)
    powered_rows = np.flatnonzero(readings.kind != "R")
    passive_rows = np.flatnonzero(readings.kind == "R")
    if powered_rows.size:
        start = time.perf_counter()
        if solution is None:
            solution = solve(net, method=method, rtol=rtol, allow_floating=allow_floating,
                             memory_budget=memory_budget)
        timings["solve"] = time.perf_counter() - start
        start = time.perf_counter()
        kinds = readings.kind[powered_rows]
        volts = solution.node_voltage
        voltage_rows = powered_rows[kinds == "V"]
        model[voltage_rows] = (volts[readings.node_a[voltage_rows]]
                               - volts[readings.node_b[voltage_rows]])
        current_rows = powered_rows[kinds == "I"]
        model[current_rows] = solution.branch_current[readings.branch[current_rows]]
        free = ~solution.current_determined[readings.branch[current_rows]]
        usable[current_rows[free]] = False
        if free.any():
            notes.append(f"{int(free.sum())} current reading(s) are on branches whose current a "
                         "loop of sources/ideal connections leaves undetermined")
        systems[POWERED] = _powered_system(net, readings, powered_rows, solution)
        timings["model_powered"] = time.perf_counter() - start
    if passive_rows.size:
        start = time.perf_counter()
        systems[PASSIVE], resistance = _passive_system(net, readings, passive_rows, method, rtol,
                                                        memory_budget)
        model[passive_rows] = resistance
        infinite = ~np.isfinite(resistance)
        usable[passive_rows[infinite]] = False
        if infinite.any():
            notes.append(f"{int(infinite.sum())} resistance reading(s) join nodes with no path "
                         "between them (infinite resistance)")
        timings["model_passive"] = time.perf_counter() - start
    return ReadingModel(net, readings, model, usable, systems, solution, notes, timings)


@dataclass(frozen=True)
class Comparison:
    """Readings against their model values.

    Attributes
    ----------
    measured, model, deviation, band : ndarray
        ``deviation = measured - model``; ``band`` the allowed ``|deviation|``.
    normalized : ndarray
        ``deviation / band`` (``inf`` where the band is 0 and the deviation is not, and
        ``±inf`` where the deviation itself is infinite).
    passed : ndarray of bool
        ``|deviation| <= band`` with a finite deviation (and the model value is usable).
    usable : ndarray of bool
    """

    measured: np.ndarray
    model: np.ndarray
    deviation: np.ndarray
    band: np.ndarray
    normalized: np.ndarray
    passed: np.ndarray
    usable: np.ndarray

    @property
    def all_passed(self) -> bool:
        return bool(self.passed.all())

    def summary(self) -> dict:
        """Counts, and the reading furthest outside its band."""
        size = np.where(np.isnan(self.normalized), -1.0, np.abs(self.normalized))
        worst = int(np.argmax(size)) if size.size else None
        return {
            "readings": int(self.passed.size),
            "passed": int(self.passed.sum()),
            "failed": int((~self.passed).sum()),
            "unusable": int((~self.usable).sum()),
            "worst_reading": worst,
            "worst_normalized_deviation": (float(self.normalized[worst])
                                           if worst is not None else None),
        }


def compare(model: ReadingModel, band: np.ndarray | None = None) -> Comparison:
    """Compare every reading with its model value: pass when ``|measured - model| <= band``.

    A resistance reading of ``inf`` (open circuit) matches an infinite model value and fails
    against a finite one, even though a percentage accuracy makes its band infinite too.

    Parameters
    ----------
    model : ReadingModel
    band : ndarray, optional
        Allowed deviation of every reading; default the instrument's (``readings.band``), for
        example the bands with part tolerances of :func:`.bands.reading_bands`.
    """
    readings = model.readings
    measured, value = readings.measured, model.model_value
    band = readings.band if band is None else np.asarray(band, np.float64)
    both_infinite = np.isinf(measured) & np.isinf(value) & (np.sign(measured) == np.sign(value))
    with np.errstate(invalid="ignore"):
        deviation = np.where(both_infinite, 0.0, measured - value)
    finite_deviation = np.isfinite(deviation)
    with np.errstate(divide="ignore", invalid="ignore"):
        normalized = np.where(deviation == 0, 0.0,
                              np.where(finite_deviation, deviation / band, deviation))
    determined = model.usable | both_infinite
    passed = determined & finite_deviation & (np.abs(deviation) <= band)
    return Comparison(measured, value, deviation, band, normalized, passed, determined)


__all__ = ["Readings", "ReadingModel", "ReadingSystem", "Comparison", "build_model", "compare",
           "cut_coefficients", "READING_KINDS", "POWERED", "PASSIVE"]
