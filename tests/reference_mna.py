"""Test helper: the full modified-nodal-analysis (MNA) system of a network, solved by spsolve.

This is the independent reference the engine is compared with. It shares nothing with the
engine's formulation (no contraction, no supernodes, no reduced system): it is the textbook MNA
of C.-W. Ho, A. E. Ruehli and P. A. Brennan, "The modified nodal approach to network analysis",
IEEE Trans. Circuits Syst. 22(6), 504–509, 1975, with

* one unknown per node potential except the held ones (the reference, and any pinned nodes),
* one unknown per voltage source and per ideal connection (0-ohm resistor): its current,
  positive from ``from`` to ``to`` through the branch,

and the rows

* KCL at every free node: current leaving through resistors (``G v``) plus current leaving
  through the source/ideal branches (``B i``) equals minus the current the current sources draw
  out of it;
* one branch equation per source/ideal branch: ``v(from) - v(to) = value`` (0 for an ideal
  connection).

The sparse system ``[[G, B], [B^T, 0]] [v; i] = [s; e]`` is solved with
``scipy.sparse.linalg.spsolve`` (SuperLU with partial pivoting, which copes with the zero block).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ohmgraph.engine.network import CURRENT_SOURCE, RESISTOR, VOLTAGE_SOURCE, Network


@dataclass(frozen=True)
class MnaSolution:
    """Node voltages (all nodes, held ones at 0 V) and the currents of V/ideal branches."""

    node_voltage: np.ndarray
    constrained_branches: np.ndarray
    constrained_current: np.ndarray


def mna_solve(net: Network, held_nodes=()) -> MnaSolution:
    """Assemble and solve the full MNA system of ``net`` (reference and ``held_nodes`` at 0 V)."""
    n = net.n_nodes
    held = np.unique(np.concatenate([[net.reference], np.asarray(held_nodes, np.int64)]))
    free = np.setdiff1d(np.arange(n), held)
    row_of = np.full(n, -1, np.int64)
    row_of[free] = np.arange(free.size)

    resistors = np.flatnonzero((net.kind == RESISTOR) & (net.value > 0))
    constrained = np.flatnonzero((net.kind == VOLTAGE_SOURCE)
                                 | ((net.kind == RESISTOR) & (net.value == 0)))
    sources = np.flatnonzero(net.kind == CURRENT_SOURCE)
    size = free.size + constrained.size
    rows, cols, data = [], [], []

    def stamp(r, c, values):
        keep = (r >= 0) & (c >= 0)
        rows.append(r[keep])
        cols.append(c[keep])
        data.append(np.broadcast_to(values, r.shape)[keep])

    # Conductance stamps (Ho, Ruehli & Brennan 1975, Table I, resistor).
    g = 1.0 / net.value[resistors]
    p, q = row_of[net.from_node[resistors]], row_of[net.to_node[resistors]]
    stamp(p, p, g)
    stamp(q, q, g)
    stamp(p, q, -g)
    stamp(q, p, -g)
    # Branch-current columns and branch-equation rows of V sources and ideal connections.
    extra = free.size + np.arange(constrained.size)
    p, q = row_of[net.from_node[constrained]], row_of[net.to_node[constrained]]
    stamp(p, extra, 1.0)     # current leaves `from` ...
    stamp(q, extra, -1.0)    # ... and enters `to`
    stamp(extra, p, 1.0)     # v(from) - v(to) = value
    stamp(extra, q, -1.0)

    rhs = np.zeros(size)
    amps = net.value[sources]
    injected = (np.bincount(net.to_node[sources], amps, minlength=n)
                - np.bincount(net.from_node[sources], amps, minlength=n))
    rhs[:free.size] = injected[free]
    rhs[free.size:] = np.where(net.kind[constrained] == VOLTAGE_SOURCE,
                               net.value[constrained], 0.0)

    matrix = sp.csc_matrix((np.concatenate(data), (np.concatenate(rows), np.concatenate(cols))),
                           shape=(size, size))
    x = spla.spsolve(matrix, rhs)
    voltage = np.zeros(n)
    voltage[free] = x[:free.size]
    return MnaSolution(voltage, constrained, x[free.size:])
