"""One solver on one saved system, in a fresh process (run by ``bench_peers.py``).

``python peer_run.py SOLVER SYSTEM.npz OUT.npz`` imports the solver's library, loads the system,
sets up and solves to a relative residual of ``RTOL`` and saves the solution with the seconds
of the imports, of set-up plus solve, the iterations and the process's peak resident memory
(``VmHWM``). The imports timed are NumPy's, SciPy's sparse matrices' (every solver needs them
to receive the matrix) and the solver's own. Loading the system is not timed (the same for every solver). The residual is the
caller's to compute, not taken from the solver.
"""

from __future__ import annotations

import sys
import time

RTOL = 1e-8


def _solve_spd(A, b):
    from ohmgraph.engine.session import SolveSession

    session = SolveSession(A, "auto", RTOL)
    x = session.solve(b)
    return x, session.stats.max_iterations, session.stats.method


def _apxchol(A, b):
    import apxchol

    result = apxchol.factorize(A, seed=1).solve(b, rtol=RTOL)
    return result.x, result.iters, "apxchol"


def _approx_chol(A, b):
    import approx_chol
    import scipy.sparse.linalg as spla

    factor = approx_chol.factorize(A, approx_chol.Config(seed=1))
    count = [0]

    def tally(_):
        count[0] += 1

    x, _ = spla.cg(A, b, rtol=RTOL, atol=0.0, maxiter=1000, M=factor, callback=tally)
    return x, count[0], "approx-chol + scipy cg"


def _pyamg(A, b):
    import pyamg

    residuals: list = []
    x = pyamg.smoothed_aggregation_solver(A).solve(b, tol=RTOL, accel="cg", maxiter=500,
                                                   residuals=residuals)
    return x, len(residuals) - 1, "pyamg SA + cg"


SOLVERS = {"solve_spd": (_solve_spd, "ohmgraph.engine.session"), "apxchol": (_apxchol, "apxchol"),
           "apxchol-1t": (_apxchol, "apxchol"),
           "approx-chol": (_approx_chol, "approx_chol"), "pyamg": (_pyamg, "pyamg")}


def peak_bytes() -> int:
    with open("/proc/self/status") as status:
        for line in status:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    return 0


def main(name: str, system: str, out: str) -> None:
    import importlib

    solve, module = SOLVERS[name]
    start = time.perf_counter()
    import numpy as np                    # every solver needs them to receive the matrix
    import scipy.sparse as sp

    importlib.import_module(module)
    imports = time.perf_counter() - start

    with np.load(system) as saved:
        b = saved["b"]
        A = sp.csr_matrix((saved["data"], saved["indices"], saved["indptr"]),
                          shape=(b.size, b.size))
    start = time.perf_counter()
    x, iterations, method = solve(A, b)
    seconds = time.perf_counter() - start
    np.savez(out, x=x, imports=imports, seconds=seconds, iterations=iterations, method=method,
             peak=peak_bytes())


if __name__ == "__main__":
    main(*sys.argv[1:4])
