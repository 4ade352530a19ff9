"""The approximate Cholesky factor in two threads (``ac_split``): the masked elimination kernel
against its plain-Python reference, the unmasked factor unchanged, a factor that does not
depend on thread timing, and solves through the split that match a direct solve."""

from __future__ import annotations

import hashlib

import numba
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from test_ac_cg import CASES

from ohmgraph.datasets.generators import grid2d, knn_network, ladder
from ohmgraph.engine import solve
from ohmgraph.engine.session import SolveSession
from ohmgraph.engine.solvers import ac_split
from ohmgraph.engine.solvers.ac_cg import AcCgSolver, pcg_kernel
from ohmgraph.engine.solvers.ac_factor import (diagonal_kernel, eliminate_kernel,
                                               eliminate_reference, factor_kernel, seed_state,
                                               split_kernel, sweep_kernel)

# sha256 (first 16 hex digits) of factor_kernel's five arrays for each case at seed 1, recorded
# with the single-thread kernel before the eliminable mask was added: the mask changes nothing.
UNMASKED_DIGESTS = {"laplacian-plus-ground": "fff316752a7374bf",
                    "general-grounded": "33e7b12c95e3a150"}


def parts_of(matrix):
    return split_kernel(matrix.indptr, matrix.indices, matrix.data)[:4]


@pytest.mark.parametrize("name, matrix", CASES, ids=[c[0] for c in CASES])
def test_the_unmasked_factor_is_unchanged_bit_for_bit(name, matrix):
    factor = factor_kernel(*parts_of(matrix), np.uint64(seed_state(1)))
    digest = hashlib.sha256(b"".join(np.ascontiguousarray(a).tobytes() for a in factor))
    assert digest.hexdigest()[:16] == UNMASKED_DIGESTS[name]


