"""Well-posedness checks: is there exactly one solution, and if not, which nodes and branches are
at fault.

A linear resistive network with positive resistances has a unique solution exactly when
(Kirchhoff's laws; see e.g. Chua, Desoer & Kuh, *Linear and Nonlinear Circuits*, 1987, ch. 9):

* no loop made only of voltage sources and ideal connections breaks KVL (a KVL-consistent one
  still leaves the current circulating around it undetermined);
* no set of nodes is joined to the rest only through current sources that inject a non-zero net
  current into it (KCL across that cut set cannot hold);
* every node has a path of resistors, voltage sources or ideal connections to the reference
  (otherwise its potential floats).

The components come from :func:`scipy.sparse.csgraph.connected_components`; the loops from the
supernode contraction (:mod:`ohmgraph.engine.contraction`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numba
import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .contraction import Contraction, contract
from .network import CURRENT_SOURCE, RESISTOR, Network

ERROR, WARNING, INFO = "error", "warning", "info"
CONDUCTANCE_SPREAD_LIMIT = 1e12
# Below this a resistance's conductance 1/R overflows double precision (IEEE 754 binary64).
SMALLEST_RESISTANCE = 1.0 / np.finfo(np.float64).max
KVL_RELATIVE_TOLERANCE = 1e-9
KCL_RELATIVE_TOLERANCE = 1e-9


@dataclass(frozen=True)
class Finding:
    """One result of a check.

    Attributes
    ----------
    severity : {"error", "warning", "info"}
    code : str
        Stable identifier (for example ``"kvl-violation"``).
    message : str
        One sentence for a person.
    nodes, branches : ndarray of int64
        Every node / branch index involved (renderers show the first few and the count).
    """

    severity: str
    code: str
    message: str
    nodes: np.ndarray = field(default_factory=lambda: np.empty(0, np.int64))
    branches: np.ndarray = field(default_factory=lambda: np.empty(0, np.int64))


@dataclass
class CheckReport:
    """All findings for a network, its summary, and the contraction later stages reuse."""

    findings: list
    summary: dict
    contraction: Contraction | None
    pinned_nodes: np.ndarray

    @property
    def solvable(self) -> bool:
        """True when no finding is an error."""
        return not any(f.severity == ERROR for f in self.findings)

    def of_severity(self, severity: str) -> list:
        return [f for f in self.findings if f.severity == severity]


def _indices(mask_or_index) -> np.ndarray:
    arr = np.asarray(mask_or_index)
    return np.flatnonzero(arr).astype(np.int64) if arr.dtype == bool else arr.astype(np.int64)


# 64-bit FNV-1a (Fowler, Noll & Vo; http://www.isthe.com/chongo/tech/comp/fnv/), one step per
# UCS-4 code unit.
FNV_OFFSET = np.uint64(0xCBF29CE484222325)
FNV_PRIME = np.uint64(0x100000001B3)


def string_hashes(strings: np.ndarray, kernel: bool = True) -> np.ndarray:
    """64-bit FNV-1a hash of every entry of a NumPy unicode array (equal strings hash equal):
    compiled, one pass over the text in memory order (:func:`string_hashes_kernel`), or with
    ``kernel=False`` vectorised over entries, one pass per character position
    (:func:`string_hashes_reference`)."""
    strings = np.ascontiguousarray(strings, dtype=str)
    codes = strings.view(np.uint32).reshape(strings.size, strings.dtype.itemsize // 4)
    return string_hashes_kernel(codes) if kernel else string_hashes_reference(codes)


@numba.njit(cache=True)
def string_hashes_kernel(codes):
    """FNV-1a over the rows of ``codes`` (UCS-4 code units, one string per row)."""
    hashes = np.empty(codes.shape[0], np.uint64)
    for row in range(codes.shape[0]):
        value = FNV_OFFSET
        for column in range(codes.shape[1]):
            value = (value ^ np.uint64(codes[row, column])) * FNV_PRIME
        hashes[row] = value
    return hashes


def string_hashes_reference(codes: np.ndarray) -> np.ndarray:
    """:func:`string_hashes_kernel` in NumPy, one pass per column."""
    hashes = np.full(codes.shape[0], FNV_OFFSET, np.uint64)
    for column in codes.T:
        hashes ^= column
        hashes *= FNV_PRIME
    return hashes


def repeated_strings(strings: np.ndarray) -> tuple[np.ndarray, int]:
    """Indices of the entries whose text occurs more than once, and how many distinct texts do.

    Sorting 64-bit hashes (:func:`string_hashes`) finds the candidates; only entries whose hash
    repeats are compared exactly (:func:`numpy.unique`), so a hash collision costs time, never
    a wrong answer. Same result as :func:`repeated_strings_reference`.
    """
    hashes = string_hashes(strings)
    ordered = np.sort(hashes)
    clashes = ordered[1:][ordered[1:] == ordered[:-1]]
    if clashes.size == 0:
        return np.empty(0, np.int64), 0
    return _repeated_among(strings, np.flatnonzero(np.isin(hashes, clashes)))


def repeated_strings_reference(strings: np.ndarray) -> tuple[np.ndarray, int]:
    """:func:`repeated_strings` by sorting the text itself (:func:`numpy.unique`)."""
    return _repeated_among(strings, np.arange(len(strings)))


def _repeated_among(strings: np.ndarray, candidates: np.ndarray) -> tuple[np.ndarray, int]:
    _, inverse, counts = np.unique(np.asarray(strings)[candidates], return_inverse=True,
                                       return_counts=True)
    return candidates[counts[inverse.reshape(-1)] > 1].astype(np.int64), int((counts > 1).sum())


def _value_findings(net: Network) -> list:
    findings = []
    bad = _indices(~np.isfinite(net.value))
    if bad.size:
        findings.append(Finding(ERROR, "non-finite-value",
                                f"{bad.size} branch value(s) are not finite numbers",
                                branches=bad))
    negative = _indices((net.kind == RESISTOR) & (net.value < 0))
    if negative.size:
        findings.append(Finding(
            ERROR, "negative-resistance",
            f"{negative.size} resistor(s) have negative resistance; only passive networks are "
            "supported", branches=negative))
    tiny = _indices((net.kind == RESISTOR) & (net.value > 0) & (net.value < SMALLEST_RESISTANCE))
    if tiny.size:
        findings.append(Finding(
            ERROR, "conductance-overflow",
            f"{tiny.size} resistor(s) are below {SMALLEST_RESISTANCE:.2g} ohm, so their "
            "conductance 1/R is not a finite number; write 0 for an ideal connection",
            branches=tiny))
    loops = _indices(net.from_node == net.to_node)
    if loops.size:
        findings.append(Finding(WARNING, "self-loop",
                                f"{loops.size} branch(es) start and end on the same node",
                                nodes=np.unique(net.from_node[loops]), branches=loops))
    dup, names_repeated = repeated_strings(net.branch_names)
    if dup.size:
        findings.append(Finding(WARNING, "duplicate-name",
                                f"{names_repeated} branch name(s) are used more than "
                                f"once ({dup.size} branches)", branches=dup))
    ideal = _indices((net.kind == RESISTOR) & (net.value == 0))
    if ideal.size:
        findings.append(Finding(INFO, "ideal-connection",
                                f"{ideal.size} zero-ohm resistor(s) are ideal connections; the "
                                "nodes they join are merged", branches=ideal))
    spread = spread_finding(net)
    return findings + ([spread] if spread else [])


def conductance_spread(net: Network) -> float | None:
    """Largest over smallest positive finite resistance (None without such resistors)."""
    resistive = (net.kind == RESISTOR) & (net.value > 0) & np.isfinite(net.value)
    if not resistive.any():
        return None
    with np.errstate(over="ignore"):
        return float(net.value[resistive].max() / net.value[resistive].min())


def spread_finding(net: Network) -> Finding | None:
    """The ``ill-conditioned`` warning when the resistances span more than
    :data:`CONDUCTANCE_SPREAD_LIMIT`, else None."""
    spread = conductance_spread(net)
    if spread is None or spread <= CONDUCTANCE_SPREAD_LIMIT:
        return None
    resistive = _indices((net.kind == RESISTOR) & (net.value > 0) & np.isfinite(net.value))
    return Finding(
        WARNING, "ill-conditioned",
        f"resistances span a factor of {spread:.3g} (over {CONDUCTANCE_SPREAD_LIMIT:.0e}); "
        "expect lost digits in the solution",
        branches=resistive[[int(np.argmin(net.value[resistive])),
                            int(np.argmax(net.value[resistive]))]])


def tree_path(net: Network, contraction: Contraction, branch: int) -> np.ndarray:
    """Branches of the loop that ``branch`` closes through the contraction's spanning forest."""
    import networkx as nx

    tree_edges = contraction.source_branches[contraction.tree]
    members = contraction.supernode[net.from_node[branch]]
    tree_edges = tree_edges[contraction.supernode[net.from_node[tree_edges]] == members]
    graph = nx.Graph()
    graph.add_edges_from((int(net.from_node[e]), int(net.to_node[e]), {"branch": int(e)})
                         for e in tree_edges)
    start, end = int(net.to_node[branch]), int(net.from_node[branch])
    if start == end:
        return np.array([branch], np.int64)
    path = nx.shortest_path(graph, start, end)
    edges = [graph.edges[u, v]["branch"] for u, v in zip(path[:-1], path[1:])]
    return np.array([branch, *edges], np.int64)


