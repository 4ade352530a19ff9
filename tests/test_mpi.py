"""The distributed solve: ``mpiexec -n 2 ohmgraph solve NET.h5`` against the single-process
engine and the independent MNA reference, and launches that must fail cleanly.

Every run here is a real two-process launch (``mpiexec --allow-run-as-root --oversubscribe -n
2``). The tests skip, saying why, when the MPI stack (``make mpi``) is not installed.
"""

from __future__ import annotations

import importlib.util
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from ohmgraph.engine import solve
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.cli import main
from ohmgraph.io.errors import EXIT_BAD_INPUT, EXIT_OUTPUT_REFUSED
from ohmgraph.io.reader import read_network
from ohmgraph.io.store import read_solution
from reference_mna import mna_solve

MPIEXEC = shutil.which("mpiexec")
STACK = MPIEXEC is not None and all(importlib.util.find_spec(name) is not None
                                    for name in ("mpi4py", "petsc4py"))
pytestmark = pytest.mark.skipif(not STACK, reason="MPI stack not installed (mpiexec, mpi4py, "
                                                  "petsc4py): run 'make mpi'; MPI tests skipped")
PG1 = Path(__file__).resolve().parents[1].parent / "shared/validation/pg1.csv.gz"
RTOL = 1e-12


def mpirun(ranks: int, *argv, cwd, env=None) -> subprocess.CompletedProcess:
    """``ohmgraph ARGV`` on ``ranks`` MPI processes.

    The environment is passed explicitly from ``os.environ``: once a test here has initialised
    PETSc in this process, MPI has added its own variables to the process environment, and an
    ``mpiexec`` that inherits them takes itself for part of that run (it exits 1, silently).
    """
    command = [MPIEXEC, "--allow-run-as-root", "--oversubscribe", "-n", str(ranks),
               sys.executable, "-m", "ohmgraph.io.cli", *map(str, argv)]
    return subprocess.run(command, cwd=cwd, capture_output=True, text=True, timeout=300,
                          env={**os.environ, **(env or {})})


def converted(tmp_path, net, name="net"):
    """``net`` written as CSV and converted to an HDF5 network file.

    Returns the .h5 path and the network as read back (nodes in the file's order).
    """
    csv = tmp_path / f"{name}.csv"
    write_branch_table(csv, net)
    assert main(["convert", str(csv), "-o", str(tmp_path / f"{name}.h5")]) == 0
    return tmp_path / f"{name}.h5", read_network(csv)


