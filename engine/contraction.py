"""Contraction of voltage sources and ideal connections into supernodes.

Every voltage source (``V(from) - V(to) = value``) and every ideal connection (a 0-ohm resistor,
``V(from) = V(to)``) fixes the potential difference between its two nodes. Merging the nodes they
join gives *supernodes*: each node's potential is its supernode's potential plus a known offset,
``V(node) = U[supernode(node)] + offset(node)``.

The merge is a weighted union-find (disjoint-set forest with union by rank and path compression,
Tarjan, J. ACM 22(2), 1975) that carries, for every node, its potential relative to its parent.
A source whose two ends are already in one set closes a loop made only of sources and ideal
connections: it is KVL-consistent when the known offsets already give its value, and breaks KVL
otherwise (``mismatch`` holds the difference in volts). Branches that joined two sets form a
spanning forest of the source graph (``tree``); the currents of the source branches are later
recovered by accumulating KCL up that forest (:mod:`ohmgraph.engine.recovery`).

``contract_kernel`` is compiled with numba; ``contract_reference`` is a plain-Python breadth-first
version kept for testing the kernel.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass

import numba
import numpy as np

from .network import RESISTOR, VOLTAGE_SOURCE, Network


@numba.njit(cache=True)
def _find(parent, delta, x):
    """Root of ``x`` and the potential of ``x`` relative to it; compresses the path."""
    root = x
    total = 0.0
    while parent[root] != root:
        total += delta[root]
        root = parent[root]
    current = x
    remaining = total
    while parent[current] != current:
        following = parent[current]
        step = delta[current]
        parent[current] = root
        delta[current] = remaining
        remaining -= step
        current = following
    return root, total


@numba.njit(cache=True)
def contract_kernel(n_nodes, a, b, volts):
    """Weighted union-find over the branches ``V(a[k]) - V(b[k]) = volts[k]``.

    Returns
    -------
    root : ndarray of int64, shape (n_nodes,)
        Root node of every node's set.
    offset : ndarray of float64, shape (n_nodes,)
        ``V(node) - V(root)``.
    tree : ndarray of bool, shape (k,)
        Branch joined two sets (belongs to the spanning forest).
    mismatch : ndarray of float64, shape (k,)
        For non-tree branches, the KVL mismatch ``(V(a) - V(b)) - volts`` implied by the tree.
    """
    parent = np.arange(n_nodes)
    delta = np.zeros(n_nodes)
    rank = np.zeros(n_nodes, np.int32)
    k = a.shape[0]
    tree = np.zeros(k, np.bool_)
    mismatch = np.zeros(k)
    for e in range(k):
        ra, da = _find(parent, delta, a[e])
        rb, db = _find(parent, delta, b[e])
        if ra == rb:
            mismatch[e] = (da - db) - volts[e]
            continue
        tree[e] = True
        if rank[ra] < rank[rb]:
            parent[ra] = rb
            delta[ra] = db + volts[e] - da
        else:
            parent[rb] = ra
            delta[rb] = da - volts[e] - db
            if rank[ra] == rank[rb]:
                rank[ra] += 1
    root = np.empty(n_nodes, np.int64)
    offset = np.empty(n_nodes)
    for x in range(n_nodes):
        root[x], offset[x] = _find(parent, delta, x)
    return root, offset, tree, mismatch


def contract_reference(n_nodes, a, b, volts):
    """Plain-Python reference for :func:`contract_kernel` (breadth-first search per component).

    Same outputs and meaning; the chosen roots and spanning forest may differ from the kernel's,
    but the partition, the number of tree branches, whether each set holds a loop that breaks
    KVL, and (in sets where no loop breaks it) the offset differences within a set do not.
    """
    adjacency = [[] for _ in range(n_nodes)]
    for e, (u, v) in enumerate(zip(a.tolist(), b.tolist())):
        adjacency[u].append((v, e, -1.0))   # V(v) = V(u) - volts
        adjacency[v].append((u, e, 1.0))    # V(u) = V(v) + volts
    root = np.full(n_nodes, -1, np.int64)
    offset = np.zeros(n_nodes)
    tree = np.zeros(len(a), bool)
    for start in range(n_nodes):
        if root[start] >= 0:
            continue
        root[start] = start
        queue = deque([start])
        while queue:
            u = queue.popleft()
            for v, e, sign in adjacency[u]:
                if root[v] < 0:
                    root[v] = start
                    offset[v] = offset[u] + sign * volts[e]
                    tree[e] = True
                    queue.append(v)
    mismatch = np.where(tree, 0.0, (offset[a] - offset[b]) - volts)
    return root, offset, tree, mismatch


@dataclass(frozen=True)
class Contraction:
    """Nodes merged into supernodes by voltage sources and ideal connections.

    Attributes
    ----------
    supernode : ndarray of int64, shape (n,)
        Supernode index of every node (``0 .. n_supernodes - 1``).
    offset : ndarray of float64, shape (n,)
        ``V(node) - U[supernode(node)]`` in volts.
    root : ndarray of int64, shape (n,)
        The node whose potential is its supernode's potential (offset 0).
    source_branches : ndarray of int64
        Indices of the voltage sources and ideal connections that were contracted.
    tree : ndarray of bool, shape (len(source_branches),)
        Which contracted branches form the spanning forest.
    mismatch : ndarray of float64, shape (len(source_branches),)
        KVL mismatch (volts) of the loop each non-tree branch closes; 0 on tree branches.
    """

    supernode: np.ndarray
    offset: np.ndarray
    root: np.ndarray
    source_branches: np.ndarray
    tree: np.ndarray
    mismatch: np.ndarray

    @property
    def n_supernodes(self) -> int:
        return int(self.supernode.max()) + 1 if self.supernode.size else 0

    @property
    def loop_branches(self) -> np.ndarray:
        """Network indices of contracted branches that close a loop."""
        return self.source_branches[~self.tree]

    @property
    def loop_mismatch(self) -> np.ndarray:
        """KVL mismatch of each loop branch, aligned with :attr:`loop_branches`."""
        return self.mismatch[~self.tree]


def contracted_branches(net: Network) -> np.ndarray:
    """Indices of the branches that fix a potential difference (V sources, 0-ohm resistors)."""
    ideal = (net.kind == RESISTOR) & (net.value == 0.0)
    return np.flatnonzero((net.kind == VOLTAGE_SOURCE) | ideal)


def contract(net: Network, kernel=contract_kernel) -> Contraction:
    """Merge the nodes joined by voltage sources and ideal connections.

    Parameters
    ----------
    net : Network
    kernel : callable, optional
        :func:`contract_kernel` (default) or :func:`contract_reference`.
    """
    branches = contracted_branches(net)
    volts = np.where(net.kind[branches] == VOLTAGE_SOURCE, net.value[branches], 0.0)
    root, offset, tree, mismatch = kernel(
        net.n_nodes, net.from_node[branches], net.to_node[branches], volts)
    # Number the supernodes by their root nodes in node order (a prefix sum, not a sort).
    is_root = root == np.arange(net.n_nodes)
    supernode = (np.cumsum(is_root) - 1)[root]
    return Contraction(supernode.astype(np.int64), offset, root, branches,
                       np.asarray(tree, bool), mismatch)
