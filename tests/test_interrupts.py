"""SIGINT and SIGTERM sent to running ``ohmgraph solve`` processes at every stage.

Each run reports its stages on standard error and, for the paused cases, waits at one stage
(``tests/solve_process.py``), so the signal arrives at a known point without any timing guess.
Exit codes 128 + signal number (130, 143) are the shell's convention (POSIX, "Shell Command
Language", 2.8.2 Exit Status for Commands).
"""

from __future__ import annotations

import os
import signal

import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.io.branch_table import write_branch_table

from solve_process import TIMEOUT, finish, messages, start, start_solve, wait_for_stage

DIVIDER = ("name,kind,from,to,value\nsupply,V,top,0,10\nr_upper,R,top,mid,1000\n"
           "r_lower,R,mid,0,3000\nload,I,mid,0,0.002\n")


def interrupt_at(folder, network, stage, signum, pause=True):
    process = start_solve(folder, network, pause=stage if pause else None)
    lines = wait_for_stage(process, stage)
    process.send_signal(signum)
    process.wait(timeout=TIMEOUT)          # still paused: standard input stays open till now
    code, _, err = finish(process, lines)
    return code, err


@pytest.fixture
def divider(tmp_path):
    (tmp_path / "net.csv").write_text(DIVIDER)
    return tmp_path


CASES = [("start", signal.SIGTERM), ("start", signal.SIGINT), ("read", signal.SIGINT), ("check", signal.SIGTERM), ("solve", signal.SIGINT),
         ("store", signal.SIGTERM), ("store", signal.SIGINT), ("publish", signal.SIGINT),
         ("published", signal.SIGTERM)]


@pytest.mark.parametrize("stage, signum", CASES, ids=[f"{s}-{n.name}" for s, n in CASES])
def test_a_signal_at_any_stage_leaves_nothing(divider, stage, signum):
    code, err = interrupt_at(divider, "net.csv", stage, signum)
    assert code == 128 + signum, err
    command = "ohmgraph" if stage == "start" else "ohmgraph solve"    # before parsing: no name
    assert messages(err) == [f"{command}: interrupted by {signum.name}; no output was written"]
    # the store stage had a partial temporary file, 'published' had the finished output
    assert sorted(p.name for p in divider.iterdir()) == ["net.csv"]
    assert (divider / "net.csv").read_text() == DIVIDER


@pytest.fixture(scope="module")
def grid(tmp_path_factory):
    folder = tmp_path_factory.mktemp("grid")
    write_branch_table(folder / "grid.csv", grid2d(400, 400, pads=4, loads=40, seed=1))
    return folder


@pytest.mark.parametrize("stage, signum", [("check", signal.SIGINT), ("solve", signal.SIGTERM)])
def test_a_signal_during_real_work_leaves_nothing(grid, tmp_path, stage, signum):
    """No pause: the signal lands wherever the 400 x 400 solve happens to be."""
    os.link(grid / "grid.csv", tmp_path / "grid.csv")
    code, err = interrupt_at(tmp_path, "grid.csv", stage, signum, pause=False)
    assert code == 128 + signum, err
    assert "Traceback" not in err
    assert err.splitlines()[-1] == (f"ohmgraph solve: interrupted by {signum.name}; "
                                    "no output was written")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["grid.csv"]


@pytest.mark.parametrize("argv, signum", [
    (["generate", "grid2d", "50", "50", "-o", "grid.csv.gz"], signal.SIGTERM),
    (["compare", "net.csv", "meas.csv", "-o", "sol.h5", "--append"], signal.SIGINT),
], ids=["generate", "compare-append"])
def test_other_commands_leave_nothing_or_the_original(divider, argv, signum):
    """Paused with the finished temporary file; ``--append`` must leave the original intact."""
    (divider / "meas.csv").write_text("kind,a,b,value,accuracy\nV,mid,,6,1%\n")
    solve = start_solve(divider, "net.csv", output="sol.h5")
    assert finish(solve)[0] == 0
    before = {p.name: p.read_bytes() for p in divider.iterdir()}
    process = start(divider, argv, pause="publish")
    lines = wait_for_stage(process, "publish")
    process.send_signal(signum)
    process.wait(timeout=TIMEOUT)
    code, _, err = finish(process, lines)
    assert code == 128 + signum, err
    assert messages(err) == [f"ohmgraph {argv[0]}: interrupted by {signum.name}; "
                             "no output was written"]
    assert {p.name: p.read_bytes() for p in divider.iterdir()} == before


def test_a_signal_ends_the_wait_for_a_worker_at_once():
    """engine/solvers/base.py: in_worker — the main thread acts on SIGINT while the worker is
    still busy (here: waiting on an event that only the test sets afterwards)."""
    import threading

    from ohmgraph.engine.solvers.base import in_worker, workers_unfinished

    release, done = threading.Event(), threading.Event()

    def busy():
        release.wait(60)
        done.set()
        return 7

    assert in_worker(lambda: 5) == 5
    with pytest.raises(ZeroDivisionError):
        in_worker(lambda: 1 / 0)
    timer = threading.Timer(0.2, os.kill, (os.getpid(), signal.SIGINT))
    timer.start()
    with pytest.raises(KeyboardInterrupt):
        in_worker(busy)
    assert not done.is_set() and workers_unfinished()
    release.set()
    assert done.wait(60)
    for _ in range(100):                 # the worker's last step follows done.set()
        if not workers_unfinished():
            break
        threading.Event().wait(0.05)
    assert not workers_unfinished()


def test_a_signal_while_a_kernel_loads_is_held_then_ends_the_next_wait():
    """A signal that arrives while the main thread holds numba's compiler lock or llvmlite's
    library lock is only recorded (an exception there can leave the lock held, and a solver
    thread loading a kernel then waits for ever); the next wait for a worker ends on it."""
    import threading
    import time

    import numba.core.compiler_lock as compiler_lock
    from llvmlite.binding import ffi

    from ohmgraph.engine.solvers import base
    from ohmgraph.io import interrupts

    for lock in (compiler_lock.global_compiler_lock, ffi.lib._lock):
        with interrupts.handling():
            interrupts.connect_workers()
            with lock:
                os.kill(os.getpid(), signal.SIGINT)
                time.sleep(0.05)                 # the handler runs here, and raises nothing
                assert interrupts.received() is not None
            release = threading.Event()
            start = time.perf_counter()
            with pytest.raises(KeyboardInterrupt):
                base.in_worker(release.wait, 30)
            assert time.perf_counter() - start < 5       # one poll, not the worker's 30 s
            release.set()
            assert interrupts.pending() is None          # handed out once
        assert base.interrupt_check is None              # disconnected with the handlers


def test_an_interrupt_handed_out_by_pending_does_not_come_back_in_clean_up():
    """After the wait raised it, clean-up code under ``deferred()`` runs to its end (as after
    the handler's own raise), inside the run and after it."""
    import time

    import numba.core.compiler_lock as compiler_lock

    from ohmgraph.io import interrupts

    with interrupts.handling():
        with compiler_lock.global_compiler_lock:
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.05)                      # the handler runs here and only records it
        assert isinstance(interrupts.pending(), interrupts.Interrupted)
        with interrupts.deferred():
            pass                                  # no second raise here
    with interrupts.deferred():
        pass                                      # nor after the run