def _loop_findings(net: Network, contraction: Contraction, shown: int = 5) -> list:
    loops = contraction.loop_branches
    if loops.size == 0:
        return []
    mismatch = contraction.loop_mismatch
    scale = max(1.0, float(np.max(np.abs(net.value[contraction.source_branches]), initial=0.0)))
    broken = np.abs(mismatch) > KVL_RELATIVE_TOLERANCE * scale
    findings = []
    for k in np.flatnonzero(broken)[:shown]:
        path = tree_path(net, contraction, int(loops[k]))
        findings.append(Finding(
            ERROR, "kvl-violation",
            f"a loop of {path.size} voltage source(s)/ideal connection(s) does not sum to zero "
            f"volts around it (off by {mismatch[k]:.6g} V)",
            nodes=np.unique(np.concatenate([net.from_node[path], net.to_node[path]])),
            branches=path))
    if broken.sum() > shown:
        findings.append(Finding(ERROR, "kvl-violation",
                                f"{int(broken.sum()) - shown} more loop(s) break KVL",
                                branches=loops[broken][shown:]))
    if (~broken).any():
        findings.append(Finding(
            WARNING, "source-loop",
            f"{int((~broken).sum())} loop(s) of voltage sources/ideal connections satisfy KVL but "
            "leave the current circulating around them undetermined; the loop-closing branch is "
            "given 0 A", branches=loops[~broken]))
    return findings