@pytest.mark.parametrize("seed", [3, 11])
def test_two_ranks_match_the_engine_and_mna(tmp_path, make_network, seed, capsys):
    h5, net = converted(tmp_path, make_network(seed, n_nodes=400, extra_resistors=600,
                                               voltage_sources=12, ideal_connections=9,
                                               current_sources=30))
    done = mpirun(2, "solve", h5, "-o", "out.h5", "--rtol", RTOL, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    stored = read_solution(tmp_path / "out.h5")
    assert stored.attrs["method"] == "petsc" and stored.attrs["ranks"] == 2
    assert stored.attrs["relative_residual"] <= RTOL
    # The independent reference: full MNA by spsolve (tests/reference_mna.py).
    reference = mna_solve(net)
    scale = np.abs(reference.node_voltage).max()
    np.testing.assert_allclose(stored.node_voltage, reference.node_voltage, rtol=0,
                               atol=1e-9 * scale)
    np.testing.assert_allclose(stored.branch_current[reference.constrained_branches],
                               reference.constrained_current, rtol=0, atol=1e-8)
    # The single-process engine, branch by branch.
    single = solve(net, method="direct", rtol=RTOL)
    np.testing.assert_allclose(stored.branch_current, single.branch_current, rtol=0, atol=1e-8)
    np.testing.assert_allclose(stored.branch_power, single.branch_power, rtol=0,
                               atol=1e-8 * np.abs(single.branch_power).max())
    np.testing.assert_array_equal(stored.current_determined, single.current_determined)
    np.testing.assert_array_equal(stored.network.branch_names, net.branch_names)
    assert stored.attrs["kcl_max_residual"] < 1e-8
    assert abs(stored.attrs["power_balance"]) < 1e-9 * np.abs(single.branch_power).sum()
    assert stored.attrs["power_dissipated"] == pytest.approx(single.power_dissipated, rel=1e-9)


def test_one_and_two_ranks_agree_on_a_loaded_grid(tmp_path, capsys):
    assert main(["generate", "grid2d", "60", "60", "--pads", "6", "--loads", "80", "-o",
                 str(tmp_path / "grid.csv")]) == 0
    assert main(["convert", str(tmp_path / "grid.csv"), "-o", str(tmp_path / "grid.h5")]) == 0
    for ranks in (1, 2):
        done = mpirun(ranks, "solve", "grid.h5", "-o", f"r{ranks}.h5", "--method", "petsc",
                      "--rtol", RTOL, cwd=tmp_path)
        assert done.returncode == 0, done.stderr
    one, two = read_solution(tmp_path / "r1.h5"), read_solution(tmp_path / "r2.h5")
    single = solve(read_network(tmp_path / "grid.csv"), method="direct")
    scale = np.abs(single.node_voltage).max()
    for stored in (one, two):
        np.testing.assert_allclose(stored.node_voltage, single.node_voltage, rtol=0,
                                   atol=1e-9 * scale)
    assert (one.attrs["ranks"], two.attrs["ranks"]) == (1, 2)


def test_pg1_two_ranks_within_1e_9_of_the_single_process_solve(tmp_path, capsys):
    if not PG1.exists():
        pytest.skip(f"open benchmark not available: {PG1}")
    assert main(["convert", str(PG1), "-o", str(tmp_path / "pg1.h5")]) == 0
    done = mpirun(2, "solve", "pg1.h5", "-o", "out.h5", "--rtol", RTOL, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    stored = read_solution(tmp_path / "out.h5")
    # IBM power grid benchmark pg1 (Nassif, ASP-DAC 2008; ../shared/validation), against the
    # single-process solve at the same tolerance: issue 11's target max|dV| <= 1e-9 max|V|.
    single = solve(read_network(PG1), method="direct", rtol=RTOL)
    scale = np.abs(single.node_voltage).max()
    assert np.abs(stored.node_voltage - single.node_voltage).max() <= 1e-9 * scale
    assert stored.attrs["kcl_max_residual"] < 1e-8


def test_petsc_back_end_on_one_process_matches_mna(make_network):
    from ohmgraph.engine.solvers import SOLVERS

    assert "petsc" in SOLVERS
    net = make_network(5)
    solution = solve(net, method="petsc", rtol=RTOL)
    reference = mna_solve(net)  # independent MNA, tests/reference_mna.py
    assert solution.method == "petsc"
    np.testing.assert_allclose(solution.node_voltage, reference.node_voltage, rtol=0,
                               atol=1e-9 * np.abs(reference.node_voltage).max())


def _refused(done, tmp_path, before, code, message):
    assert done.returncode == code, done.stdout + done.stderr
    assert done.stderr.count(message) == 1, done.stderr          # one message, from rank 0
    assert "Traceback" not in done.stderr + done.stdout
    assert sorted(p.name for p in tmp_path.iterdir()) == before    # no output, no .tmp


@pytest.fixture
def small(tmp_path, make_network, capsys):
    converted(tmp_path, make_network(2))
    (tmp_path / "taken.h5").write_bytes(b"")
    return tmp_path, sorted(p.name for p in tmp_path.iterdir())


@pytest.mark.parametrize("argv, code, message", [
    (["solve", "net.csv", "-o", "out.h5"], EXIT_BAD_INPUT, "reads an HDF5 network file"),
    (["solve", "missing.h5", "-o", "out.h5"], EXIT_BAD_INPUT, "missing.h5: no such file"),
    (["solve", "net.h5", "-o", "out.h5", "--method", "direct"], EXIT_BAD_INPUT,
     "solves with --method petsc"),
    (["solve", "net.h5", "-o", "out.h5", "--ground", "7"], EXIT_BAD_INPUT, "convert again"),
    (["solve", "net.h5", "-o", "taken.h5"], EXIT_OUTPUT_REFUSED, "already exists"),
    (["solve", "net.h5", "-o", "nowhere/out.h5"], EXIT_OUTPUT_REFUSED, "does not exist"),
    (["solve", "net.h5", "-o", "net.h5", "--force"], EXIT_BAD_INPUT, "is also the input file"),
])
def test_bad_launches_fail_on_every_rank_with_one_message(small, argv, code, message):
    tmp_path, before = small
    _refused(mpirun(2, *argv, cwd=tmp_path), tmp_path, before, code, message)


def test_missing_stack_is_reported_not_raised(small):
    tmp_path, before = small
    hidden = tmp_path.parent / "hide_mpi4py"
    (hidden / "mpi4py").mkdir(parents=True, exist_ok=True)
    (hidden / "mpi4py" / "__init__.py").write_text("raise ImportError('mpi4py hidden')\n")
    done = mpirun(2, "solve", "net.h5", "-o", "out.h5", cwd=tmp_path,
                  env={"PYTHONPATH": str(hidden)})
    _refused(done, tmp_path, before, EXIT_BAD_INPUT, "make mpi")


def test_petsc_pair_resistances_match_networkx(make_network):
    """Many pairs on the PETSc back end (one process) against networkx's
    ``resistance_distance`` (an independent pseudo-inverse computation)."""
    import networkx as nx

    from ohmgraph.engine.resistance import ResistanceSolver

    from ohmgraph.engine.network import RESISTOR, Network

    full = make_network(6)
    keep = (full.kind == RESISTOR) & (full.value > 0)    # the random spanning tree stays
    net = Network(full.node_labels, full.branch_names[keep], full.kind[keep],
                  full.from_node[keep], full.to_node[keep], full.value[keep], full.reference)
    solver = ResistanceSolver(net, method="petsc", rtol=RTOL)
    rng = np.random.default_rng(0)
    a, b = rng.choice(net.n_nodes, 12, replace=False).reshape(2, 6)
    got = solver.pairs_by_index(a, b)
    graph = nx.Graph()
    for f, t, ohms in zip(net.from_node, net.to_node, net.value):
        if f != t:
            old = graph.get_edge_data(f, t, {"g": 0.0})["g"]
            graph.add_edge(f, t, g=old + 1.0 / ohms)
    assert solver.stats.method == "petsc"
    for k in range(a.size):
        expected = nx.resistance_distance(graph, int(a[k]), int(b[k]), weight="g",
                                          invert_weight=False)
        assert got.ohms[k] == pytest.approx(expected, rel=1e-8)


def test_two_ranks_without_voltage_sources(tmp_path, capsys):
    """No contraction forest at all: a current source into a resistor ladder, against the
    independent MNA reference (tests/reference_mna.py)."""
    rows = ["name,kind,from,to,value", "J,I,0,1,0.25"]
    rows += [f"s{k},R,{k},{k + 1},{1 + k % 3}" for k in range(1, 40)]
    rows += [f"p{k},R,{k},0,{10 + k}" for k in range(1, 41)]
    (tmp_path / "ladder.csv").write_text("\n".join(rows) + "\n")
    assert main(["convert", str(tmp_path / "ladder.csv"), "-o", str(tmp_path / "ladder.h5")]) == 0
    done = mpirun(2, "solve", "ladder.h5", "-o", "out.h5", "--rtol", RTOL, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    stored = read_solution(tmp_path / "out.h5")
    reference = mna_solve(read_network(tmp_path / "ladder.csv"))
    np.testing.assert_allclose(stored.node_voltage, reference.node_voltage, rtol=0,
                               atol=1e-9 * np.abs(reference.node_voltage).max())


def test_gamg_takes_over_where_petsc_has_no_hypre(make_network, monkeypatch):
    """Where PETSc was built without hypre the back end uses GAMG; checked against the
    independent MNA reference (tests/reference_mna.py)."""
    from petsc4py import PETSc

    import ohmgraph.engine.solvers.petsc as backend

    class WithoutHypre:
        class Sys:
            @staticmethod
            def hasExternalPackage(name):
                return False

        def __getattr__(self, name):
            return getattr(PETSc, name)

    monkeypatch.setattr(backend, "petsc_module", WithoutHypre)
    net = make_network(8)
    solution = solve(net, method="petsc", rtol=1e-10)
    assert solution.session.back_end.preconditioner_name == "gamg"
    reference = mna_solve(net)
    np.testing.assert_allclose(solution.node_voltage, reference.node_voltage, rtol=0,
                               atol=1e-8 * np.abs(reference.node_voltage).max())


def test_a_process_that_cannot_open_the_file_stops_every_process(small):
    """Process 1 runs in a folder without the network file (as on a node that does not mount
    the shared file system): one message naming it, exit 2 everywhere, no output anywhere."""
    tmp_path, before = small
    (tmp_path / "elsewhere").mkdir()
    program = [sys.executable, "-m", "ohmgraph.io.cli", "solve", "net.h5", "-o", "out.h5"]
    done = subprocess.run([MPIEXEC, "--allow-run-as-root", "--oversubscribe",
                           "-n", "1", "-wdir", str(tmp_path), *program, ":",
                           "-n", "1", "-wdir", str(tmp_path / "elsewhere"), *program],
                          capture_output=True, text=True, timeout=300, env=dict(os.environ))
    assert done.returncode == EXIT_BAD_INPUT, done.stderr
    assert done.stderr.count("net.h5: no such file (on process 1 of 2)") == 1, done.stderr
    assert "Traceback" not in done.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([*before, "elsewhere"])
    assert not any((tmp_path / "elsewhere").iterdir())
