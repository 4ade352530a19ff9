"""The HDF5 network file and the distributed solve (issue 11).

* reading the lattice as a CSV branch table against the HDF5 network file ``convert`` writes
  (``read_network``, best of three), and the ``convert`` run itself;
* ``ohmgraph solve NET.h5 -o OUT.h5`` end to end in fresh processes: one process (the engine's
  ``auto`` choice), and under ``mpiexec`` on 1 and 2 ranks with ``--method petsc``; per stage
  (the slowest rank's seconds), whole run and peak resident memory per rank (``/usr/bin/time``'s
  maximum resident set size);
* the largest node-voltage difference between the 2-rank and the single-process solution;
* ``ohmgraph resistance NET.h5 --pairs`` of ``OHMGRAPH_BENCH_PAIRS`` (default 100) random node
  pairs on 1 and 2 ranks, interleaved (1, 2, 1, 2), per stage, with the largest relative
  difference between the two runs' values.

Skipped without the MPI stack (``make mpi``). Numbers are printed and kept in ``extra_info``.
"""

from __future__ import annotations

import importlib.util
import json
import os
import re
import shutil
import subprocess
import sys
import time

import numpy as np
import pytest
from conftest import RTOL, SIZE

from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.cli import main
from ohmgraph.io.reader import read_network
from ohmgraph.io.store import read_solution

MPIEXEC = shutil.which("mpiexec")
pytestmark = pytest.mark.skipif(
    MPIEXEC is None or importlib.util.find_spec("petsc4py") is None,
    reason="MPI stack not installed: run 'make mpi'")
TIME = ["/usr/bin/time", "-f", "peak_kib %M"]


@pytest.fixture(scope="module")
def files(lattice, tmp_path_factory):
    folder = tmp_path_factory.mktemp("mpi")
    csv = folder / f"lattice{SIZE}.csv"
    write_branch_table(csv, lattice)
    start = time.perf_counter()
    assert main(["convert", str(csv), "-o", str(folder / "net.h5")]) == 0
    convert = time.perf_counter() - start
    return csv, folder / "net.h5", convert


def test_read_csv_against_hdf5(files, benchmark):
    csv, h5, convert = files
    seconds = {}
    for name, path in (("csv", csv), ("hdf5", h5)):
        best = float("inf")
        for _ in range(3):
            start = time.perf_counter()
            read_network(path)
            best = min(best, time.perf_counter() - start)
        seconds[name] = best
    benchmark.extra_info.update(read_csv_s=seconds["csv"], read_hdf5_s=seconds["hdf5"],
                                convert_s=convert, csv_mb=csv.stat().st_size / 1e6,
                                hdf5_mb=h5.stat().st_size / 1e6)
    print(f"\nread CSV ({csv.stat().st_size / 1e6:.0f} MB) {seconds['csv']:.2f} s, HDF5 network "
          f"({h5.stat().st_size / 1e6:.0f} MB) {seconds['hdf5']:.2f} s: "
          f"{seconds['csv'] / seconds['hdf5']:.1f}x; convert {convert:.1f} s")
    benchmark.pedantic(read_network, args=(h5,), rounds=1, iterations=1)


def run(prefix, h5, output, *options) -> tuple[dict, float, list]:
    """One ``ohmgraph solve --json`` run; its summary, wall seconds and peak KiB per process."""
    start = time.perf_counter()
    child = subprocess.run([*prefix, *TIME, sys.executable, "-m", "ohmgraph.io.cli", "solve",
                            str(h5), "-o", str(output), "--force", "--json", "--rtol", str(RTOL),
                            *options], capture_output=True, text=True)
    seconds = time.perf_counter() - start
    if child.returncode != 0:
        raise RuntimeError(child.stderr)
    peaks = [int(k) for k in re.findall(r"peak_kib (\d+)", child.stderr)]
    return json.loads(child.stdout), seconds, peaks


