"""Side by side: ``solve_spd`` against general-purpose Laplacian solvers on the same saved
systems, each solver in a fresh process (issue 8, goal 1).

``python benchmarks/bench_peers.py [--rounds 3] [--cases grid,mesh,knn]
[--solvers solve_spd,apxchol,approx-chol,pyamg]`` builds the three systems of
:mod:`peer_systems` once (saved outside the repository), then runs interleaved rounds
(A B C D A B C D ...): every solver on every case in its own process (:mod:`peer_run`), timed
as imports plus set-up plus solve to a relative residual of 1e-8. The harness computes each
solution's relative residual ``||b - A x|| / ||b||`` itself and prints one table: median
seconds and ``solve_spd`` / the best peer, the child's whole CPU time (user + system, start-up
and loading included: steadier than wall time on a shared machine, but it counts every thread
of a multi-threaded peer) and its ratio, iterations, residual, peak resident memory of the child
(``VmHWM``, the system included). Solvers whose library is not installed
(``make bench`` installs the ``bench`` extra) are left out with a note.

The peers: ``apxchol`` (as shipped: OpenMP threads on every core; and ``apxchol-1t``, the same
with ``OMP_NUM_THREADS=1``, which is faster on a busy machine) and ``approx-chol`` (randomised
approximate Cholesky, Kyng & Sachdeva 2016; Gao, Kyng & Spielman 2023; ``approx-chol``
preconditions SciPy's CG); the ratio is to the best of them. pyamg's smoothed aggregation + CG
runs for reference (not a peer in the ratio).
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import resource
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import peer_systems  # noqa: E402

RUNNER = Path(__file__).resolve().parent / "peer_run.py"
MODULES = {"solve_spd": "ohmgraph", "apxchol": "apxchol", "apxchol-1t": "apxchol",
           "approx-chol": "approx_chol", "pyamg": "pyamg"}
PEERS = ("apxchol", "apxchol-1t", "approx-chol")


def run_once(solver: str, system: Path, workdir: str) -> dict:
    out = os.path.join(workdir, f"{solver}.npz")
    env = dict(os.environ, OMP_NUM_THREADS="1") if solver.endswith("-1t") else None
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run([sys.executable, str(RUNNER), solver, str(system), out], check=True, env=env)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    with np.load(out, allow_pickle=False) as saved:
        result = {key: saved[key].item() if saved[key].ndim == 0 else saved[key] for key in saved}
    result["cpu"] = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return result


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--cases", default=",".join(peer_systems.CASES))
    parser.add_argument("--solvers", default=",".join(MODULES))
    args = parser.parse_args(argv)
    solvers = [s for s in args.solvers.split(",") if importlib.util.find_spec(MODULES[s])]
    for missing in set(args.solvers.split(",")) - set(solvers):
        print(f"note: {missing} is not installed (make bench installs it); left out")
    rows = []
    for case in args.cases.split(","):
        system = peer_systems.ensure(case)
        A, b = peer_systems.load(system)
        norm_b = np.linalg.norm(b)
        runs = {s: [] for s in solvers}
        with tempfile.TemporaryDirectory() as workdir:
            for round_ in range(args.rounds):
                for solver in solvers:
                    result = run_once(solver, system, workdir)
                    result["residual"] = float(np.linalg.norm(b - A @ result.pop("x")) / norm_b)
                    runs[solver].append(result)
                    print(f"{case} round {round_ + 1} {solver}: "
                          f"{result['imports'] + result['seconds']:.2f} s", file=sys.stderr)
        for solver, results in runs.items():
            rows.append({
                "case": case, "unknowns": b.size, "solver": solver,
                "seconds": statistics.median(r["imports"] + r["seconds"] for r in results),
                "imports": statistics.median(r["imports"] for r in results),
                "cpu": statistics.median(r["cpu"] for r in results),
                "iterations": max(r["iterations"] for r in results),
                "residual": max(r["residual"] for r in results),
                "peak_gb": max(r["peak"] for r in results) / 1e9,
                "method": results[0]["method"]})
    load = os.getloadavg()
    print(f"\nrtol 1e-8; median of {args.rounds} interleaved rounds; load average "
          f"{load[0]:.2f} {load[1]:.2f} {load[2]:.2f}; {os.cpu_count()} cores")
    print("| case (unknowns) | solver | seconds (imports) | / best peer | CPU seconds | "
          "/ best peer | iterations | residual | peak GB |")
    print("| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |")
    for row in rows:
        ratios = []
        for key in ("seconds", "cpu"):
            peers = [r[key] for r in rows if r["case"] == row["case"] and r["solver"] in PEERS]
            ratios.append(f"{row[key] / min(peers):.2f}" if peers else "-")
        print(f"| {row['case']} ({row['unknowns']:,}) | {row['solver']} ({row['method']}) | "
              f"{row['seconds']:.2f} ({row['imports']:.2f}) | {ratios[0]} | {row['cpu']:.2f} | "
              f"{ratios[1]} | {row['iterations']} | {row['residual']:.1e} | "
              f"{row['peak_gb']:.2f} |")


if __name__ == "__main__":
    main()
