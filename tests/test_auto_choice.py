"""The symbolic factor analysis, the memory budget and ``auto``'s choice by predicted cost."""

from __future__ import annotations

import argparse

import numpy as np
import pytest
import scipy.sparse as sp

from ohmgraph.datasets import grid2d, small_world
from ohmgraph.engine import SolverFailed, SolveSession, solve
from ohmgraph.engine.checks import check
from ohmgraph.engine.formulation import assemble
from ohmgraph.engine.memory import available_memory, default_memory_budget
from ohmgraph.engine.solvers import AcCgSolver, DirectSolver
from ohmgraph.engine.solvers.choice import choose, direct_fallback_allowed
from ohmgraph.engine.solvers.symbolic import (column_counts, column_counts_reference,
                                              elimination_tree, fill_reducing_order, postorder)
from ohmgraph.io.commands.argtypes import memory_size


def grounded(net):
    report = check(net)
    return assemble(net, report.contraction, report.pinned_nodes)


def random_spd(seed: int, n: int, extra: int) -> sp.csr_matrix:
    """A grounded Laplacian of a random connected graph (a path plus random chords)."""
    rng = np.random.default_rng(seed)
    a = np.concatenate([np.arange(n - 1), rng.integers(0, n, extra)])
    b = np.concatenate([np.arange(1, n), rng.integers(0, n, extra)])
    keep = a != b
    w = rng.uniform(0.5, 2.0, keep.sum())
    adjacency = sp.coo_matrix((w, (a[keep], b[keep])), shape=(n, n))
    adjacency = (adjacency + adjacency.T).tocsr()
    laplacian = sp.diags(np.asarray(adjacency.sum(axis=1)).ravel()) - adjacency
    return (laplacian + sp.diags(np.full(n, 1e-2))).tocsr()


# ------------------------------------------------------------------ symbolic analysis
@pytest.mark.parametrize("seed,n,extra", [(0, 30, 10), (1, 120, 200), (2, 400, 150)])
def test_column_counts_equal_the_dense_cholesky_pattern(seed, n, extra):
    matrix = random_spd(seed, n, extra)
    analysis = column_counts(matrix)
    assert sorted(analysis.order) == list(range(n))
    ordered = matrix[analysis.order][:, analysis.order].toarray()
    factor = np.linalg.cholesky(ordered)                   # numpy (LAPACK potrf) reference
    counts = (np.abs(factor) > 0).sum(axis=0)
    np.testing.assert_array_equal(analysis.column_counts, counts)
    assert analysis.factor_nonzeros == counts.sum()
    assert analysis.flops == pytest.approx(float((counts.astype(float) ** 2).sum()))


@pytest.mark.parametrize("order_kind", ["amd", "natural", "random"])
@pytest.mark.parametrize("seed,n,extra", [(3, 1, 0), (4, 50, 80), (5, 700, 900), (6, 2000, 40)])
def test_counts_kernel_matches_its_reference(seed, n, extra, order_kind):
    matrix = random_spd(seed, n, extra)
    order = {"amd": fill_reducing_order(matrix), "natural": np.arange(n),
             "random": np.random.default_rng(seed).permutation(n)}[order_kind]
    parent, counts = column_counts_reference(matrix, order)
    analysis = column_counts(matrix, order)
    np.testing.assert_array_equal(analysis.column_counts, counts)
    permuted = matrix[order][:, order].tocsc()
    permuted.sort_indices()
    tree = elimination_tree(permuted.indptr.astype(np.int64), permuted.indices.astype(np.int64))
    np.testing.assert_array_equal(tree, parent)
    post = postorder(tree)
    assert sorted(post) == list(range(n))
    place = np.empty(n, np.int64)
    place[post] = np.arange(n)
    assert np.all((tree < 0) | (place < place[np.maximum(tree, 0)]))   # children first


def test_amd_beats_the_natural_order_on_a_lattice():
    # Minimum-degree orderings cut the fill of a lattice far below its banded natural order
    # (George & Liu 1981, ch. 8; common practice).
    matrix = grounded(grid2d(40, 40)).matrix
    assert (column_counts(matrix).factor_nonzeros
            < 0.5 * column_counts(matrix, np.arange(matrix.shape[0])).factor_nonzeros)


def test_direct_factor_has_the_predicted_size_and_reach_still_works():
    matrix = grounded(grid2d(30, 30, pads=3, seed=2)).matrix
    analysis = column_counts(matrix)
    solver = DirectSolver(matrix, order=analysis.order)
    lower = solver.factors.L
    # SuperLU's L holds the unit diagonal and at least the structural entries; relaxed
    # supernodes may pad it with explicit zeros.
    assert (lower != 0).nnz <= analysis.factor_nonzeros <= lower.nnz
    b = np.random.default_rng(0).standard_normal(matrix.shape[0])
    x, info = solver.solve(b)
    np.testing.assert_allclose(matrix @ x, b, atol=1e-9 * np.abs(b).max())
    # reach's convention: unknown k sits at row perm_r[k] of the factors
    position = solver.factors.perm_r
    ordered = matrix.toarray()[np.argsort(position)][:, np.argsort(position)]
    np.testing.assert_allclose((lower @ solver.factors.U).toarray(), ordered, atol=1e-12)


