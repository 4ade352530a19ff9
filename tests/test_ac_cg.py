"""The approximate Cholesky back end (``ac-cg``): numba kernels against their plain-Python
references (the same seed gives the same factor, bit for bit), the factor's published
properties, and repeatable seeded solves through the session."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine import solve
from ohmgraph.engine.network import RESISTOR, Network
from ohmgraph.engine.session import SolveSession
from ohmgraph.engine.solvers.ac_cg import AcCgSolver
from ohmgraph.engine.solvers.ac_factor import (apply_reference, factor_kernel, factor_matrix,
                                               factor_reference, grounded_laplacian_kernel,
                                               inverse_pivots, permute_kernel, seed_state,
                                               split_kernel, split_laplacian, sweep_kernel,
                                               weight_variation_kernel)


def laplacian(n: int, edges: np.ndarray, weights: np.ndarray) -> sp.csr_matrix:
    """Laplacian of a multigraph (parallel edges kept as separate entries before summing)."""
    a, b = edges[:, 0], edges[:, 1]
    adjacency = sp.coo_matrix((np.r_[weights, weights], (np.r_[a, b], np.r_[b, a])), (n, n))
    adjacency = sp.csr_matrix(adjacency)
    return sp.csr_matrix(sp.diags(np.asarray(adjacency.sum(axis=1)).ravel()) - adjacency)


def random_graph(seed: int, n: int = 80, extra: int = 160) -> tuple:
    """A connected random graph: a random tree plus ``extra`` random edges, a hub joined to
    40 vertices (a neighbour list long enough for the merge-sort path) and weights spread over
    three decades."""
    rng = np.random.default_rng(seed)
    tree = np.column_stack([rng.integers(0, np.arange(1, n)), np.arange(1, n)])
    more = rng.integers(0, n, (extra, 2))
    more = more[more[:, 0] != more[:, 1]]
    spokes = min(40, n - 1)
    hub = np.column_stack([np.zeros(spokes, np.int64),
                           rng.choice(np.arange(1, n), spokes, replace=False)])
    edges = np.vstack([tree, more, hub])
    return edges, 10.0 ** rng.uniform(-1.5, 1.5, len(edges))


def grounded_cases():
    """(name, matrix): a Laplacian whose ground vertex (the last) is joined to three pads and
    then removed, and a general grounded matrix (excess on a third of the rows)."""
    edges, weights = random_graph(1)
    n = 80
    pads = np.array([[3, n], [17, n], [55, n]])
    with_ground = laplacian(n + 1, np.vstack([edges, pads]), np.r_[weights, 2.0, 0.5, 7.0])
    rng = np.random.default_rng(2)
    general = laplacian(n, edges, weights) + sp.diags(
        np.where(rng.random(n) < 0.33, rng.uniform(0.01, 3.0, n), 0.0))
    return [("laplacian-plus-ground", sp.csr_matrix(with_ground[:n, :n])),
            ("general-grounded", sp.csr_matrix(general))]


CASES = grounded_cases()


@pytest.mark.parametrize("name, matrix", CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("seed", [1, 7])
def test_kernel_and_reference_give_the_same_factor_and_preconditioner(name, matrix, seed):
    parts = split_kernel(matrix.indptr, matrix.indices, matrix.data)[:4]
    fast = factor_kernel(*parts, np.uint64(seed_state(seed)))
    plain = factor_reference(*parts, seed)
    for got, expected in zip(fast, plain):
        np.testing.assert_array_equal(got, expected)
    # a pool with no room to spare is compacted (and grown) often: the same factor
    for got, expected in zip(factor_kernel(*parts, np.uint64(seed_state(seed)), 1.0), plain):
        np.testing.assert_array_equal(got, expected)
    r = np.random.default_rng(seed).normal(size=matrix.shape[0])
    order, colptr, rows, values, pivots = fast
    swept = np.empty_like(r)
    dot = sweep_kernel(colptr, rows, values, inverse_pivots(pivots), r[order], swept)
    out = np.empty_like(r)
    out[order] = swept
    np.testing.assert_array_equal(out, apply_reference(colptr, rows, values, pivots, order, r))
    np.testing.assert_allclose(dot, r @ out, rtol=1e-12)
    ptr, idx, val = permute_kernel(matrix.indptr, matrix.indices, matrix.data, order)
    permuted = sp.csr_matrix((val, idx, ptr), shape=matrix.shape)
    np.testing.assert_array_equal(permuted.toarray(), matrix.toarray()[order][:, order])
    # the preconditioner is the inverse of the factor's product (float32 values kept exactly)
    product = factor_matrix(colptr, rows, values.astype(np.float64), pivots, order)
    np.testing.assert_allclose(product @ out, r, atol=1e-9 * np.abs(r).max())


def test_a_different_seed_samples_a_different_factor():
    matrix = CASES[1][1]
    parts = split_kernel(matrix.indptr, matrix.indices, matrix.data)[:4]
    first = factor_kernel(*parts, np.uint64(seed_state(1)))
    second = factor_kernel(*parts, np.uint64(seed_state(2)))
    assert not (first[3].size == second[3].size and np.array_equal(first[3], second[3]))


def test_weight_variation_matches_numpy():
    matrix = CASES[1][1]
    rows = np.repeat(np.arange(matrix.shape[0]), np.diff(matrix.indptr))
    off = (matrix.indices != rows) & (matrix.data != 0)
    logs, owner = np.log10(np.abs(matrix.data[off])), rows[off]
    spreads = [logs[owner == v].std() for v in np.unique(owner)]
    assert weight_variation_kernel(matrix.indptr, matrix.indices, matrix.data, 1) == \
        pytest.approx(np.mean(spreads), rel=1e-9)


def test_split_kernel_matches_scipy():
    matrix = CASES[1][1]
    fast = split_kernel(matrix.indptr, matrix.indices, matrix.data)
    for got, expected in zip(fast[:3], split_laplacian(matrix)[:3]):
        np.testing.assert_array_equal(got, expected)
    np.testing.assert_allclose(fast[3], split_laplacian(matrix)[3], atol=1e-12)
    assert fast[4] and grounded_laplacian_kernel(matrix.indptr, matrix.indices, matrix.data)
    positive = matrix.tolil()
    positive[0, 1] = positive[1, 0] = 0.1
    positive = positive.tocsr()
    assert not grounded_laplacian_kernel(positive.indptr, positive.indices, positive.data)


def test_a_plain_laplacian_leaves_one_zero_pivot_per_connected_part():
    edges, weights = random_graph(3, n=30, extra=20)
    two_parts = sp.block_diag([laplacian(30, edges, weights)] * 2, format="csr")
    parts = split_kernel(two_parts.indptr, two_parts.indices, two_parts.data)[:4]
    fast = factor_kernel(*parts, np.uint64(seed_state(3)))
    for got, expected in zip(fast, factor_reference(*parts, 3)):
        np.testing.assert_array_equal(got, expected)
    assert np.sum(fast[4] == 0.0) == 2


def test_on_a_tree_the_factor_is_exact():
    # A tree always has a vertex of degree at most 2, whose elimination creates at most one
    # edge, with the exact weight: no clique is sampled (Kyng & Sachdeva, FOCS 2016, sec. 1).
    rng = np.random.default_rng(4)
    n = 200
    edges = np.column_stack([rng.integers(0, np.arange(1, n)), np.arange(1, n)])
    matrix = laplacian(n, edges, 10.0 ** rng.uniform(-2, 2, n - 1)) + sp.diags(
        np.r_[1.0, np.zeros(n - 1)])
    matrix = sp.csr_matrix(matrix)
    parts = split_kernel(matrix.indptr, matrix.indices, matrix.data)[:4]
    order, colptr, rows, values, pivots = factor_kernel(*parts, np.uint64(seed_state(1)))
    # exact up to the float32 rounding of the stored entries
    product = factor_matrix(colptr, rows, values.astype(np.float64), pivots, order)
    np.testing.assert_allclose(product.toarray(), matrix.toarray(),
                               atol=1e-6 * np.abs(matrix.data).max())


def test_the_factor_is_unbiased_over_seeds():
    # Kyng & Sachdeva (FOCS 2016): the sampled Schur complements form a matrix martingale, so
    # the mean of L D L^T over seeds tends to the matrix (error falling as one over the square
    # root of the number of seeds). 400 fixed seeds: measured 0.035 of one sample's error.
    matrix = CASES[1][1]
    parts = split_kernel(matrix.indptr, matrix.indices, matrix.data)[:4]
    dense = matrix.toarray()

    def product(seed):
        order, colptr, rows, values, pivots = factor_kernel(*parts, np.uint64(seed_state(seed)))
        return factor_matrix(colptr, rows, values.astype(np.float64), pivots, order).toarray()

    one_sample = min(np.abs(product(seed) - dense).max() for seed in range(5))
    mean = sum(product(seed) for seed in range(400)) / 400
    assert one_sample > 0.03 * np.abs(dense).max()             # sampling does change entries
    assert np.abs(mean - dense).max() < 0.06 * one_sample


@pytest.mark.parametrize("name, matrix", CASES, ids=[c[0] for c in CASES])
def test_solutions_match_a_direct_solve(name, matrix):
    b = np.random.default_rng(5).normal(size=matrix.shape[0])
    solver = AcCgSolver(matrix, rtol=1e-10)
    x, info = solver.solve(b)
    assert info.converged and info.relative_residual <= 1e-10 and info.iterations > 0
    np.testing.assert_allclose(x, spla.spsolve(sp.csc_matrix(matrix), b), rtol=1e-7,
                               atol=1e-7 * np.abs(x).max())
    block, info = solver.solve(np.column_stack([b, 2 * b]))
    assert info.converged
    np.testing.assert_allclose(block[:, 1], 2 * block[:, 0], rtol=1e-8, atol=1e-12)


def test_same_seed_same_iterates_and_the_seed_is_recorded():
    net = grid2d(60, 60, pads=4, loads=50, seed=2)
    first = solve(net, method="ac-cg", rtol=1e-10)
    second = solve(net, method="ac-cg", rtol=1e-10)
    np.testing.assert_array_equal(first.node_voltage, second.node_voltage)
    assert first.iterations == second.iterations > 1
    assert first.session.stats.seed == second.session.stats.seed == 1
    assert first.method_reason.endswith("seed 1")             # stored with the solution
    matrix, rhs = first.system.matrix, first.system.rhs
    x7 = AcCgSolver(matrix, 1e-10, seed=7).solve(rhs)[0]
    np.testing.assert_array_equal(x7, AcCgSolver(matrix, 1e-10, seed=7).solve(rhs)[0])
    assert not np.array_equal(x7, AcCgSolver(matrix, 1e-10, seed=1).solve(rhs)[0])


def varied_lattice(side: int):
    """A lattice whose resistors are log-uniform over two decades (common practice for a
    network of uneven conductances)."""
    net = grid2d(side, side, pads=9, loads=100, seed=3)
    value = net.value.copy()
    resistors = net.kind == RESISTOR
    value[resistors] = 10.0 ** np.random.default_rng(4).uniform(-1, 1, int(resistors.sum()))
    return Network(net.node_labels, net.branch_names, net.kind, net.from_node, net.to_node,
                   value, net.reference)


def test_auto_picks_ac_cg_for_uneven_conductances_and_amg_for_even_ones():
    session = solve(varied_lattice(300), rtol=1e-8).session
    assert session.method == "ac-cg" and session.stats.seed == 1
    assert session.stats.predicted["ac_seconds"] < session.stats.predicted["amg_seconds"]
    assert session.stats.max_relative_residual <= 1e-8
    # equal resistors: classical multigrid converges in a few cycles (benchmarks/README.md)
    even = solve(grid2d(300, 300, pads=9, loads=100, seed=3), rtol=1e-8).session
    assert even.method == "amg-cg" and even.stats.seed is None
    assert even.stats.predicted["amg_evenness"] < 0.5


def test_session_falls_back_when_ac_cg_misses(monkeypatch):
    matrix = CASES[1][1]
    monkeypatch.setattr(AcCgSolver, "max_iterations", 1)
    session = SolveSession(matrix, "ac-cg", 1e-12)
    x = session.solve(np.ones(matrix.shape[0]))
    assert session.method == "direct" and "fell back" in session.stats.notes[0]
    np.testing.assert_allclose(matrix @ x, np.ones(matrix.shape[0]), atol=1e-9)


def test_a_read_only_install_caches_kernels_in_a_temporary_folder(monkeypatch, tmp_path):
    from ohmgraph.engine import numba_cache

    # recorded by monkeypatch (delenv of an absent variable is not), so whatever
    # ensure_cache_dir sets is undone and no later subprocess inherits it
    monkeypatch.setenv("NUMBA_CACHE_DIR", "")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    assert numba_cache.ensure_cache_dir(str(tmp_path)) is None         # all writable: untouched
    monkeypatch.setattr(numba_cache.os, "access", lambda path, mode: False)
    monkeypatch.setattr("numba.config.CACHE_DIR", "", raising=False)
    folder = numba_cache.ensure_cache_dir(str(tmp_path))
    assert folder and numba_cache.os.environ["NUMBA_CACHE_DIR"] == folder
    import numba

    assert numba.config.CACHE_DIR == folder
    monkeypatch.setenv("NUMBA_CACHE_DIR", "/elsewhere")                 # the user's choice stays
    assert numba_cache.ensure_cache_dir(str(tmp_path)) is None
