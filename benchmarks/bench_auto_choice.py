"""``auto`` against ``direct`` and ``amg-cg`` over graph families, sizes and query lengths.

Rows: lattices (``grid2d``), the two-layer mesh (``layered_mesh``), 4-nearest-neighbour graphs
(``knn_network``), Watts–Strogatz small worlds (``small_world``, k = 4, p = 0.1) and
Barabási–Albert scale-free graphs (``scale_free``, m = 2) of about 10^4, 10^5 and 10^6 nodes
(``OHMGRAPH_AUTO_SIZES``, default ``4,5,6``), one right-hand side (the network's own) and 1,000
(seeded random columns, solved in blocks). The system is the reduced one ``solve`` would hand to
its solver, restricted to its largest connected component (k-NN graphs have small islands: on
them, pinned and loaded, amg-cg stagnated at 500 iterations, which is an amg-cg matter and not
this benchmark's). Every method runs in a fresh process on the same
saved reduced system, the three interleaved (``OHMGRAPH_AUTO_ROUNDS`` rounds, default 2 below
10^6 nodes and 1 at 10^6); a row's figure is the median over its rounds. Seconds are set-up plus
every solve, from the session's creation (``auto``'s analysis included; imports and the
loading of compiled kernels, once per process, are done before); memory is the child's
peak resident memory above its state once the system is loaded (``VmHWM`` after resetting it).

A method is stopped, and shown as such, when its resident memory grows past the budget
(``OHMGRAPH_AUTO_BUDGET_GB``, default 4; ``auto`` gets the same budget) or when it runs 10x past
the best time of the row so far (the first method run gets ``OHMGRAPH_AUTO_TIMEOUT`` seconds,
default 900); ``auto`` refuses (``SolverFailed``) when it predicts that neither fits. A method
whose set-up went over the budget with one right-hand side is not run again for 1,000; a row
whose best time exceeds ``OHMGRAPH_AUTO_LONG`` seconds (default 60) gets one round. With 1,000 right-hand sides ``amg-cg`` solves 20 columns, or as many as fit in 30 s
(at least 3), and the time for 1,000 is extrapolated linearly from them; such figures are
marked. Nothing here asserts a time; rows, ratios and the check ``auto <= max(1.25 x best,
best + 0.1 s)`` are printed and kept in ``extra_info``.

Run alone: ``python benchmarks/bench_auto_choice.py child SYSTEM.npz METHOD SOLVES BUDGET`` is
the child process.
"""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp

SIZES = [int(s) for s in os.environ.get("OHMGRAPH_AUTO_SIZES", "4,5,6").split(",")]
BUDGET = float(os.environ.get("OHMGRAPH_AUTO_BUDGET_GB", "4")) * 1e9
FIRST_TIMEOUT = float(os.environ.get("OHMGRAPH_AUTO_TIMEOUT", "900"))
ROUNDS = os.environ.get("OHMGRAPH_AUTO_ROUNDS")
RTOL = 1e-10
MANY = 1000
AMG_SAMPLE, AMG_SAMPLE_SECONDS = 20, 30.0
METHODS = ("amg-cg", "direct", "auto")
ROWS: list[dict] = []
SETUP_OVER_BUDGET: dict = {}
LONG_ROW_SECONDS = float(os.environ.get("OHMGRAPH_AUTO_LONG", "60"))


