"""Supply drop: how far each node sits below the supply of its net.

A node's *net* is its connected component once the voltage sources and the reference node are
taken out of the network, following resistors (ideal connections included; a current source
conducts nothing and joins no nets). Found with :func:`scipy.sparse.csgraph.connected_components`.

A net's *nominal* is the potential its source-held nodes (endpoints of voltage sources) are held
at, taken from the solved voltages; when they are held at different potentials the one of
largest magnitude counts (the supply side). A net without a source-held node that touches the
reference through a resistor is a 0 V net (a ground mesh). Any other net (an island pinned with
``--allow-floating``) has no nominal and no drop. A caller may impose one nominal on every net.

The drop is ``|nominal| - sign(nominal) * V``: the distance below a positive supply, above a
negative one, and ``|V|`` on a 0 V net (ground bounce). It is negative where a node overshoots
its supply. Worst drops and counts over thresholds exclude the reference and source-held nodes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .network import RESISTOR, VOLTAGE_SOURCE, Network


@dataclass(frozen=True)
class Threshold:
    """A drop threshold: ``value`` volts, or ``value`` as a fraction of the net's nominal.

    Attributes
    ----------
    value : float
        Volts (``relative`` False) or a fraction such as 0.05 for 5 % (``relative`` True).
    relative : bool
    """

    value: float
    relative: bool

    def volts(self, nominal: np.ndarray) -> np.ndarray:
        """The threshold in volts for nets of the given nominals (NaN where a fraction of a 0 V
        or unknown nominal has no meaning)."""
        nominal = np.asarray(nominal, dtype=np.float64)
        if not self.relative:
            return np.full(nominal.shape, self.value)
        volts = self.value * np.abs(nominal)
        return np.where(nominal != 0, volts, np.nan)

    def text(self) -> str:
        """``5%`` or ``50 mV`` style label."""
        if self.relative:
            return f"{self.value * 100:g}%"
        return f"{self.value * 1e3:g} mV" if abs(self.value) < 1 else f"{self.value:g} V"


DEFAULT_THRESHOLDS = (Threshold(0.01, True), Threshold(0.02, True), Threshold(0.05, True),
                      Threshold(0.10, True))


@dataclass(frozen=True)
class SupplyDrop:
    """Per-node drop and per-net statistics.

    Attributes
    ----------
    node_net : ndarray of int64, shape (n,)
        Net of every node; -1 for the reference node.
    drop : ndarray of float64, shape (n,)
        Volts below the net's supply (see the module notes); NaN where the net has no nominal
        and at the reference node.
    held : ndarray of bool, shape (n,)
        Source-held nodes (endpoints of voltage sources), excluded from the statistics.
    nominal : ndarray of float64, shape (k,)
        Nominal of each net, volts (NaN when unknown).
    representative : ndarray of int64, shape (k,)
        A node naming each net: its first source-held node, else its first node.
    size : ndarray of int64, shape (k,)
        Nodes per net.
    worst_node : ndarray of int64, shape (k,)
        The node of largest drop in each net (reference and held nodes excluded); -1 if none.
    worst_drop : ndarray of float64, shape (k,)
        That drop, volts (NaN if none).
    thresholds : tuple of Threshold
    over : ndarray of int64, shape (k, len(thresholds))
        Nodes of each net whose drop exceeds each threshold; -1 where the threshold does not
        apply (a percentage on a 0 V net).
    """

    node_net: np.ndarray
    drop: np.ndarray
    held: np.ndarray
    nominal: np.ndarray
    representative: np.ndarray
    size: np.ndarray
    worst_node: np.ndarray
    worst_drop: np.ndarray
    thresholds: tuple
    over: np.ndarray

    @property
    def n_nets(self) -> int:
        return int(self.nominal.size)

    @property
    def counted(self) -> np.ndarray:
        """Nodes that enter the statistics: not the reference, not held, with a known drop."""
        return (self.node_net >= 0) & ~self.held & np.isfinite(self.drop)

    def worst_nodes(self, top: int = 5) -> np.ndarray:
        """Indices of the ``top`` nodes of largest drop over every net (counted nodes only)."""
        candidates = np.flatnonzero(self.counted)
        if candidates.size > top:
            part = np.argpartition(-self.drop[candidates], top - 1)[:top]
            candidates = candidates[part]
        return candidates[np.argsort(-self.drop[candidates], kind="stable")]


def find_nets(net: Network) -> tuple[np.ndarray, int]:
    """Net of every node after removing voltage sources and the reference node.

    Returns
    -------
    node_net : ndarray of int64
        Net index of each node, numbered in order of each net's first node; -1 for the
        reference.
    n_nets : int
    """
    n = net.n_nodes
    resistors = (net.kind == RESISTOR) & np.isfinite(net.value)
    a, b = net.from_node[resistors], net.to_node[resistors]
    inside = (a != net.reference) & (b != net.reference)
    graph = sp.coo_matrix((np.ones(int(inside.sum()), np.int8), (a[inside], b[inside])),
                          shape=(n, n)).tocsr()
    _, labels = connected_components(graph, directed=False)
    labels = labels.astype(np.int64)
    labels[net.reference] = -1
    # Renumber by first appearance so net numbers do not depend on scipy's internal order.
    valid = labels >= 0
    _, first, inverse = np.unique(labels[valid], return_index=True, return_inverse=True)
    rank = np.empty(first.size, np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(first.size)
    labels[valid] = rank[inverse]
    return labels, int(first.size)


def supply_drop(net: Network, node_voltage: np.ndarray, *, nominal=None,
                thresholds=DEFAULT_THRESHOLDS) -> SupplyDrop:
    """Drop of every node below its net's supply, worst drop and counts over thresholds per net.

    Parameters
    ----------
    net : Network
    node_voltage : ndarray, shape (n,)
        Solved node voltages.
    nominal : float or ndarray, optional
        Impose this nominal (volts) on every net instead of finding it from the sources, or one
        nominal per net (as :attr:`SupplyDrop.nominal` of the same network gave).
    thresholds : sequence of Threshold

    Raises
    ------
    ValueError
        When per-net nominals do not match the number of nets.
    """
    v = np.asarray(node_voltage, dtype=np.float64)
    node_net, k = find_nets(net)
    sources = net.kind == VOLTAGE_SOURCE
    held = np.zeros(net.n_nodes, bool)
    held[net.from_node[sources]] = True
    held[net.to_node[sources]] = True
    held[net.reference] = False

    size = np.bincount(node_net[node_net >= 0], minlength=k).astype(np.int64)
    first = np.full(k, -1, np.int64)
    order = np.flatnonzero(node_net >= 0)[::-1]
    first[node_net[order]] = order                          # last write wins: the first node
    representative = first.copy()
    held_nodes = np.flatnonzero(held)[::-1]
    representative[node_net[held_nodes]] = held_nodes

    if nominal is None:
        nominals = _nominal_from_sources(net, v, node_net, k, held)
    elif np.ndim(nominal) == 0:
        nominals = np.full(k, float(nominal))
    else:
        nominals = np.asarray(nominal, dtype=np.float64)
        if nominals.shape != (k,):
            raise ValueError(f"{nominals.size} nominal(s) given for {k} net(s)")
    node_nominal = np.full(net.n_nodes, np.nan)
    node_nominal[node_net >= 0] = nominals[node_net[node_net >= 0]]
    drop = np.where(node_nominal == 0, np.abs(v),
                    np.abs(node_nominal) - np.sign(node_nominal) * v)
    drop[net.reference] = np.nan

    counted = (node_net >= 0) & ~held & np.isfinite(drop)
    worst_node, worst_drop = _worst_per_net(node_net, drop, counted, k)
    over = np.zeros((k, len(thresholds)), np.int64)
    nets_counted = node_net[counted]
    for j, threshold in enumerate(thresholds):
        limit = threshold.volts(nominals)
        exceeded = drop[counted] > limit[nets_counted]
        over[:, j] = np.bincount(nets_counted[exceeded], minlength=k)
        over[~np.isfinite(limit), j] = -1
    return SupplyDrop(node_net, drop, held, nominals, representative, size, worst_node,
                      worst_drop, tuple(thresholds), over)


def _nominal_from_sources(net, v, node_net, k, held) -> np.ndarray:
    """Held potential of largest magnitude per net; 0 for nets touching the reference through
    a resistor; NaN otherwise."""
    nominals = np.full(k, np.nan)
    held_nodes = np.flatnonzero(held & (node_net >= 0))
    if held_nodes.size:
        order = held_nodes[np.argsort(np.abs(v[held_nodes]), kind="stable")]
        nominals[node_net[order]] = v[order]                # last (largest |V|) wins
    resistors = (net.kind == RESISTOR) & np.isfinite(net.value)
    a, b = net.from_node[resistors], net.to_node[resistors]
    touching = np.concatenate([b[a == net.reference], a[b == net.reference]])
    touching = node_net[touching[touching != net.reference]]
    grounded = np.zeros(k, bool)
    grounded[touching] = True
    nominals[grounded & np.isnan(nominals)] = 0.0
    return nominals


def _worst_per_net(node_net, drop, counted, k):
    """Largest drop of every net and its node (the last such node on a tie), in linear time."""
    worst_node = np.full(k, -1, np.int64)
    worst_drop = np.full(k, np.nan)
    index = np.flatnonzero(counted)
    if index.size:
        nets, drops = node_net[index], drop[index]
        largest = np.full(k, -np.inf)
        np.maximum.at(largest, nets, drops)
        at_largest = drops == largest[nets]
        np.maximum.at(worst_node, nets[at_largest], index[at_largest])
        worst_drop[worst_node >= 0] = largest[worst_node >= 0]
    return worst_node, worst_drop


def _worst_per_net_reference(node_net, drop, counted, k):
    """:func:`_worst_per_net` by sorting (net, then drop)."""
    worst_node = np.full(k, -1, np.int64)
    worst_drop = np.full(k, np.nan)
    index = np.flatnonzero(counted)
    if index.size:
        order = index[np.lexsort((drop[index], node_net[index]))]   # by net, drop ascending
        worst_node[node_net[order]] = order                          # last write: the largest
        worst_drop[node_net[order]] = drop[order]
    return worst_node, worst_drop