def _conductive_components(net: Network) -> tuple[int, np.ndarray]:
    """Components of the graph of resistors and voltage sources (current sources excluded)."""
    keep = net.kind != CURRENT_SOURCE
    return _components(net.n_nodes, net.from_node[keep], net.to_node[keep])


def _components(n: int, a: np.ndarray, b: np.ndarray) -> tuple[int, np.ndarray]:
    graph = sp.coo_matrix((np.ones(a.size, np.int8), (a, b)), shape=(n, n))
    count, labels = connected_components(graph, directed=False)
    return count, labels.astype(np.int64)


def _all_components(net: Network, conductive_label: np.ndarray) -> int:
    """Connected components of the whole graph: the components of the resistors and voltage
    sources (``conductive_label``) joined by the current sources."""
    sources = net.kind == CURRENT_SOURCE
    count = int(conductive_label.max()) + 1 if conductive_label.size else 0
    if not sources.any():
        return count
    a, b = conductive_label[net.from_node[sources]], conductive_label[net.to_node[sources]]
    joining = a != b                # a source inside one component joins nothing
    if not joining.any():
        return count
    joined, _ = _components(count, a[joining], b[joining])
    return joined


def _floating_findings(net: Network, allow_floating: bool, count: int,
                       label: np.ndarray) -> tuple[list, np.ndarray, int]:
    grounded = label[net.reference]
    sources = np.flatnonzero(net.kind == CURRENT_SOURCE)
    amps = np.nan_to_num(net.value[sources])
    injection = (np.bincount(label[net.to_node[sources]], amps, minlength=count)
                 - np.bincount(label[net.from_node[sources]], amps, minlength=count))
    through = (np.bincount(label[net.to_node[sources]], np.abs(amps), minlength=count)
               + np.bincount(label[net.from_node[sources]], np.abs(amps), minlength=count))
    floating = np.setdiff1d(np.arange(count), [grounded])
    kcl_broken = floating[np.abs(injection[floating]) > KCL_RELATIVE_TOLERANCE
                          * np.maximum(through[floating], 1e-300)]
    findings = []
    for comp in kcl_broken[:5]:
        nodes = np.flatnonzero(label == comp)
        cut = sources[(label[net.from_node[sources]] == comp) ^ (label[net.to_node[sources]] == comp)]
        findings.append(Finding(
            ERROR, "kcl-violation",
            f"{nodes.size} node(s) connect to the rest only through current sources that inject "
            f"a net {injection[comp]:.6g} A into them; KCL cannot hold", nodes=nodes, branches=cut))
    if kcl_broken.size > 5:
        findings.append(Finding(ERROR, "kcl-violation",
                                f"{kcl_broken.size - 5} more such node set(s)",
                                nodes=np.flatnonzero(np.isin(label, kcl_broken[5:]))))
    islands = np.setdiff1d(floating, kcl_broken)
    pinned = np.empty(0, np.int64)
    if islands.size:
        nodes = np.flatnonzero(np.isin(label, islands))
        if allow_floating:
            first_node = np.full(count, -1, np.int64)
            first_node[label[::-1]] = np.arange(net.n_nodes)[::-1]
            pinned = first_node[islands]
            findings.append(Finding(
                INFO, "pinned-island",
                f"{islands.size} island(s) with no path to the reference: one node of each is "
                "pinned at 0 V", nodes=pinned))
        else:
            findings.append(Finding(
                ERROR, "floating",
                f"{islands.size} island(s) ({nodes.size} node(s)) have no path of resistors or "
                "voltage sources to the reference; their potential is undetermined "
                "(allow floating islands to pin one node of each at 0 V)", nodes=nodes))
    unpinned = int(floating.size - pinned.size)
    return findings, pinned, unpinned


