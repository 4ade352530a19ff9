"""Solver benchmarks on the reduced (grounded-Laplacian) system of a supplied lattice.

* the same matrix solved by ``ohmgraph.engine.solve_spd``, by pyamg's default smoothed
  aggregation with CG (``smoothed_aggregation_solver(A).solve(b, tol, accel="cg")``, set-up
  included, as shipped and with the BLAS held to one thread) and by
  ``scipy.sparse.linalg.spsolve``, printed as ratios to ``solve_spd``;
* ``direct`` against ``amg-cg`` over lattice sizes (``auto``'s choice over graph families and
  sizes is ``bench_auto_choice.py``);
* a block of right-hand sides against the same columns one by one;
* both methods on the IBM power-grid benchmark pg1 (skipped when absent).
"""

from __future__ import annotations

import numpy as np
import pyamg
import pytest
import scipy.sparse.linalg as spla
from conftest import RTOL, SIZE, Stopwatch, reduced_system, relative_residual, supplied_lattice

from ohmgraph.engine import solve_spd
from ohmgraph.engine.solvers import SOLVERS, single_threaded_blas

SAME_MATRIX_SECONDS: dict[str, float] = {}


def pyamg_default(A, b):
    """pyamg's default smoothed aggregation, then CG accelerated V-cycles to ``RTOL``."""
    return pyamg.smoothed_aggregation_solver(A).solve(b, tol=RTOL, accel="cg", maxiter=500)


def pyamg_default_one_thread(A, b):
    with single_threaded_blas():
        return pyamg_default(A, b)


SAME_MATRIX = {
    "ohmgraph solve_spd": lambda A, b: solve_spd(A, b, rtol=RTOL),
    "pyamg SA + CG (default)": pyamg_default,
    "pyamg SA + CG (1 BLAS thread)": pyamg_default_one_thread,
    "scipy spsolve": spla.spsolve,
}


@pytest.mark.parametrize("name", list(SAME_MATRIX))
def test_same_matrix(benchmark, lattice_system, name):
    benchmark.group = f"same matrix ({lattice_system.n_unknowns} unknowns)"
    A, b = lattice_system.matrix, lattice_system.rhs
    run = Stopwatch(SAME_MATRIX[name])
    rounds = 1 if name == "scipy spsolve" else 2
    x = benchmark.pedantic(run, args=(A, b), rounds=rounds, iterations=1)
    residual = relative_residual(A, x, b)
    SAME_MATRIX_SECONDS[name] = run.best
    benchmark.extra_info.update(seconds=run.best, relative_residual=residual)
    print(f"\n{name}: {run.best:.2f} s, relative residual {residual:.1e}")
    assert residual <= 1e-8


def test_same_matrix_ratios(lattice_system):
    """Print every solver's time as a multiple of ``solve_spd``'s (run after the above)."""
    if "ohmgraph solve_spd" not in SAME_MATRIX_SECONDS:
        pytest.skip("the same-matrix benchmarks did not run")
    ours = SAME_MATRIX_SECONDS["ohmgraph solve_spd"]
    print(f"\nsame matrix, {lattice_system.n_unknowns} unknowns; time / solve_spd time:")
    for name, seconds in SAME_MATRIX_SECONDS.items():
        print(f"  {name:32s} {seconds:8.2f} s   {seconds / ours:6.2f}x")


CROSSOVER_SIDES = sorted({min(side, SIZE) for side in (100, 150, 200, 300, 500)})


@pytest.mark.parametrize("method", ["direct", "amg-cg"])
@pytest.mark.parametrize("side", CROSSOVER_SIDES)
def test_direct_against_amg(benchmark, side, method):
    system = reduced_system(supplied_lattice(side))
    benchmark.group = f"crossover: lattice {side} x {side} ({system.n_unknowns} unknowns)"

    def setup_and_solve():
        solver = SOLVERS[method](system.matrix, RTOL)
        return solver, *solver.solve(system.rhs)

    run = Stopwatch(setup_and_solve)
    solver, _, info = benchmark.pedantic(run, rounds=2, iterations=1)
    benchmark.extra_info.update(unknowns=system.n_unknowns, seconds=run.best,
                                setup_seconds=info.setup_seconds,
                                solve_seconds=info.solve_seconds, iterations=info.iterations,
                                relative_residual=info.relative_residual)
    print(f"\n{method} on {system.n_unknowns} unknowns: {run.best:.2f} s (set-up "
          f"{info.setup_seconds:.2f}, solve {info.solve_seconds:.2f}, {info.iterations} "
          f"iterations)")


BLOCK_SIDE = min(SIZE, 300)


@pytest.mark.parametrize("shape", ["block", "columns"])
@pytest.mark.parametrize("method,width", [("direct", 16), ("amg-cg", 4)])
def test_block_right_hand_sides(benchmark, method, width, shape):
    system = reduced_system(supplied_lattice(BLOCK_SIDE))
    solver = SOLVERS[method](system.matrix, RTOL)
    block = np.random.default_rng(0).standard_normal((system.n_unknowns, width))
    benchmark.group = f"{width} right-hand sides, {method}, {system.n_unknowns} unknowns"

    def by_columns():
        return np.column_stack([solver.solve(block[:, j])[0] for j in range(width)])

    run = Stopwatch((lambda: solver.solve(block)[0]) if shape == "block" else by_columns)
    x = benchmark.pedantic(run, rounds=3, iterations=1)
    residual = relative_residual(system.matrix, x, block)
    benchmark.extra_info.update(seconds=run.best, relative_residual=residual)
    print(f"\n{method}, {width} right-hand sides as {shape}: {run.best:.3f} s")


@pytest.mark.parametrize("method", ["direct", "amg-cg"])
def test_pg1(benchmark, pg1_system, method):
    benchmark.group = f"pg1 ({pg1_system.n_unknowns} unknowns)"

    def setup_and_solve():
        return SOLVERS[method](pg1_system.matrix, RTOL).solve(pg1_system.rhs)[1]

    run = Stopwatch(setup_and_solve)
    info = benchmark.pedantic(run, rounds=3, iterations=1)
    benchmark.extra_info.update(seconds=run.best, iterations=info.iterations,
                                relative_residual=info.relative_residual)
    print(f"\npg1, {method}: {run.best:.3f} s, {info.iterations} iterations, relative residual "
          f"{info.relative_residual:.1e}")
    assert info.converged