@pytest.mark.parametrize("name, matrix", CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("seed", [1, 5, 9])
def test_masked_kernel_and_reference_agree(name, matrix, seed):
    parts = parts_of(matrix)
    diagonal = diagonal_kernel(parts[0], parts[2], parts[3])
    eliminable = np.random.default_rng(seed).random(matrix.shape[0]) < 0.7
    fast = eliminate_kernel(*parts, diagonal, eliminable, np.uint64(seed_state(seed)), 1.0)
    plain = eliminate_reference(*parts, diagonal, eliminable, seed)
    for got, expected in zip(fast, plain):
        np.testing.assert_array_equal(got, expected)
    order, ptr = fast[0], fast[6]
    np.testing.assert_array_equal(np.sort(order), np.flatnonzero(eliminable))
    assert not np.any(np.diff(ptr)[eliminable])            # the remaining graph: kept vertices
    # every vertex kept and no elimination: the input graph and excess come back unchanged
    kept = eliminate_kernel(*parts, diagonal, np.zeros(matrix.shape[0], np.bool_),
                            np.uint64(seed_state(seed)), 1.5)
    np.testing.assert_array_equal(kept[6], parts[0])
    np.testing.assert_array_equal(kept[7], parts[1])
    np.testing.assert_array_equal(kept[8], parts[2])
    np.testing.assert_array_equal(kept[5], np.maximum(parts[3], 0.0))


def lattice_matrix(side: int) -> sp.csr_matrix:
    return solve(grid2d(side, side, pads=4, loads=30, seed=2), method="direct").system.matrix


def test_the_separator_splits_a_lattice_into_two_unjoined_halves():
    matrix = lattice_matrix(40)
    labels = ac_split.split_labels(*parts_of(matrix)[:3])
    rows = np.repeat(np.arange(matrix.shape[0]), np.diff(matrix.indptr))
    joined = {(a, b) for a, b in zip(labels[rows], labels[matrix.indices])}
    assert (0, 1) not in joined and (1, 0) not in joined
    counts = np.bincount(labels, minlength=3)
    # a BFS level of a square lattice from a corner: an anti-diagonal, at most one side long
    assert min(counts[:2]) >= 0.4 * matrix.shape[0] and 0 < counts[2] <= 40


def test_the_two_thread_factor_does_not_depend_on_thread_timing():
    matrix = lattice_matrix(60)
    parts = parts_of(matrix)
    labels = ac_split.split_labels(*parts[:3])
    first = ac_split.split_factor(*parts, labels, 3, threads=2)
    for _ in range(3):
        for got, expected in zip(ac_split.split_factor(*parts, labels, 3, threads=2), first):
            np.testing.assert_array_equal(got, expected)
    for got, expected in zip(ac_split.split_factor(*parts, labels, 3, threads=1), first):
        np.testing.assert_array_equal(got, expected)
    order, colptr, rows, values, pivots = first
    n = matrix.shape[0]
    np.testing.assert_array_equal(np.sort(order), np.arange(n))
    assert colptr[-1] == rows.size == values.size and pivots.size == n
    steps = np.repeat(np.arange(n), np.diff(colptr))
    assert np.all(rows > steps)                       # every entry below the diagonal
    # the order is P0's vertices, then P1's, then the separator's
    np.testing.assert_array_equal(labels[order], np.sort(labels[order], kind="stable"))


def networks():
    """(name, network): a lattice, a 3-nearest-neighbour graph and a grounded ladder."""
    return [("lattice", grid2d(50, 50, pads=4, loads=30, seed=2)),
            ("knn-3", knn_network(3000, k=3, seed=4, pads=5, loads=40)),
            ("ladder", ladder(2000, 1.0, 50.0, source_volts=1.0))]


@pytest.mark.parametrize("name, net", networks(), ids=[c[0] for c in networks()])
def test_split_solves_match_a_direct_solve(monkeypatch, name, net):
    monkeypatch.setattr(ac_split, "MIN_UNKNOWNS", 100)
    # the 3-NN graph has islands (each pinned at one node): parts the search does not reach
    system = solve(net, method="direct", allow_floating=True).system
    matrix, b = system.matrix, system.rhs
    rtol = 1e-10
    session = SolveSession(matrix, "ac-cg", rtol)
    x = session.solve(b)
    assert session.method == "ac-cg" and session._solver.split
    assert "factored in two threads" in session.stats.reason       # stored with the seed
    assert session.stats.max_relative_residual <= rtol        # the session's own check
    # the error of a residual r is at most ||A^-1|| ||r|| (common practice)
    exact = spla.spsolve(sp.csc_matrix(matrix), b)
    smallest = spla.eigsh(sp.csc_matrix(matrix), k=1, sigma=0, which="LM",
                          return_eigenvectors=False)[0]
    bound = np.linalg.norm(matrix @ x - b) / smallest
    assert np.linalg.norm(x - exact) <= 1.01 * bound + 1e-14 * np.linalg.norm(exact)


def test_one_thread_when_numba_is_held_to_one(monkeypatch):
    monkeypatch.setattr(ac_split, "MIN_UNKNOWNS", 100)
    matrix = lattice_matrix(30)
    assert AcCgSolver(matrix, 1e-8).split
    monkeypatch.setattr(numba.config, "NUMBA_NUM_THREADS", 1)      # as under ulimit -v
    solver = AcCgSolver(matrix, 1e-8)
    assert solver.threads == 1 and not solver.split
    single = factor_kernel(*parts_of(matrix), np.uint64(seed_state(1)))
    np.testing.assert_array_equal(solver._order, single[0])


def test_two_thread_sweeps_and_iterates_match_the_one_thread_loop(monkeypatch):
    monkeypatch.setattr(ac_split, "MIN_UNKNOWNS", 100)
    system = solve(grid2d(60, 60, pads=4, loads=30, seed=2), method="direct").system
    solver = AcCgSolver(system.matrix, 1e-10)
    loop = solver._split_pcg
    assert solver.split and loop.cut < system.matrix.shape[0]
    factor = (solver._colptr, solver._rows, solver._values, solver._inverse)
    r = np.random.default_rng(6).normal(size=system.matrix.shape[0])
    one = np.empty_like(r)
    dot = sweep_kernel(*factor, r, one)
    two = loop.sweep(r)
    np.testing.assert_allclose(two, one, rtol=1e-12, atol=1e-12 * np.abs(one).max())
    assert dot == pytest.approx(r @ two, rel=1e-12)
    np.testing.assert_array_equal(loop.sweep(r), two)            # no dependence on timing
    original = np.empty_like(r)
    original[solver._order] = r
    np.testing.assert_array_equal(solver.apply(original)[solver._order], two)
    b = system.rhs[solver._order]
    target = 1e-9 * np.linalg.norm(b)
    x_one, x_two = np.zeros_like(b), np.zeros_like(b)
    iterations = pcg_kernel(*solver._permuted, *factor, b, x_one, target, 200)
    assert loop.run(b, x_two, target, 200) == iterations > 5
    np.testing.assert_allclose(x_two, x_one, rtol=1e-9, atol=1e-9 * np.abs(x_one).max())
    # from a nonzero start (the solver's second round): the same again
    x_one, x_two = 0.5 * x_one, 0.5 * x_one
    iterations = pcg_kernel(*solver._permuted, *factor, b, x_one, target, 200)
    assert loop.run(b, x_two, target, 200) == iterations > 5
    np.testing.assert_allclose(x_two, x_one, rtol=1e-9, atol=1e-9 * np.abs(x_one).max())
    # a start that already meets the target: no iteration, x untouched
    start = x_two.copy()
    assert loop.run(b, x_two, 10 * np.linalg.norm(b), 200) == 0
    np.testing.assert_array_equal(x_two, start)