def network(family: str, exponent: int):
    """The network of a row: about ``10**exponent`` nodes, supplied and loaded (pads and loads
    as in ``conftest.supplied_lattice``)."""
    from ohmgraph.datasets.generators import (grid2d, knn_network, layered_mesh, scale_free,
                                              small_world)

    n = 10 ** exponent
    supply = dict(pads=max(4, n // 10_000), loads=max(1, n // 10), seed=1)
    if family == "lattice":
        side = round(n ** 0.5)
        return grid2d(side, side, 1.0, load_amps=1e-4, **supply)
    if family == "two-layer mesh":       # top layer every site, bottom every other: n = 1.25 s^2
        side = round((n / 1.25) ** 0.5)
        return layered_mesh(side, side, 2, pitch=(1, 2), **supply)
    if family == "4-NN":
        return knn_network(n, 4, **supply)
    if family == "small world":
        return small_world(n, 4, 0.1, **supply)
    return scale_free(n, 2, **supply)


def save_system(family: str, exponent: int, folder: Path) -> tuple[Path, int, int]:
    from ohmgraph.engine.checks import check
    from ohmgraph.engine.formulation import assemble

    from scipy.sparse.csgraph import connected_components

    net = network(family, exponent)
    report = check(net, allow_floating=True)
    system = assemble(net, report.contraction, report.pinned_nodes)
    path = folder / f"{family.replace(' ', '_')}_{exponent}.npz"
    A, rhs = system.matrix.tocsr(), system.rhs
    _, component = connected_components(A, directed=False)
    keep = component == np.argmax(np.bincount(component))
    A, rhs = A[keep][:, keep].tocsr(), rhs[keep]
    np.savez(path, indptr=A.indptr, indices=A.indices, data=A.data, rhs=rhs)
    return path, A.shape[0], A.nnz


# ------------------------------------------------------------------ the child process
def _status(field: str) -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return float(line.split()[1]) * 1024
    return 0.0


def child(path: str, method: str, solves: int, budget: float) -> None:
    """Load the system, then time a session over ``solves`` right-hand sides; print JSON."""
    import pyamg  # noqa: F401  (imports and compiled kernels: once per process, not timed)

    from ohmgraph.engine.session import SolveSession
    from ohmgraph.engine.solvers import SolverFailed
    from ohmgraph.engine.solvers.symbolic import column_counts, fill_reducing_order

    column_counts(sp.eye(3, format="csr"), fill_reducing_order(sp.eye(3, format="csr")))
    saved = np.load(path)
    rhs = saved["rhs"]
    n = rhs.size
    A = sp.csr_matrix((saved["data"], saved["indices"], saved["indptr"]), shape=(n, n))
    Path("/proc/self/clear_refs").write_text("5")            # reset the peak (VmHWM)
    base = _status("VmRSS")
    print(json.dumps({"base": base}), flush=True)
    rng = np.random.default_rng(0)
    start = time.perf_counter()
    session = SolveSession(A, method, RTOL, memory_budget=budget)
    try:
        session.expect(solves)
    except SolverFailed as error:            # auto refuses: nothing fits the budget
        print(json.dumps({"stopped": f"refused: {error}", "seconds": time.perf_counter() - start}))
        return
    done, extrapolated = 0, False
    if solves == 1:
        session.solve(rhs)
        done = 1
    else:
        width = 10 if session.method == "amg-cg" else (100 if n <= 200_000 else 20)
        solve_start = None
        while done < solves:
            block = rng.standard_normal((n, min(width, solves - done)))
            if solve_start is None:
                solve_start = time.perf_counter()
            session.solve(block)
            done += block.shape[1]
            if session.method == "amg-cg" and done < solves and (
                    done >= AMG_SAMPLE or (time.perf_counter() - solve_start > AMG_SAMPLE_SECONDS
                                           and done >= 3)):
                extrapolated = True
                break
    seconds = time.perf_counter() - start
    if extrapolated:
        per_solve = session.stats.solve_seconds / done
        seconds += per_solve * (solves - done)
    stats = session.stats
    print(json.dumps({"seconds": seconds, "peak": _status("VmHWM") - base, "method": stats.method,
                      "reason": stats.reason, "solved": done, "extrapolated": extrapolated,
                      "iterations": stats.max_iterations,
                      "residual": stats.max_relative_residual,
                      "predicted": {k: v for k, v in stats.predicted.items()
                                    if isinstance(v, (int, float, bool))}}), flush=True)


# ------------------------------------------------------------------ the parent
def run_child(path: Path, method: str, solves: int, timeout: float) -> dict:
    """One child run, stopped past ``timeout`` seconds or ``BUDGET`` bytes of growth."""
    command = [sys.executable, __file__, "child", str(path), method, str(solves), str(BUDGET)]
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                               text=True)
    base = json.loads(process.stdout.readline() or '{"base": 0}')["base"]
    start = time.perf_counter()
    stopped = None
    status = Path(f"/proc/{process.pid}/status")
    while process.poll() is None:
        time.sleep(0.05)
        try:
            rss = next(float(line.split()[1]) * 1024 for line in status.read_text().splitlines()
                       if line.startswith("VmRSS:"))
        except (OSError, StopIteration):
            continue
        if rss - base > BUDGET:
            stopped = f"over budget (> {BUDGET / 1e9:.0f} GB)"
        elif time.perf_counter() - start > timeout:
            stopped = f"stopped at {timeout:.0f} s"
        if stopped:
            process.kill()
            process.wait()
            return {"stopped": stopped, "seconds": time.perf_counter() - start}
    output = process.stdout.read().strip().splitlines()
    if process.returncode != 0 or not output:
        return {"stopped": f"failed (exit {process.returncode})",
                "seconds": time.perf_counter() - start}
    return json.loads(output[-1])


FAMILIES = ["lattice", "two-layer mesh", "4-NN", "small world", "scale-free"]
CASES = [(family, exponent, solves) for exponent in SIZES for family in FAMILIES
         for solves in (1, MANY)]


@pytest.fixture(scope="module")
def folder():
    with tempfile.TemporaryDirectory(prefix="ohmgraph-auto-") as name:
        yield Path(name)


def _cell(runs: list[dict]) -> dict:
    done = [r for r in runs if "stopped" not in r]
    if not done:
        return {"stopped": runs[-1]["stopped"], "seconds": max(r["seconds"] for r in runs)}
    cell = dict(done[-1])
    cell["seconds"] = statistics.median(r["seconds"] for r in done)
    cell["peak"] = statistics.median(r["peak"] for r in done)
    return cell


@pytest.mark.parametrize("family,exponent,solves", CASES)
def test_auto_choice(benchmark, folder, family, exponent, solves):
    benchmark.group = "auto choice"
    path = folder / f"{family.replace(' ', '_')}_{exponent}.npz"
    if not path.exists():
        path, _, _ = save_system(family, exponent, folder)
    rounds = int(ROUNDS) if ROUNDS else (1 if exponent >= 6 else 2)
    runs = {method: [] for method in METHODS}

    def row():
        for round_ in range(rounds):
            for method in METHODS:
                finished = [r["seconds"] for rs in runs.values() for r in rs if "stopped" not in r]
                if round_ and finished and min(finished) > LONG_ROW_SECONDS:
                    return                           # one round of a long row
                over = SETUP_OVER_BUDGET.get((family, exponent, method))
                if over:                             # its set-up alone went over: as before
                    runs[method].append({"stopped": over + " (set-up, as with 1 rhs)",
                                         "seconds": 0.0})
                    continue
                timeout = 10 * min(finished) if finished else FIRST_TIMEOUT
                run = run_child(path, method, solves, max(timeout, 1.0))
                if solves == 1 and run.get("stopped", "").startswith("over budget"):
                    SETUP_OVER_BUDGET[(family, exponent, method)] = run["stopped"]
                runs[method].append(run)

    benchmark.pedantic(row, rounds=1, iterations=1)
    cells = {method: _cell(runs[method]) for method in METHODS}
    finished = [cells[m]["seconds"] for m in ("direct", "amg-cg") if "stopped" not in cells[m]]
    best = min(finished) if finished else float("nan")
    auto = cells["auto"]
    ratio = auto["seconds"] / best if finished and "stopped" not in auto else float("nan")
    within = bool(finished and "stopped" not in auto
                  and auto["seconds"] <= max(1.25 * best, best + 0.1)
                  and auto["peak"] <= BUDGET)
    saved = np.load(path)
    record = {"family": family, "nodes": f"10^{exponent}", "unknowns": int(saved["rhs"].size),
              "solves": solves, "cells": cells, "best": best, "ratio": ratio, "within": within}
    ROWS.append(record)
    benchmark.extra_info.update(record)
    print("\n" + json.dumps(record))


def test_print_table():
    """The rows as a markdown table (run after the rows)."""
    def show(cell):
        if "stopped" in cell:
            return cell["stopped"]
        mark = " (extrapolated)" if cell.get("extrapolated") else ""
        return f"{cell['seconds']:.3g} s, {cell['peak'] / 1e6:.0f} MB{mark}"

    print("\n| graph | nodes | unknowns | rhs | direct | amg-cg | auto (picks) | auto / best |")
    print("| --- | --- | ---: | ---: | --- | --- | --- | ---: |")
    for r in ROWS:
        c = r["cells"]
        picks = c["auto"].get("method", "-")
        print(f"| {r['family']} | {r['nodes']} | {r['unknowns']:,} | {r['solves']:,} | "
              f"{show(c['direct'])} | {show(c['amg-cg'])} | {show(c['auto'])} ({picks}) | "
              f"{r['ratio']:.2f}{'' if r['within'] else ' !'} |")


if __name__ == "__main__" and sys.argv[1:2] == ["child"]:
    child(sys.argv[2], sys.argv[3], int(sys.argv[4]), float(sys.argv[5]))