def test_one_process_against_one_and_two_ranks(files, benchmark, tmp_path):
    _, h5, _ = files
    mpi = [MPIEXEC, "--allow-run-as-root", "--oversubscribe", "-n"]
    runs = {"single": run([], h5, tmp_path / "single.h5"),
            "petsc-1": run([*mpi, "1"], h5, tmp_path / "r1.h5", "--method", "petsc"),
            "petsc-2": run([*mpi, "2"], h5, tmp_path / "r2.h5")}
    for name, (summary, seconds, peaks) in runs.items():
        stages = "  ".join(f"{stage} {value:.2f}" for stage, value in
                           summary["timings_s"].items())
        print(f"\n{name}: {stages}  whole {seconds:.2f} s, peak per process "
              f"{[round(k / 2**20, 2) for k in peaks]} GB, {summary['iterations']} iterations, "
              f"residual {summary['relative_residual']:.2g}")
        benchmark.extra_info[name] = {"timings_s": summary["timings_s"], "whole_s": seconds,
                                      "peak_gb": [k / 2**20 for k in peaks],
                                      "iterations": summary["iterations"]}
    single = read_solution(tmp_path / "single.h5").node_voltage
    two = read_solution(tmp_path / "r2.h5").node_voltage
    difference = float(np.abs(single - two).max() / np.abs(single).max())
    benchmark.extra_info["max_dv_over_max_v"] = difference
    print(f"max|dV| / max|V| between 2 ranks and one process: {difference:.2g}")
    benchmark.pedantic(lambda: None, rounds=1, iterations=1)


PAIRS = int(os.environ.get("OHMGRAPH_BENCH_PAIRS", "100"))


def test_pairs_on_one_and_two_ranks(files, benchmark, tmp_path):
    import h5py
    import pandas as pd

    _, h5, _ = files
    with h5py.File(h5, "r") as stored:
        labels = stored["nodes/label"][...].astype(str)
    ends = np.random.default_rng(7).integers(0, labels.size, (PAIRS, 2))
    pd.DataFrame({"a": labels[ends[:, 0]], "b": labels[ends[:, 1]]}).to_csv(
        tmp_path / "pairs.csv", index=False)
    found = {}
    for turn, ranks in enumerate((1, 2, 1, 2)):
        output = tmp_path / f"r{ranks}_{turn}.h5"
        start = time.perf_counter()
        child = subprocess.run([MPIEXEC, "--allow-run-as-root", "--oversubscribe", "-n",
                                str(ranks), *TIME, sys.executable, "-m", "ohmgraph.io.cli",
                                "resistance", str(h5), "--pairs", str(tmp_path / "pairs.csv"),
                                "-o", str(output), "--method", "petsc", "--json"],
                               capture_output=True, text=True)
        seconds = time.perf_counter() - start
        if child.returncode != 0:
            raise RuntimeError(child.stderr)
        summary = json.loads(child.stdout)
        peaks = [int(k) / 2**20 for k in re.findall(r"peak_kib (\d+)", child.stderr)]
        with h5py.File(output, "r") as result:
            found[ranks] = result["resistance/ohms"][...]
        timings = summary["solver"]["timings_s"]
        print(f"\n{ranks} rank(s), {PAIRS} pairs: "
              + "  ".join(f"{stage} {value:.2f}" for stage, value in timings.items())
              + f"  whole {seconds:.1f} s, peak per process {[round(p, 2) for p in peaks]} GB, "
              f"max accuracy {summary['max_accuracy']:.2g}, load {os.getloadavg()[0]:.1f}")
        benchmark.extra_info[f"ranks{ranks}_turn{turn}"] = {
            "timings_s": timings, "whole_s": seconds, "peak_gb": peaks,
            "load_average": os.getloadavg()[0]}
    difference = float(np.max(np.abs(found[1] - found[2]) / found[1]))
    benchmark.extra_info["max_relative_difference"] = difference
    print(f"largest relative difference between 1 and 2 ranks: {difference:.2g}")
    benchmark.pedantic(lambda: None, rounds=1, iterations=1)
