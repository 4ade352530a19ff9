"""Reduced nodal formulation: a symmetric positive-definite system over the free supernodes.

Nodal analysis writes KCL at every node with the branch conductances, ``B^T G B v = s``, where
``B`` is the branch-node incidence matrix (+1 at ``from``, -1 at ``to``), ``G`` the diagonal of
branch conductances and ``s`` the injected currents; ``L = B^T G B`` is the weighted graph
Laplacian (Kirchhoff, 1847; see Chua, Desoer & Kuh, *Linear and Nonlinear Circuits*, 1987,
ch. 10). Voltage sources and ideal connections have no conductance. Instead of adding their
currents as extra unknowns (modified nodal analysis, which makes the system indefinite), the
nodes they join are contracted into supernodes (:mod:`ohmgraph.engine.contraction`), each node's
potential being ``V = U[supernode] + offset``. For a resistor ``k`` between supernodes ``a != b``
the current is ``g_k (U_a - U_b + d_k)`` with the known ``d_k = offset(from) - offset(to)``, so
KCL summed over each supernode reads::

    L_s U = -B_s^T (g * d) - B_I^T J

with ``L_s`` the Laplacian of the contracted graph, ``B_s`` its incidence matrix and ``B_I^T J``
the net current the current sources draw out of each supernode. Resistors inside one supernode
carry a known current and drop out. The supernode holding the reference node (and, when floating
islands are allowed, one pinned node per island) has a known potential; moving those columns to
the right-hand side leaves a symmetric positive-definite matrix over the free supernodes, since
every remaining component reaches a known potential through positive conductances (a grounded
Laplacian is an irreducibly diagonally dominant M-matrix).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
import scipy.sparse as sp

from .contraction import Contraction
from .network import CURRENT_SOURCE, RESISTOR, Network


@dataclass(frozen=True)
class SupernodeGraph:
    """The resistors that join two different supernodes.

    Attributes
    ----------
    branches : ndarray of int64
        Network indices of those resistors.
    a, b : ndarray of int64
        Supernode of each resistor's ``from`` and ``to`` node.
    conductance : ndarray of float64
        ``1 / R`` in siemens.
    n_supernodes : int
    """

    branches: np.ndarray
    a: np.ndarray
    b: np.ndarray
    conductance: np.ndarray
    n_supernodes: int

    def laplacian(self) -> sp.csr_matrix:
        """The weighted Laplacian ``B^T G B`` of the contracted graph (singular)."""
        g = self.conductance
        rows = np.concatenate([self.a, self.b, self.a, self.b])
        cols = np.concatenate([self.a, self.b, self.b, self.a])
        data = np.concatenate([g, g, -g, -g])
        n = self.n_supernodes
        return sp.csr_matrix((data, (rows, cols)), shape=(n, n))


def supernode_graph(net: Network, contraction: Contraction) -> SupernodeGraph:
    """Resistors (``R > 0``) between different supernodes, with their conductances."""
    resistors = np.flatnonzero((net.kind == RESISTOR) & (net.value > 0))
    a = contraction.supernode[net.from_node[resistors]]
    b = contraction.supernode[net.to_node[resistors]]
    external = a != b
    resistors = resistors[external]
    return SupernodeGraph(resistors, a[external], b[external], 1.0 / net.value[resistors],
                          contraction.n_supernodes)


def grounded_matrix(graph: SupernodeGraph, free: np.ndarray, unknown_of: np.ndarray,
                    kernel: bool = True):
    """The Laplacian restricted to the free supernodes (rows and columns), in CSR form.

    Parameters
    ----------
    graph : SupernodeGraph
    free : ndarray of int64
        Supernode of each unknown.
    unknown_of : ndarray of int64, shape (n_supernodes,)
        Unknown index of each supernode, -1 for supernodes with a known potential.
    kernel : bool
        Build the CSR arrays directly (:func:`grounded_csr_kernel`, default) or through
        scipy's coordinate format (:func:`grounded_matrix_reference`); the two give the same
        canonical matrix (sorted column indices, parallel resistors summed).
    """
    if not kernel:
        return grounded_matrix_reference(graph, free, unknown_of)
    g = graph.conductance
    n = graph.n_supernodes
    diagonal = np.bincount(graph.a, g, minlength=n) + np.bincount(graph.b, g, minlength=n)
    k = free.size
    index = np.int32 if 2 * graph.a.size + k < np.iinfo(np.int32).max else np.int64
    indptr, indices, data = grounded_csr_kernel(
        k, unknown_of[graph.a].astype(index), unknown_of[graph.b].astype(index), g,
        diagonal[free])
    matrix = sp.csr_matrix((data, indices, indptr), shape=(k, k))
    matrix.has_sorted_indices = matrix.has_canonical_format = True     # as the kernel made it
    return matrix


def grounded_matrix_reference(graph: SupernodeGraph, free: np.ndarray, unknown_of: np.ndarray):
    """:func:`grounded_matrix` through scipy's coordinate format (the plain version)."""
    g = graph.conductance
    n = graph.n_supernodes
    diagonal = np.bincount(graph.a, g, minlength=n) + np.bincount(graph.b, g, minlength=n)
    ua, ub = unknown_of[graph.a], unknown_of[graph.b]
    both = (ua >= 0) & (ub >= 0)
    k = free.size
    rows = np.concatenate([np.arange(k), ua[both], ub[both]])
    cols = np.concatenate([np.arange(k), ub[both], ua[both]])
    data = np.concatenate([diagonal[free], -g[both], -g[both]])
    return sp.csr_matrix((data, (rows, cols)), shape=(k, k))


