"""Branch currents, voltages and powers from the node voltages, and the checks that prove them.

Resistor currents follow from Ohm's law and current-source currents are their values. The
currents of voltage sources and ideal connections are not fixed by their own equations; KCL
determines them. Those branches form a spanning forest of each supernode (plus loop-closing
branches, which are given 0 A and flagged as undetermined together with every branch on their
loops). Walking each tree from the leaves up, the branch to a node's parent must carry away
whatever the node's other branches leave unbalanced, and that excess is passed on to the parent
(the tree-KCL accumulation used for branch currents in network analysis; e.g. Chua, Desoer &
Kuh, *Linear and Nonlinear Circuits*, 1987, ch. 9, fundamental cut sets of a tree).

The traversal order comes from :func:`scipy.sparse.csgraph.breadth_first_order`; the
accumulation is compiled with numba (``accumulate_kernel``) and has a sparse-solve reference
(``tree_currents_reference``) for testing.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.sparse.csgraph import breadth_first_order

from .contraction import Contraction
from .network import CURRENT_SOURCE, RESISTOR, Network


@numba.njit(cache=True)
def accumulate_kernel(order, parent, parent_edge, edge_from, excess):
    """Currents of the tree edges, leaves first.

    Parameters
    ----------
    order : ndarray of int64
        Nodes in breadth-first order (parents before children).
    parent, parent_edge : ndarray of int64, shape (n,)
        Parent node and the tree edge to it; ``parent_edge`` is -1 at roots.
    edge_from : ndarray of int64
        ``from`` node of every tree edge.
    excess : ndarray of float64, shape (n,)
        Net current leaving every node through its non-tree branches.

    Returns
    -------
    ndarray of float64
        Current of every tree edge, positive from its ``from`` node to its ``to`` node.
    """
    current = np.zeros(edge_from.shape[0])
    left = excess.copy()
    for i in range(order.shape[0] - 1, -1, -1):
        node = order[i]
        edge = parent_edge[node]
        if edge < 0:
            continue
        if edge_from[edge] == node:
            current[edge] = -left[node]
        else:
            current[edge] = left[node]
        left[parent[node]] += left[node]
    return current


def tree_currents_reference(n_nodes, edge_from, edge_to, excess, roots):
    """Reference for the tree accumulation: solve tree KCL ``B_t^T i = -excess`` directly.

    Every non-root node of a forest has exactly one edge to its parent, so KCL at the non-root
    nodes is a square nonsingular system in the tree-edge currents (scipy's ``spsolve``).
    """
    k = edge_from.size
    if k == 0:
        return np.zeros(0)
    incidence = sp.csr_matrix(
        (np.concatenate([np.ones(k), -np.ones(k)]),
         (np.concatenate([edge_from, edge_to]), np.concatenate([np.arange(k), np.arange(k)]))),
        shape=(n_nodes, k))
    touched = np.unique(np.concatenate([edge_from, edge_to]))
    rows = np.setdiff1d(touched, roots)
    return spla.spsolve(incidence[rows].tocsc(), -excess[rows])


def _forest_order(n_nodes, edge_from, edge_to, roots):
    """Breadth-first order, parents and parent edges of a forest with the given roots."""
    virtual = n_nodes
    k = edge_from.size
    a = np.concatenate([edge_from, np.full(roots.size, virtual)])
    b = np.concatenate([edge_to, roots])
    graph = sp.csr_matrix((np.ones(a.size, np.int8), (a, b)), shape=(n_nodes + 1, n_nodes + 1))
    order, parent = breadth_first_order(graph, virtual, directed=False, return_predecessors=True)
    order = order[1:].astype(np.int64)
    parent = parent[:n_nodes].astype(np.int64)
    # Tree edge joining each node to its parent, found by its (low, high) endpoint key.
    span = np.int64(n_nodes + 1)
    keys = np.minimum(edge_from, edge_to) * span + np.maximum(edge_from, edge_to)
    sorter = np.argsort(keys)
    child = order[parent[order] != virtual]
    child_keys = np.minimum(child, parent[child]) * span + np.maximum(child, parent[child])
    parent_edge = np.full(n_nodes, -1, np.int64)
    parent_edge[child] = sorter[np.searchsorted(keys, child_keys, sorter=sorter)]
    assert k == 0 or np.all(keys[parent_edge[child]] == child_keys)
    return order, parent, parent_edge


def source_tree_currents(net: Network, contraction: Contraction, known_current: np.ndarray,
                         reference_kernel: bool = False) -> np.ndarray:
    """Currents of the spanning-forest branches of the contraction, by tree KCL.

    Parameters
    ----------
    known_current : ndarray, shape (m,)
        Currents of every branch outside the forest (0 on the forest branches).
    reference_kernel : bool
        Use :func:`tree_currents_reference` instead of the compiled accumulation.
    """
    tree = contraction.source_branches[contraction.tree]
    edge_from, edge_to = net.from_node[tree], net.to_node[tree]
    excess = (np.bincount(net.from_node, known_current, minlength=net.n_nodes)
              - np.bincount(net.to_node, known_current, minlength=net.n_nodes))
    roots = np.flatnonzero(contraction.root == np.arange(net.n_nodes))
    if reference_kernel:
        return tree_currents_reference(net.n_nodes, edge_from, edge_to, excess, roots)
    return forest_currents(net.n_nodes, edge_from, edge_to, roots, excess)


def forest_currents(n_nodes, edge_from, edge_to, roots, excess) -> np.ndarray:
    """Currents of the edges of a forest on ``0 .. n_nodes - 1`` by tree KCL (compiled).

    ``excess`` is the net current leaving every node through branches outside the forest; each
    tree in the forest has one of ``roots``, where the imbalance is left.
    """
    order, parent, parent_edge = _forest_order(n_nodes, edge_from, edge_to, roots)
    return accumulate_kernel(order, parent, parent_edge, edge_from, excess)


def undetermined_branches(net: Network, contraction: Contraction) -> np.ndarray:
    """Source branches on a loop of sources/ideal connections (their current split is free)."""
    loops = contraction.loop_branches
    if loops.size == 0:
        return np.empty(0, np.int64)
    import networkx as nx                   # only for loops: its import takes 0.1 s

    looped = np.isin(contraction.supernode[net.from_node[contraction.source_branches]],
                     contraction.supernode[net.from_node[loops]])
    candidates = contraction.source_branches[looped]
    graph = nx.MultiGraph()
    graph.add_edges_from((int(net.from_node[e]), int(net.to_node[e]), int(e)) for e in candidates)
    bridges = {next(iter(graph[u][v])) for u, v in nx.bridges(graph)}
    return np.array(sorted(set(candidates.tolist()) - bridges), np.int64)


@dataclass(frozen=True)
class BranchQuantities:
    """Current (A, ``from`` to ``to``), voltage (V, ``V(from) - V(to)``) and absorbed power (W)
    of every branch, and whether each current is determined by the network."""

    current: np.ndarray
    voltage: np.ndarray
    power: np.ndarray
    determined: np.ndarray


def branch_quantities(net: Network, contraction: Contraction, node_voltage: np.ndarray,
                      reference_kernel: bool = False) -> BranchQuantities:
    """All branch currents, voltages and powers from the node voltages."""
    voltage = node_voltage[net.from_node] - node_voltage[net.to_node]
    current = np.zeros(net.n_branches)
    resistive = (net.kind == RESISTOR) & (net.value > 0)
    current[resistive] = voltage[resistive] / net.value[resistive]
    sources = net.kind == CURRENT_SOURCE
    current[sources] = net.value[sources]
    tree = contraction.source_branches[contraction.tree]
    current[tree] = source_tree_currents(net, contraction, current, reference_kernel)
    determined = np.ones(net.n_branches, bool)
    determined[undetermined_branches(net, contraction)] = False
    return BranchQuantities(current, voltage, voltage * current, determined)


def kcl_residual(net: Network, current: np.ndarray) -> np.ndarray:
    """Net current leaving every node (amperes); zero at every node when KCL holds."""
    return (np.bincount(net.from_node, current, minlength=net.n_nodes)
            - np.bincount(net.to_node, current, minlength=net.n_nodes))
