"""Node-to-unknown numbering for a distributed solve: a bandwidth-reducing graph ordering.

A distributed solve gives every process a contiguous block of the unknowns. Numbering the
unknowns in reverse Cuthill–McKee order (E. Cuthill & J. McKee, "Reducing the bandwidth of sparse
symmetric matrices", Proc. 24th ACM National Conference, 1969; reversed as proposed by A. George,
1971) keeps the unknowns of each block close in the graph, so contiguous blocks are compact
regions with short boundaries: few matrix entries couple two processes. The ordering is
:func:`scipy.sparse.csgraph.reverse_cuthill_mckee`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse.csgraph import reverse_cuthill_mckee

from .formulation import ReducedSystem


@dataclass(frozen=True)
class NodeUnknowns:
    """What every node needs for its potential: ``V = x[unknown] + offset`` when ``unknown`` is
    at least 0, else ``held + offset``.

    Attributes
    ----------
    unknown : ndarray of int64, shape (n,)
        Unknown of the node's supernode in graph order, -1 where the potential is held.
    held : ndarray of float64, shape (n,)
        Held potential of the node's supernode (reference or pinned island); NaN where free.
    offset : ndarray of float64, shape (n,)
        ``V(node) - U[supernode(node)]`` from the contraction.
    """

    unknown: np.ndarray
    held: np.ndarray
    offset: np.ndarray


def node_unknowns(system: ReducedSystem) -> NodeUnknowns:
    """Number the unknowns of ``system`` in reverse Cuthill–McKee order and map every node."""
    order = reverse_cuthill_mckee(system.matrix.tocsr(), symmetric_mode=True)
    rank = np.empty(order.size, np.int64)
    rank[order] = np.arange(order.size)
    supernode = system.contraction.supernode
    per_supernode = np.full(system.contraction.n_supernodes, -1, np.int64)
    per_supernode[system.free] = rank
    return NodeUnknowns(per_supernode[supernode], system.known_potential[supernode],
                        system.contraction.offset)