@numba.njit(cache=True)
def grounded_csr_kernel(k, ua, ub, g, diagonal):
    """CSR arrays of the grounded Laplacian: ``diagonal`` on the diagonal and ``-g[e]`` at
    ``(ua[e], ub[e])`` and ``(ub[e], ua[e])`` for every branch with both ends unknown (index
    ``>= 0``). Rows are filled by a counting pass, then each row's entries are sorted by column
    and equal columns (parallel branches) summed, as scipy's canonical CSR form has them
    (Gustavson, ACM TOMS 4(3), 1978: sparse transposition and ordering by counting).

    Returns
    -------
    indptr, indices : ndarray (the dtype of ``ua``)
    data : ndarray of float64
    """
    count = np.ones(k + 1, ua.dtype)
    count[k] = 0
    for e in range(ua.shape[0]):
        if ua[e] >= 0 and ub[e] >= 0:
            count[ua[e]] += 1
            count[ub[e]] += 1
    indptr = np.zeros(k + 1, ua.dtype)
    for row in range(k):
        indptr[row + 1] = indptr[row] + count[row]
    fill = indptr[:k].copy()
    indices = np.empty(indptr[k], ua.dtype)
    data = np.empty(indptr[k])
    for row in range(k):
        indices[fill[row]] = row
        data[fill[row]] = diagonal[row]
        fill[row] += 1
    for e in range(ua.shape[0]):
        a, b = ua[e], ub[e]
        if a >= 0 and b >= 0:
            indices[fill[a]] = b
            data[fill[a]] = -g[e]
            fill[a] += 1
            indices[fill[b]] = a
            data[fill[b]] = -g[e]
            fill[b] += 1
    # Sort every row by column and sum repeated columns, compacting in place (a row is copied
    # to scratch space first; the compacted rows never overtake the rows still to be read).
    widest = 0
    for row in range(k):
        widest = max(widest, indptr[row + 1] - indptr[row])
    columns = np.empty(widest, ua.dtype)
    values = np.empty(widest)
    out = 0
    start = 0
    for row in range(k):
        end = indptr[row + 1]
        width = end - start
        if width > 16:
            order = np.argsort(indices[start:end], kind="mergesort")
            for i in range(width):
                columns[i] = indices[start + order[i]]
                values[i] = data[start + order[i]]
        else:                               # short rows: insertion sort
            for i in range(width):
                c, v = indices[start + i], data[start + i]
                j = i - 1
                while j >= 0 and columns[j] > c:
                    columns[j + 1] = columns[j]
                    values[j + 1] = values[j]
                    j -= 1
                columns[j + 1] = c
                values[j + 1] = v
        row_start = out
        for i in range(width):
            if out > row_start and indices[out - 1] == columns[i]:
                data[out - 1] += values[i]
            else:
                indices[out] = columns[i]
                data[out] = values[i]
                out += 1
        start = end
        indptr[row + 1] = out
    return indptr, indices[:out], data[:out]


