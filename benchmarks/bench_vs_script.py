"""End to end against a plain script: ``ohmgraph solve NET.csv -o OUT.h5 --rtol 1e-8`` vs
``benchmarks/plain_script.py`` (pandas + scipy + pyamg + h5py) on the grids of
``benchmarks/grid_table.py`` (issue 8, goals 2 and 5).

The commands run in turn, A B B' A B B' ... (``OHMGRAPH_VS_ROUNDS`` rounds, default 3), each in a
fresh process: A is ohmgraph, B the script as shipped, B' the script with its BLAS held to one
thread (``OPENBLAS_NUM_THREADS=1`` and friends: on a loaded machine the BLAS threads of pyamg's
set-up wait on each other and the script runs up to 2.5x slower; ohmgraph holds its BLAS to one
thread itself). The yardstick of each round is the faster of B and B'. The table gives the
median wall seconds of each, the median of the per-round ratios, and each command's peak
resident memory (largest ``ru_maxrss`` of its runs, from ``os.wait4`` on the child). ohmgraph's seconds per stage (its ``--json`` summary) are medians
too. ``OHMGRAPH_VS_SIDES`` (default ``1000,2000``) picks the grids; ``OHMGRAPH_VS_DATA`` names a
folder that keeps the generated CSV files between runs (default: a temporary folder);
``OHMGRAPH_VS_SCRIPT=0`` runs ohmgraph alone (the 3000 x 3000 grid: ``OHMGRAPH_VS_SIDES=3000
OHMGRAPH_VS_ROUNDS=1``). ``OHMGRAPH_VS_BEFORE`` names another ``ohmgraph`` executable (an
earlier checkout's) to run in each round too, for a before/after table of the stages. Nothing
here asserts a time.

    .venv/bin/python -m pytest benchmarks/bench_vs_script.py -o python_files='bench_*.py' \\
        --benchmark-enable -s
"""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

import pytest

from grid_table import grid
from ohmgraph.io.branch_table import write_branch_table

SIDES = [int(side) for side in os.environ.get("OHMGRAPH_VS_SIDES", "1000,2000").split(",")]
ROUNDS = int(os.environ.get("OHMGRAPH_VS_ROUNDS", "3"))
WITH_SCRIPT = os.environ.get("OHMGRAPH_VS_SCRIPT", "1") != "0"
BEFORE = os.environ.get("OHMGRAPH_VS_BEFORE")
RTOL = "1e-8"
SCRIPT = Path(__file__).with_name("plain_script.py")


@pytest.fixture(scope="module")
def data_folder(tmp_path_factory) -> Path:
    folder = os.environ.get("OHMGRAPH_VS_DATA")
    if folder:
        Path(folder).mkdir(parents=True, exist_ok=True)
        return Path(folder)
    return tmp_path_factory.mktemp("vs_script")


def grid_csv(folder: Path, side: int) -> Path:
    path = folder / f"grid{side}.csv"
    if not path.exists():
        start = time.perf_counter()
        write_branch_table(path, grid(side))
        print(f"\nwrote {path} ({path.stat().st_size / 1e6:.0f} MB) in "
              f"{time.perf_counter() - start:.1f} s")
    return path


ONE_THREAD = {name: "1" for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS",
                                      "MKL_NUM_THREADS")}


def run_child(command: list[str], env: dict | None = None) -> tuple[float, float, str]:
    """Wall seconds, peak resident bytes and standard output of one child process, reaped
    with ``os.wait4`` so that its own peak is known."""
    start = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                             text=True, env=None if env is None else {**os.environ, **env})
    out = child.stdout.read()
    _, status, usage = os.wait4(child.pid, 0)
    seconds = time.perf_counter() - start
    child.returncode = os.waitstatus_to_exitcode(status)
    if child.returncode:
        raise RuntimeError(f"{' '.join(command[:4])} ... exited {child.returncode}")
    return seconds, usage.ru_maxrss * 1024.0, out


