"""The amg-cg V-cycle with its large levels in two threads (engine/solvers/amg_cycle.py).

References: each numba kernel against its plain-Python twin; the cycle with every level in one
thread against pyamg's own ``aspreconditioner(cycle="V")`` (tests/test_engine_reference.py);
the two-thread cycle against the same steps run one after the other, in numba and in plain
Python. Hybrid Gauss–Seidel and the condition that keeps it a convergent smoother (``M + M^T -
A`` positive definite): Baker, Falgout, Kolev & Yang, SIAM J. Sci. Comput. 33(5), 2011.
"""

from __future__ import annotations

import numpy as np
import pyamg
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ohmgraph.engine.solvers import amg_cycle
from ohmgraph.engine.solvers.amg_cg import AmgCgSolver
from ohmgraph.engine.solvers.amg_cycle import (VCycle, coupling_kernel, coupling_reference,
                                               product_kernel, product_reference, split_rows,
                                               sweep_kernel, sweep_reference)


def grounded_lattice(side, seed=0):
    """A side x side lattice Laplacian with random conductances, node 0 tied to ground."""
    rng = np.random.default_rng(seed)
    n = side * side
    index = np.arange(n).reshape(side, side)
    a = np.r_[index[:, :-1].ravel(), index[:-1, :].ravel()]
    b = np.r_[index[:, 1:].ravel(), index[1:, :].ravel()]
    g = rng.uniform(0.5, 2.0, a.size)
    off = sp.coo_matrix((-g, (a, b)), shape=(n, n))
    laplacian = off + off.T
    laplacian = laplacian - sp.diags(np.asarray(laplacian.sum(axis=1)).ravel())
    return (laplacian + sp.diags(np.r_[1.0, np.zeros(n - 1)])).tocsr()


def hierarchy_of(matrix, max_coarse=50):
    return pyamg.ruge_stuben_solver(
        matrix, CF=("RS", {"second_pass": True}), interpolation="direct",
        presmoother=("gauss_seidel", {"sweep": "forward"}),
        postsmoother=("gauss_seidel", {"sweep": "backward"}), max_coarse=max_coarse,
        coarse_solver="splu")


class InTurn:
    """A stand-in for the helper thread that runs each task at once, in this thread."""

    class Done:
        def __init__(self, value):
            self.value = value

        def result(self):
            return self.value

    def submit(self, task, *args):
        return self.Done(task(*args))


@pytest.mark.parametrize("forward", [True, False])
def test_kernels_equal_their_plain_references(forward):
    A = grounded_lattice(9, seed=3)
    n = A.shape[0]
    rng = np.random.default_rng(4)
    x0, b = rng.standard_normal(n), rng.standard_normal(n)
    for lo, hi in [(0, n), (0, 40), (40, n)]:
        rows = np.arange(lo, hi)
        fast, plain = np.zeros(n), np.zeros(n)
        coupling_kernel(rows, A.indptr, A.indices, A.data, x0, fast, lo, hi)
        coupling_reference(rows, A.indptr, A.indices, A.data, x0, plain, lo, hi)
        np.testing.assert_array_equal(fast, plain)
        if (lo, hi) == (0, n):
            assert not fast.any()                   # nothing outside the whole range
        else:
            assert np.count_nonzero(fast) == 9      # one lattice row touches the other block
        coupling = fast
        x_fast, x_plain = x0.copy(), x0.copy()
        sweep_kernel(A.indptr, A.indices, A.data, x_fast, b, coupling, lo, hi, forward)
        sweep_reference(A.indptr, A.indices, A.data, x_plain, b, coupling, lo, hi, forward)
        np.testing.assert_array_equal(x_fast, x_plain)
        np.testing.assert_array_equal(x_fast[:lo], x0[:lo])         # other rows untouched
        for mode in (0, 1, 2):
            y_fast, y_plain = x0.copy(), x0.copy()
            product_kernel(A.indptr, A.indices, A.data, b, y_fast, x0, lo, hi, mode)
            product_reference(A.indptr, A.indices, A.data, b, y_plain, x0, lo, hi, mode)
            np.testing.assert_array_equal(y_fast, y_plain)
    # the whole range is SciPy's product and pyamg's sweep, bit for bit
    y = np.empty(n)
    product_kernel(A.indptr, A.indices, A.data, b, y, x0, 0, n, 1)
    np.testing.assert_array_equal(y, x0 - A @ b)
    x_fast, x_pyamg = x0.copy(), x0.copy()
    sweep_kernel(A.indptr, A.indices, A.data, x_fast, b, np.zeros(n), 0, n, forward)
    pyamg.relaxation.relaxation.gauss_seidel(A, x_pyamg, b,
                                             sweep="forward" if forward else "backward")
    np.testing.assert_array_equal(x_fast, x_pyamg)


