"""The three reduced systems of the side-by-side solver comparison (``bench_peers.py``).

Each is built once with a fixed seed from ``ohmgraph.datasets.generators``, checked and
assembled as ``ohmgraph solve`` would (:func:`ohmgraph.engine.formulation.assemble`), and saved
as ``NAME.npz`` (CSR arrays and the right-hand side) in a cache folder outside the repository
(``OHMGRAPH_PEER_CACHE``, default ``$XDG_CACHE_HOME/ohmgraph-peers`` or ``~/.cache/...``).

* ``grid``: a 1000 x 1000 lattice whose resistors are log-uniform between 0.1 and 10 ohm, with
  100 supply pads and loads on a tenth of the nodes (999,900 unknowns);
* ``mesh``: a two-layer mesh with vias, 900 x 900 sites (bottom layer every site, top layer
  every second site), 100 pads and 100,000 loads (about 1.01 million unknowns);
* ``knn``: one million random points in the unit square, each joined to its 3 nearest
  neighbours (a random planar-like graph), 100 pads and 100,000 loads; its largest connected
  part (the rest are islands without a supply, singular blocks), 985,076 unknowns.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import numpy as np
import scipy.sparse as sp

CASES = ("grid", "mesh", "knn")


def cache_dir() -> Path:
    root = os.environ.get("OHMGRAPH_PEER_CACHE")
    if root:
        return Path(root)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "ohmgraph-peers"


def _network(case: str):
    from ohmgraph.datasets.generators import grid2d, knn_network, layered_mesh
    from ohmgraph.engine.network import RESISTOR, Network

    if case == "grid":
        net = grid2d(1000, 1000, 1.0, pads=100, loads=100_000, load_amps=1e-4, seed=11)
        rng = np.random.default_rng(12)
        value = net.value.copy()
        resistors = net.kind == RESISTOR
        value[resistors] = 10.0 ** rng.uniform(-1.0, 1.0, int(resistors.sum()))
        return Network(net.node_labels, net.branch_names, net.kind, net.from_node, net.to_node,
                       value, net.reference)
    if case == "mesh":
        return layered_mesh(900, 900, 2, pads=100, loads=100_000, load_amps=1e-4, seed=13)
    if case == "knn":
        return knn_network(1_000_000, 3, seed=14, pads=100, loads=100_000, load_amps=1e-4)
    raise ValueError(f"unknown case {case!r} (expected one of {', '.join(CASES)})")


def build(case: str) -> tuple[sp.csr_matrix, np.ndarray]:
    """The reduced system ``(A, b)`` of ``case``, as ``ohmgraph solve`` assembles it (for a
    network with islands, the part the solve keeps)."""
    from ohmgraph.engine.checks import check
    from ohmgraph.engine.formulation import assemble

    from scipy.sparse.csgraph import connected_components

    net = _network(case)
    report = check(net)
    system = assemble(net, report.contraction, report.pinned_nodes)
    A, b = sp.csr_matrix(system.matrix), np.asarray(system.rhs, dtype=np.float64)
    # Islands without a supply are singular blocks (their loads cannot be met): keep the
    # largest connected part, which holds the supplies.
    _, part = connected_components(A, directed=False)
    keep = np.flatnonzero(part == np.argmax(np.bincount(part)))
    if keep.size < b.size:
        A, b = sp.csr_matrix(A[keep][:, keep]), b[keep]
    return A, b


def path(case: str) -> Path:
    return cache_dir() / f"{case}.npz"


def ensure(case: str) -> Path:
    """The saved system of ``case``, built and saved on first use."""
    target = path(case)
    if not target.exists():
        A, b = build(case)
        target.parent.mkdir(parents=True, exist_ok=True)
        partial = target.with_suffix(".part.npz")
        np.savez(partial, indptr=A.indptr, indices=A.indices, data=A.data, b=b)
        partial.replace(target)
    return target


def load(file) -> tuple[sp.csr_matrix, np.ndarray]:
    with np.load(file) as saved:
        b = saved["b"]
        A = sp.csr_matrix((saved["data"], saved["indices"], saved["indptr"]),
                          shape=(b.size, b.size))
    return A, b


if __name__ == "__main__":
    for name in sys.argv[1:] or CASES:
        print(name, ensure(name))