@pytest.mark.parametrize("side", SIDES)
def test_against_plain_script(benchmark, data_folder, side, tmp_path):
    benchmark.group = f"end to end vs plain script, grid {side} x {side}"
    network = grid_csv(data_folder, side)
    ours = [str(Path(sys.executable).with_name("ohmgraph")), "solve", str(network), "-o",
            str(tmp_path / "ohmgraph.h5"), "--rtol", RTOL, "--json", "--force"]
    script = [sys.executable, str(SCRIPT), str(network), str(tmp_path / "script.h5")]
    a_runs, b_runs, b1_runs, summaries, before_runs, before_summaries = [], [], [], [], [], []

    def one_round():
        seconds, peak, out = run_child(ours)
        a_runs.append((seconds, peak))
        summaries.append(json.loads(out))
        if BEFORE:
            seconds, peak, out = run_child([BEFORE, *ours[1:]])
            before_runs.append((seconds, peak))
            before_summaries.append(json.loads(out))
        if WITH_SCRIPT:
            b_runs.append(run_child(script)[:2])
            b1_runs.append(run_child(script, ONE_THREAD)[:2])

    benchmark.pedantic(one_round, rounds=ROUNDS, iterations=1)
    load = os.getloadavg()
    a_median = statistics.median(s for s, _ in a_runs)
    a_peak = max(p for _, p in a_runs)
    stages = {stage: statistics.median(s["timings_s"][stage] for s in summaries)
              for stage in summaries[0]["timings_s"]}
    last = summaries[-1]
    info = {"side": side, "branches": last["branches"], "rounds": ROUNDS,
            "ohmgraph_seconds": [s for s, _ in a_runs], "ohmgraph_median_s": a_median,
            "ohmgraph_peak_bytes": a_peak, "stages_median_s": stages,
            "method": last["method"], "iterations": last["iterations"],
            "relative_residual": last["relative_residual"],
            "kcl_max_residual_A": last["kcl_max_residual_A"], "load_average": load}
    print(f"\ngrid {side} x {side}: {last['branches']:,} branches, {last['unknowns']:,} "
          f"unknowns, {ROUNDS} round(s), load average {load[0]:.1f} {load[1]:.1f} {load[2]:.1f}")
    print(f"  ohmgraph solve   median {a_median:7.2f} s  peak {a_peak / 1e9:5.2f} GB  "
          f"({last['method']}, {last['iterations']} iterations, relative residual "
          f"{last['relative_residual']:.1e})")
    if b_runs:
        best = [min(b, b1) for (b, _), (b1, _) in zip(b_runs, b1_runs)]
        b_median = statistics.median(s for s, _ in b_runs)
        b1_median = statistics.median(s for s, _ in b1_runs)
        b_peak = min(max(p for _, p in b_runs), max(p for _, p in b1_runs))
        ratio = statistics.median(a / b for (a, _), b in zip(a_runs, best))
        info.update(script_seconds=[s for s, _ in b_runs], script_median_s=b_median,
                    script_one_thread_seconds=[s for s, _ in b1_runs],
                    script_one_thread_median_s=b1_median, script_peak_bytes=b_peak,
                    ratio_median=ratio)
        print(f"  plain script     median {b_median:7.2f} s, BLAS on one thread "
              f"{b1_median:7.2f} s  peak {b_peak / 1e9:5.2f} GB")
        print(f"  ratio ohmgraph / faster script (median of rounds) {ratio:.2f} (goal <= 0.6); "
              f"peak memory ratio {a_peak / b_peak:.2f} (goal <= 1)")
    print("  stages (median s): " + ", ".join(f"{k} {v:.2f}" for k, v in stages.items()))
    print("  rounds (s): ohmgraph " + " ".join(f"{s:.2f}" for s, _ in a_runs)
          + (" | script " + " ".join(f"{s:.2f}" for s, _ in b_runs)
             + " | one thread " + " ".join(f"{s:.2f}" for s, _ in b1_runs) if b_runs else ""))
    if before_runs:
        before_stages = {stage: statistics.median(s["timings_s"][stage] for s in before_summaries)
                         for stage in before_summaries[0]["timings_s"]}
        before_median = statistics.median(s for s, _ in before_runs)
        before_peak = max(p for _, p in before_runs)
        info.update(before_median_s=before_median, before_peak_bytes=before_peak,
                    before_stages_median_s=before_stages)
        print(f"  before ({BEFORE}) median {before_median:7.2f} s  peak "
              f"{before_peak / 1e9:5.2f} GB; stages (median s): "
              + ", ".join(f"{k} {v:.2f}" for k, v in before_stages.items()))
    benchmark.extra_info.update(info)