@pytest.fixture
def split_everywhere(monkeypatch):
    """Split every level that qualifies, however small."""
    monkeypatch.setattr(amg_cycle, "SPLIT_MIN_NONZEROS", 0)
    monkeypatch.setattr(amg_cycle, "SPLIT_MAX_COUPLING", 0.1)


def test_two_threads_equal_the_same_steps_in_turn_and_in_plain_python(split_everywhere,
                                                                     monkeypatch):
    A = grounded_lattice(40, seed=1)
    cycle = VCycle(hierarchy_of(A))
    assert cycle.split_levels >= 2
    b = np.random.default_rng(2).standard_normal(A.shape[0])
    threaded = cycle(b)
    np.testing.assert_array_equal(cycle(b), threaded)                   # repeatable
    np.testing.assert_array_equal(cycle._cycle(b.copy(), InTurn()), threaded)
    for name in ("sweep", "coupling", "product"):
        monkeypatch.setattr(amg_cycle, f"{name}_kernel", getattr(amg_cycle, f"{name}_reference"))
    np.testing.assert_array_equal(cycle._cycle(b.copy(), InTurn()), threaded)


def test_the_split_cycle_is_symmetric_positive_definite_and_converges(split_everywhere):
    A = grounded_lattice(60, seed=5)
    hierarchy = hierarchy_of(A)
    split = VCycle(hierarchy)
    assert split.split_levels >= 2
    rng = np.random.default_rng(6)
    u, v = rng.standard_normal((2, A.shape[0]))
    assert u @ split(v) == pytest.approx(v @ split(u), rel=1e-12)
    for w in (u, v, np.ones(A.shape[0])):
        assert w @ split(w) > 0
    counts = {}
    for name, operator in (("split", split.operator()),
                           ("pyamg", hierarchy.aspreconditioner(cycle="V"))):
        steps = []
        x, info = spla.cg(A, u, rtol=1e-10, atol=0.0, M=operator, callback=steps.append)
        assert info == 0 and np.linalg.norm(u - A @ x) <= 1e-10 * np.linalg.norm(u)
        counts[name] = len(steps)
    assert counts["split"] <= counts["pyamg"] + 2, counts


def test_levels_that_would_smooth_badly_stay_in_one_thread(split_everywhere):
    A = grounded_lattice(30, seed=7)
    blocks, boundaries = split_rows(A)
    assert blocks == ((0, blocks[0][1]), (blocks[0][1], A.shape[0]))
    assert all(rows.size for rows in boundaries)
    # a random numbering joins the halves by half the entries: Jacobi, not Gauss-Seidel
    order = np.random.default_rng(8).permutation(A.shape[0])
    assert split_rows(A[order][:, order].tocsr()) is None
    # a boundary row whose diagonal does not exceed its pull into the other block
    weak = A.tolil()
    mid = blocks[0][1]
    row = int(boundaries[0][0])
    weak[row, row] = 0.5 * np.abs(A[row, mid:]).sum()
    assert split_rows(weak.tocsr()) is None


def test_amg_cg_solves_with_the_split_cycle_as_before(split_everywhere):
    A = grounded_lattice(80, seed=9)
    b = np.random.default_rng(10).standard_normal(A.shape[0])
    solver = AmgCgSolver(A, rtol=1e-10)
    x, info = solver.solve(b)
    assert info.converged and info.relative_residual <= 1e-10
    assert np.linalg.norm(b - A @ x) <= 1e-10 * np.linalg.norm(b)
    np.testing.assert_allclose(x, spla.spsolve(A.tocsc(), b), rtol=1e-7, atol=1e-9)
    # between solves the cycle holds no work vectors; the next solve makes them again
    assert all(level.x is None for level in solver._cycle._levels)
    again, info = solver.solve(b)
    np.testing.assert_array_equal(again, x)


def test_one_thread_where_numba_is_held_to_one(split_everywhere, monkeypatch):
    """As the command line holds numba under an address-space limit: no level splits and CG
    runs in one block, so no helper thread is started."""
    import numba

    from ohmgraph.engine.solvers import split_cg

    A = grounded_lattice(40, seed=11)
    assert split_rows(A) is not None
    monkeypatch.setattr(numba.config, "NUMBA_NUM_THREADS", 1)
    monkeypatch.setattr(split_cg, "SPLIT_MIN_NONZEROS", 0)
    assert split_rows(A) is None and VCycle(hierarchy_of(A)).split_levels == 0

    class NoThreads:
        def __init__(self, *args, **kwargs):
            pass

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            return False

        def submit(self, *args):
            raise AssertionError("a helper thread was used")

    monkeypatch.setattr(split_cg, "ThreadPoolExecutor", NoThreads)
    b = np.random.default_rng(12).standard_normal(A.shape[0])
    x, iterations = split_cg.conjugate_gradient(A, b, VCycle(hierarchy_of(A)),
                                                target=1e-10 * np.linalg.norm(b),
                                                max_iterations=100)
    assert iterations > 0 and np.linalg.norm(b - A @ x) <= 2e-10 * np.linalg.norm(b)