@dataclass(frozen=True)
class ReducedSystem:
    """``matrix @ x = rhs`` over the free supernodes, and how to expand ``x`` to node voltages.

    Attributes
    ----------
    matrix : scipy.sparse.csr_matrix
        Symmetric positive-definite grounded Laplacian.
    rhs : ndarray of float64
    free : ndarray of int64
        Supernode of each unknown.
    known_potential : ndarray of float64, shape (n_supernodes,)
        Potential of the supernodes with a known one; NaN for the free ones.
    contraction : Contraction
    graph : SupernodeGraph
    """

    matrix: sp.csr_matrix
    rhs: np.ndarray
    free: np.ndarray
    known_potential: np.ndarray
    contraction: Contraction
    graph: SupernodeGraph

    @property
    def n_unknowns(self) -> int:
        return int(self.free.size)

    def node_voltages(self, x: np.ndarray) -> np.ndarray:
        """Node voltages from the solution ``x`` of the reduced system."""
        potential = self.known_potential.copy()
        potential[self.free] = x
        return potential[self.contraction.supernode] + self.contraction.offset

    def unknowns_from_voltages(self, voltage: np.ndarray) -> np.ndarray:
        """The reduced unknowns that node voltages imply (the inverse of :meth:`node_voltages`),
        for an initial guess: each free supernode gets the mean of ``V - offset`` over its nodes
        with a finite voltage, 0 where none has one."""
        voltage = np.asarray(voltage, dtype=np.float64)
        known = np.isfinite(voltage)
        supernode = self.contraction.supernode[known]
        n = self.contraction.n_supernodes
        total = np.bincount(supernode, voltage[known] - self.contraction.offset[known], n)
        count = np.bincount(supernode, minlength=n)
        potential = np.where(count > 0, total / np.maximum(count, 1), 0.0)
        return potential[self.free]


def assemble(net: Network, contraction: Contraction, pinned_nodes=()) -> ReducedSystem:
    """Assemble the reduced system of a network that passed :func:`ohmgraph.engine.check`.

    Parameters
    ----------
    net : Network
    contraction : Contraction
        From :func:`ohmgraph.engine.contraction.contract` (or the check report).
    pinned_nodes : array_like of int, optional
        Nodes held at 0 V besides the reference (one per floating island).
    """
    graph = supernode_graph(net, contraction)
    n = contraction.n_supernodes
    supernode, offset = contraction.supernode, contraction.offset
    held = np.concatenate([[net.reference], np.asarray(pinned_nodes, np.int64)])
    known = np.full(n, np.nan)
    known[supernode[held]] = -offset[held]
    unknown_of = np.full(n, -1, np.int64)
    free = np.flatnonzero(np.isnan(known))
    unknown_of[free] = np.arange(free.size)

    # Currents the offsets drive through resistors between supernodes, and current sources.
    g = graph.conductance
    drive = g * (offset[net.from_node[graph.branches]] - offset[net.to_node[graph.branches]])
    # np.bincount returns integers when it gets no entries (no resistor between supernodes).
    rhs = np.zeros(n)
    rhs += np.bincount(graph.b, drive, minlength=n) - np.bincount(graph.a, drive, minlength=n)
    sources = np.flatnonzero(net.kind == CURRENT_SOURCE)
    amps = net.value[sources]
    rhs += (np.bincount(supernode[net.to_node[sources]], amps, minlength=n)
            - np.bincount(supernode[net.from_node[sources]], amps, minlength=n))
    # Move the known potentials to the right-hand side.
    ua, ub = unknown_of[graph.a], unknown_of[graph.b]
    a_known, b_known = ua < 0, ub < 0
    rhs += np.bincount(graph.a[~a_known & b_known], (g * known[graph.b])[~a_known & b_known],
                       minlength=n)
    rhs += np.bincount(graph.b[a_known & ~b_known], (g * known[graph.a])[a_known & ~b_known],
                       minlength=n)
    matrix = grounded_matrix(graph, free, unknown_of)
    return ReducedSystem(matrix, rhs[free], free, known, contraction, graph)