def check(net: Network, *, allow_floating: bool = False) -> CheckReport:
    """Check that a network has exactly one solution, and say why not when it has none.

    Parameters
    ----------
    net : Network
    allow_floating : bool, default False
        Pin one node of every island that has no path to the reference at 0 V instead of
        reporting it as an error.

    Returns
    -------
    CheckReport
        Findings (errors, warnings, information), a summary (nodes, branches by kind,
        components, supernodes, unknowns and rank of the reduced system, conductance spread) and
        the contraction reused by :func:`ohmgraph.engine.solve`.
    """
    findings = []
    if net.n_branches == 0:
        findings.append(Finding(ERROR, "empty", "the network has no branches"))
    findings += _value_findings(net)
    usable = np.isfinite(net.value) & ~((net.kind == RESISTOR) & (net.value < 0))
    topology = net if usable.all() else net.with_values(np.where(usable, net.value, 1.0))
    contraction = contract(topology)
    findings += _loop_findings(topology, contraction)
    count, label_of_conductive = _conductive_components(topology)
    floating_findings, pinned, unpinned = _floating_findings(topology, allow_floating, count,
                                                             label_of_conductive)
    findings += floating_findings
    n_components = _all_components(topology, label_of_conductive)
    unknowns = contraction.n_supernodes - 1 - pinned.size
    spread = conductance_spread(net)
    summary = {
        "nodes": net.n_nodes,
        "branches": net.n_branches,
        "branches_by_kind": net.counts_by_kind(),
        "ideal_connections": int(((net.kind == RESISTOR) & (net.value == 0)).sum()),
        "components": int(n_components),
        "supernodes": contraction.n_supernodes,
        "unknowns": int(unknowns),
        "rank": int(unknowns - unpinned),
        "conductance_spread": spread,
        "reference": net.reference_label,
        "errors": sum(f.severity == ERROR for f in findings),
        "warnings": sum(f.severity == WARNING for f in findings),
    }
    order = {ERROR: 0, WARNING: 1, INFO: 2}
    findings.sort(key=lambda f: order[f.severity])
    return CheckReport(findings, summary, contraction, pinned)


__all__ = ["check", "CheckReport", "Finding", "ERROR", "WARNING", "INFO"]
