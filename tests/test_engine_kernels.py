"""Compiled kernels against their plain references: the weighted union-find contraction and the
tree-KCL accumulation of source currents."""

from __future__ import annotations

import numpy as np
import pytest

from ohmgraph.engine.contraction import contract, contract_kernel, contract_reference
from ohmgraph.engine.network import Network
from ohmgraph.engine.recovery import source_tree_currents


def random_multigraph(rng, n_nodes, n_edges):
    """Random endpoints with parallel edges and self-loops (so plenty of loops); the first
    half of the edges stays among the first half of the nodes, the rest among the others."""
    half = n_nodes // 2
    first = np.arange(n_edges) < n_edges // 2
    low = np.where(first, 0, half)
    high = np.where(first, half, n_nodes)
    return rng.integers(low, high), rng.integers(low, high), first


def smallest_member(root: np.ndarray) -> np.ndarray:
    """The smallest node index of each node's set: a labelling independent of the chosen roots."""
    smallest = np.full(root.size, root.size)
    np.minimum.at(smallest, root, np.arange(root.size))
    return smallest[root]


CASES = [(seed, n, k) for seed, (n, k) in enumerate([(6, 10), (40, 40), (200, 260), (3000, 3500)])]


@pytest.mark.parametrize("consistent", [True, False], ids=["kvl-consistent", "half-broken"])
@pytest.mark.parametrize("seed, n_nodes, n_edges", CASES)
def test_contract_kernel_matches_reference(seed, n_nodes, n_edges, consistent):
    rng = np.random.default_rng(seed)
    a, b, first_half = random_multigraph(rng, n_nodes, n_edges)
    potential = rng.uniform(-10, 10, n_nodes)
    volts = potential[a] - potential[b]
    if not consistent:   # random volts on the second half's edges break most of its loops
        volts[~first_half] = rng.uniform(-10, 10, (~first_half).sum())

    results = [kernel(n_nodes, a, b, volts) for kernel in (contract_kernel, contract_reference)]
    (root_k, offset_k, tree_k, mismatch_k), (root_r, offset_r, tree_r, mismatch_r) = results

    # Same partition of the nodes.
    group = smallest_member(root_k)
    np.testing.assert_array_equal(group, smallest_member(root_r))
    # Same number of tree branches (nodes minus sets) and loop-closing branches.
    assert tree_k.sum() == tree_r.sum() == n_nodes - np.unique(group).size
    # Each output is self-consistent: tree branches hold exactly, loop branches report their
    # mismatch against the offsets.
    for root, offset, tree, mismatch in results:
        implied = offset[a] - offset[b] - volts
        np.testing.assert_allclose(implied[tree], 0.0, atol=1e-9)
        np.testing.assert_allclose(mismatch[~tree], implied[~tree], atol=1e-9)
        np.testing.assert_array_equal(offset[root], 0.0)
    # Same loop consistency, set by set: a set has a broken loop in one iff in the other.
    broken_k = np.zeros(n_nodes, bool)
    broken_r = np.zeros(n_nodes, bool)
    broken_k[group[a[np.abs(mismatch_k) > 1e-9]]] = True
    broken_r[group[a[np.abs(mismatch_r) > 1e-9]]] = True
    np.testing.assert_array_equal(broken_k, broken_r)
    # Where no loop is broken the offsets are unique up to the set's own potential, so they
    # agree relative to one member per set (in a broken set they depend on the chosen tree).
    sound = ~broken_k[group]
    assert sound[:n_nodes // 2].all()
    np.testing.assert_allclose((offset_k - offset_k[group])[sound],
                               (offset_r - offset_r[group])[sound], rtol=0, atol=1e-9)
    # Where volts come from potentials, offsets reproduce their differences (external truth).
    built = slice(None) if consistent else slice(0, n_nodes // 2)
    np.testing.assert_allclose((offset_k - offset_k[group])[built],
                               (potential - potential[group])[built], rtol=0, atol=1e-9)
    assert broken_k.any() != consistent


def source_network(seed: int, n_nodes: int, n_sources: int, n_resistors: int) -> Network:
    """Voltage sources and ideal connections among random node pairs (with loops, which need
    not satisfy KVL: only the spanning forest matters here), plus resistors and current
    sources, so the source forest is deep and branching."""
    rng = np.random.default_rng(seed)
    potential = rng.uniform(-5, 5, n_nodes)
    src_a, src_b = rng.integers(0, n_nodes, (2, n_sources))
    res_a, res_b = rng.integers(0, n_nodes, (2, n_resistors))
    cur_a, cur_b = rng.integers(0, n_nodes, (2, n_resistors // 4))
    ideal = rng.random(n_sources) < 0.3
    volts = np.where(ideal, 0.0, potential[src_a] - potential[src_b])
    src_kind = np.where(ideal, "R", "V")
    frm = np.concatenate([src_a, res_a, cur_a])
    to = np.concatenate([src_b, res_b, cur_b])
    values = np.concatenate([volts, rng.uniform(0.5, 5, n_resistors),
                             rng.uniform(-1, 1, cur_a.size)])
    kinds = np.concatenate([src_kind, ["R"] * n_resistors, ["I"] * cur_a.size])
    return Network.from_arrays(frm, to, values, kinds, node_labels=np.arange(n_nodes))


@pytest.mark.parametrize("seed, n_nodes, n_sources", [(0, 10, 12), (1, 300, 250), (2, 4000, 3500)])
def test_accumulate_kernel_matches_sparse_reference(seed, n_nodes, n_sources):
    net = source_network(seed, n_nodes, n_sources, n_resistors=n_nodes)
    contraction = contract(net)
    tree = contraction.source_branches[contraction.tree]
    known = np.random.default_rng(seed).uniform(-1, 1, net.n_branches)
    known[tree] = 0.0

    fast = source_tree_currents(net, contraction, known)
    reference = source_tree_currents(net, contraction, known, reference_kernel=True)
    scale = np.abs(known).sum()
    np.testing.assert_allclose(fast, reference, rtol=0, atol=1e-12 * scale)

    # Both satisfy KCL at every node except the forest roots (which absorb the remainder).
    current = known.copy()
    current[tree] = fast
    leaving = (np.bincount(net.from_node, current, minlength=n_nodes)
               - np.bincount(net.to_node, current, minlength=n_nodes))
    non_root = contraction.root != np.arange(n_nodes)
    np.testing.assert_allclose(leaving[non_root], 0.0, atol=1e-12 * scale)


def test_grounded_csr_kernel_agrees_with_scipy_coordinate_assembly():
    """Direct CSR assembly against scipy's COO -> CSR (which sorts and sums duplicates)."""
    from ohmgraph.engine.formulation import (SupernodeGraph, grounded_matrix,
                                             grounded_matrix_reference)

    rng = np.random.default_rng(11)
    for trial in range(200):
        n = int(rng.integers(1, 30))
        a, b = rng.integers(0, n, 60), rng.integers(0, n, 60)
        if trial % 4 == 0:                  # a hub: one row longer than the insertion-sort limit
            a = np.concatenate([a, np.zeros(40, np.int64)])
            b = np.concatenate([b, rng.integers(0, n, 40)])
        a, b = a[a != b], b[a != b]
        graph = SupernodeGraph(np.arange(a.size), a, b, rng.random(a.size) + 0.1, n)
        free = np.flatnonzero(rng.random(n) > 0.2)
        unknown_of = np.full(n, -1, np.int64)
        unknown_of[free] = np.arange(free.size)
        fast = grounded_matrix(graph, free, unknown_of)
        plain = grounded_matrix_reference(graph, free, unknown_of)
        np.testing.assert_array_equal(fast.indptr, plain.indptr)
        np.testing.assert_array_equal(fast.indices, plain.indices)
        np.testing.assert_allclose(fast.data, plain.data, rtol=1e-15, atol=0)
        assert fast.has_canonical_format