# ------------------------------------------------------------------ the choice
def test_small_world_goes_to_an_iterative_back_end_for_one_right_hand_side():
    # Watts & Strogatz (Nature 393, 440, 1998) shortcuts make the factor fill in heavily.
    matrix = grounded(small_world(70_000, 4, 0.1, seed=1, pads=4, loads=10)).matrix
    choice = choose(matrix, 1, memory_budget=8e9)
    # a grounded Laplacian of even conductances: ac-cg wins (measured 0.14 s on one thread
    # against 1.09 s for amg-cg and 15 s for direct at rtol 1e-10). On two threads its
    # prediction is below any factorisation's least, so no analysis is needed; on one, the
    # analysis is made (amg-cg's floor is below ac-cg's prediction) and shows heavy fill and a
    # high multigrid complexity.
    assert choice.method == "ac-cg"
    if AcCgSolver.default_threads() > 1:
        assert choice.analysis is None
        assert choice.predicted["ac_seconds"] < choice.predicted["direct_floor_seconds"]
    else:
        assert choice.analysis is not None
        assert choice.predicted["factor_nonzeros"] > 20 * matrix.nnz
        assert (choice.predicted["direct_seconds"] > choice.predicted["amg_seconds"]
                > choice.predicted["ac_seconds"])
    # ... and to one factorisation for a thousand
    assert choose(matrix, 1000, memory_budget=8e9).method == "direct"


def test_a_matrix_that_is_no_grounded_laplacian_never_goes_to_ac_cg():
    matrix = grounded(small_world(20_000, 4, 0.1, seed=1, pads=4, loads=10)).matrix.tolil()
    matrix[0, 1] = matrix[1, 0] = 1e-3 * matrix[0, 0]      # one positive coupling (still SPD)
    choice = choose(matrix.tocsr(), 1, memory_budget=8e9)
    assert choice.method == "amg-cg" and "ac_seconds" not in choice.predicted


def test_small_lattice_goes_to_direct():
    matrix = grounded(grid2d(50, 50, pads=4, loads=10, seed=1)).matrix
    choice = choose(matrix, 1, memory_budget=8e9)
    assert choice.method == "direct" and choice.analysis is not None
    assert choice.predicted["direct_bytes"] < 8e9


def test_a_budget_too_small_for_the_factor_excludes_direct():
    matrix = grounded(grid2d(50, 50, pads=4, loads=10, seed=1)).matrix
    needed = choose(matrix, 1000, memory_budget=8e9).predicted["direct_bytes"]
    choice = choose(matrix, 1000, memory_budget=needed / 2)
    assert choice.method in ("amg-cg", "ac-cg") and "memory budget" in choice.reason
    allowed, why, _ = direct_fallback_allowed(matrix, needed / 2)
    assert not allowed and "memory budget" in why
    assert direct_fallback_allowed(matrix, needed * 2)[0]


def test_nothing_fits_a_tiny_budget():
    matrix = grounded(grid2d(50, 50, pads=4, loads=10, seed=1)).matrix
    with pytest.raises(SolverFailed, match="neither back end fits the memory budget"):
        SolveSession(matrix, memory_budget=1000).solve(np.ones(matrix.shape[0]))


def test_session_records_the_prediction_and_reuses_the_order():
    net = grid2d(20, 20, pads=2, loads=10, seed=3)
    solution = solve(net)
    stats = solution.session.stats
    assert stats.method == "direct" and stats.predicted["factor_nonzeros"] > 0
    assert "predicted" in stats.reason
    order = solution.session._analysis.order
    np.testing.assert_array_equal(solution.session._solver._order, order)


# ------------------------------------------------------------------ the budget
def test_default_budget_is_half_the_available_memory(monkeypatch):
    available = available_memory().bytes
    assert 0 < available < 1 << 60                    # /proc/meminfo exists on Linux
    assert default_memory_budget() == pytest.approx(0.5 * available, rel=0.05)
    matrix = grounded(grid2d(5, 5, pads=1)).matrix
    assert SolveSession(matrix, memory_budget=123.0).memory_budget == 123.0
    monkeypatch.setattr("ohmgraph.engine.session.default_memory_budget", lambda: 456.0)
    assert SolveSession(matrix).memory_budget == 456.0


@pytest.mark.parametrize("text,value", [("4GB", 4e9), ("512MB", 512e6), ("1.5 GiB", 1.5 * 2 ** 30),
                                        ("2048", 2048.0), ("64kib", 65536.0)])
def test_memory_sizes_parse(text, value):
    assert memory_size(text) == value


@pytest.mark.parametrize("text", ["4XB", "GB", "-1GB", "0MB", "nanGB", ""])
def test_bad_memory_sizes_are_refused(text):
    with pytest.raises(argparse.ArgumentTypeError):
        memory_size(text)



def test_a_later_query_reuses_the_analysis(monkeypatch):
    import ohmgraph.engine.solvers.choice as choice

    matrix = grounded(grid2d(50, 50, pads=4, loads=10, seed=1)).matrix
    session = SolveSession(matrix, memory_budget=8e9)
    monkeypatch.setattr(choice, "FACTOR_SECONDS_PER_FLOP", 1.0)      # direct looks dear
    session.expect(1)
    assert session.method in ("amg-cg", "ac-cg") and session._analysis is not None
    calls = []
    monkeypatch.setattr(choice, "column_counts", lambda *a: calls.append(a))
    session.expect(1)
    session.expect(3)
    assert not calls
