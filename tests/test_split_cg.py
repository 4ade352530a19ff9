"""Conjugate gradient with its vector work in two threads (engine/solvers/split_cg.py).

References: each numba kernel against the same operation in NumPy and SciPy; the whole loop
against SciPy's ``scipy.sparse.linalg.cg`` (the same algorithm, Hestenes & Stiefel 1952; Saad
2003, Algorithm 9.1) with the same preconditioner.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse.linalg as spla

from ohmgraph.engine.solvers import amg_cycle, split_cg
from ohmgraph.engine.solvers.amg_cycle import VCycle
from ohmgraph.engine.solvers.split_cg import conjugate_gradient

from test_amg_cycle import grounded_lattice, hierarchy_of


def test_kernels_equal_numpy_and_scipy():
    # The outside reference: SciPy's CSR product (which sums each row's entries in stored
    # order, as the kernel does: equal bit for bit) and NumPy's vector operations and dot
    # products (summed in another order: equal to a few units in the last place).
    A = grounded_lattice(12, seed=1)
    n = A.shape[0]
    rng = np.random.default_rng(2)
    p, q0, x0, r0, z = rng.standard_normal((5, n))
    for lo, hi in [(0, n), (0, 50), (50, n)]:
        rows = slice(lo, hi)
        q = q0.copy()
        pq = split_cg.product_dot_kernel(A.indptr, A.indices, A.data, p, q, lo, hi)
        np.testing.assert_array_equal(q[rows], A[rows] @ p)
        np.testing.assert_array_equal(np.delete(q, np.r_[rows]), np.delete(q0, np.r_[rows]))
        assert pq == pytest.approx(p[rows] @ q[rows], rel=1e-13)
        x, r = x0.copy(), r0.copy()
        rr = split_cg.update_kernel(0.37, p, q0, x, r, lo, hi)
        np.testing.assert_array_equal(x[rows], x0[rows] + 0.37 * p[rows])
        np.testing.assert_array_equal(r[rows], r0[rows] - 0.37 * q0[rows])
        assert rr == pytest.approx(r[rows] @ r[rows], rel=1e-13)
        assert split_cg.dot_kernel(p, z, lo, hi) == pytest.approx(p[rows] @ z[rows], rel=1e-12)
        direction = p.copy()
        split_cg.direction_kernel(z, direction, -1.5, lo, hi)
        np.testing.assert_array_equal(direction[rows], z[rows] - 1.5 * p[rows])
        np.testing.assert_array_equal(np.delete(direction, np.r_[rows]),
                                      np.delete(p, np.r_[rows]))


@pytest.mark.parametrize("blocks", [1, 2])
def test_the_loop_matches_scipy_cg(blocks, monkeypatch):
    monkeypatch.setattr(split_cg, "SPLIT_MIN_NONZEROS", 0 if blocks == 2 else 10**18)
    A = grounded_lattice(50, seed=3)
    b = np.random.default_rng(4).standard_normal(A.shape[0])
    cycle = VCycle(hierarchy_of(A))
    norm = np.linalg.norm(b)
    x0 = np.random.default_rng(5).standard_normal(A.shape[0]) * 1e-3
    for start in (None, x0):
        steps = []
        expected, info = spla.cg(A, b, x0=start, rtol=1e-10, atol=0.0, M=cycle.operator(),
                                 callback=steps.append)
        assert info == 0
        x, iterations = conjugate_gradient(A, b, cycle, x0=start, target=1e-10 * norm,
                                           max_iterations=500)
        assert abs(iterations - len(steps)) <= 1
        assert np.linalg.norm(b - A @ x) <= 2e-10 * norm
        np.testing.assert_allclose(x, expected, rtol=0, atol=1e-8 * np.abs(expected).max())
        again, _ = conjugate_gradient(A, b, cycle, x0=start, target=1e-10 * norm,
                                      max_iterations=500)
        np.testing.assert_array_equal(again, x)              # no dependence on thread timing
    if start is not None:
        assert not np.shares_memory(x, start)


def test_a_zero_right_hand_side_and_the_iteration_limit():
    A = grounded_lattice(10, seed=6)
    cycle = VCycle(hierarchy_of(A))
    x, iterations = conjugate_gradient(A, np.zeros(A.shape[0]), cycle, target=0.0,
                                       max_iterations=5)
    assert iterations == 0 and not x.any()
    b = np.random.default_rng(7).standard_normal(A.shape[0])
    counted = []
    x, iterations = conjugate_gradient(A, b, cycle, target=0.0, max_iterations=3,
                                       callback=counted.append)
    assert iterations == 3 and len(counted) == 3
    assert np.linalg.norm(b - A @ x) < np.linalg.norm(b)
    assert amg_cycle.SPLIT_MIN_NONZEROS > A.nnz        # the small system ran in one block


def test_a_start_that_is_not_finite_ends_at_once():
    A = grounded_lattice(10, seed=8)
    cycle = VCycle(hierarchy_of(A))
    b = np.ones(A.shape[0])
    start = np.zeros(A.shape[0])
    start[3] = np.nan
    x, iterations = conjugate_gradient(A, b, cycle, x0=start, target=1e-10, max_iterations=500)
    assert iterations == 0 and np.isnan(x[3])
