"""How long ``ohmgraph solve`` takes to stop after SIGINT during its solver stage (issue 12).

A ``solve --method direct`` of the lattice (``OHMGRAPH_BENCH_SIZE``, default 1000; 700 gives a
SuperLU factorisation of a few seconds) is started with ``OHMGRAPH_TEST_STAGES`` (it reports
its stages on standard error); ``DELAY`` seconds after it reports the ``solve`` stage, that is
inside the factorisation, it gets SIGINT. The latency is the time from the signal to the end of
the process; the exit code (130) and the empty folder are checked too. Compare the latency with
the set-up time of an uninterrupted run (printed beside it): a signal handled only when the
factorisation returns waits for the rest of it.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import pytest
from conftest import SIZE, supplied_lattice

from ohmgraph.io.branch_table import write_branch_table

DELAY = 1.0


@pytest.fixture(scope="module")
def lattice_csv(tmp_path_factory):
    folder = tmp_path_factory.mktemp("interrupts")
    write_branch_table(folder / "grid.csv", supplied_lattice(SIZE))
    return folder


def _interrupted(folder) -> tuple[float, int, list]:
    """Latency (s) from SIGINT DELAY seconds into the solve stage to the process's end."""
    env = {**os.environ, "OHMGRAPH_TEST_STAGES": "1"}
    process = subprocess.Popen([sys.executable, "-m", "ohmgraph.io.cli", "solve", "grid.csv",
                                "-o", "out.h5", "--method", "direct"], cwd=folder, env=env,
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    for line in process.stderr:
        if line.strip() == "ohmgraph: stage solve":
            break
    time.sleep(DELAY)
    sent = time.perf_counter()
    process.send_signal(signal.SIGINT)
    process.wait(timeout=600)
    latency = time.perf_counter() - sent
    process.stderr.close()
    return latency, process.returncode, sorted(p.name for p in folder.iterdir())


def test_interrupt_latency_during_factorisation(lattice_csv, benchmark):
    from ohmgraph.io.cli import main

    start = time.perf_counter()
    assert main(["solve", str(lattice_csv / "grid.csv"), "-o", str(lattice_csv / "full.h5"),
                 "--method", "direct", "--json", "--quiet"]) == 0
    whole = time.perf_counter() - start
    (lattice_csv / "full.h5").unlink()
    latencies = []
    for _ in range(3):
        latency, code, left = _interrupted(lattice_csv)
        assert code == 130 and left == ["grid.csv"]
        latencies.append(latency)
    benchmark.extra_info.update({"latencies_s": latencies, "uninterrupted_run_s": whole,
                                 "load_average": os.getloadavg()[0]})
    print(f"\n{SIZE} x {SIZE} direct: SIGINT {DELAY} s into the solve stage ended the run after "
          f"{', '.join(f'{x:.2f}' for x in latencies)} s (uninterrupted run {whole:.1f} s, "
          f"load {os.getloadavg()[0]:.1f})")
    benchmark.pedantic(lambda: None, rounds=1)
