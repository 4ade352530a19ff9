"""Long queries tell you: the plan after a first timed solve, progress counts that add up to it,
a sketch size that follows the time budget, and messages only on a terminal."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import ohmgraph.io.progress as progress_module
from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.resistance import ResistanceSolver
from ohmgraph.engine.resistance.progress import first_then_blocks
from ohmgraph.engine.resistance.sketch import (MIN_BUDGET_SKETCH, budget_sketch_size,
                                               sketch_epsilon)
from ohmgraph.io.cli import main


class Recorder:
    """The two callbacks a query takes, recording what they receive."""

    def __init__(self):
        self.plans, self.counts = [], []

    def announce(self, plan):
        assert not self.counts, "the plan comes before any progress"
        self.plans.append(plan)

    def progress(self, count):
        self.counts.append(count)

    def check(self, solves):
        assert len(self.plans) == 1 and self.plans[0].solves == solves
        assert sum(self.counts) == solves and self.counts[0] == 1     # the timed first solve
        assert self.plans[0].seconds_per_solve > 0
        return self.plans[0]


def test_blocks_cover_the_range_once():
    parts = list(first_then_blocks(130, 64))
    assert [(p.start, p.stop) for p in parts] == [(0, 1), (1, 65), (65, 129), (129, 130)]
    assert list(first_then_blocks(0, 64)) == []


@pytest.mark.parametrize("method, path", [("amg-cg", "pair solves"), ("direct", "factor reach")])
def test_pair_batches_announce_their_total(method, path):
    solver = ResistanceSolver(grid2d(20, 20, 1.0), method=method)
    rng = np.random.default_rng(0)
    a, b = rng.integers(0, 400, (2, 150))
    record = Recorder()
    result = solver.pairs_by_index(a, b, progress=record.progress, announce=record.announce)
    distinct = np.unique(np.sort(np.stack([a, b]), axis=0)[:, a != b], axis=1).shape[1]
    assert result.method == path
    assert record.check(distinct).method == path


def test_terminal_reduction_announces_one_solve_per_terminal():
    solver = ResistanceSolver(grid2d(20, 20, 1.0), method="amg-cg")
    a, b = np.triu_indices(10, 1)
    terminals = np.arange(5, 15)                 # none of them the grounded corner
    record = Recorder()
    result = solver.pairs_by_index(terminals[a], terminals[b], record.progress, record.announce)
    assert result.method == "terminal reduction"
    record.check(10)


def test_whole_network_queries_announce_their_totals():
    solver = ResistanceSolver(grid2d(20, 20, 1.0))
    record = Recorder()
    solver.across_resistors(exact=True, progress=record.progress, announce=record.announce)
    record.check(399)                            # one solve per unknown
    record = Recorder()
    result = solver.across_resistors(exact=False, k=40, progress=record.progress,
                                     announce=record.announce)
    assert record.check(40).method == "sketch" and result.solves == 40
    record = Recorder()
    solver.kirchhoff_index(exact=True, progress=record.progress, announce=record.announce)
    record.check(400)                            # one per unknown, one for the weights
    record = Recorder()
    solver.kirchhoff_index(exact=False, samples=30, progress=record.progress,
                           announce=record.announce)
    record.check(30)


def test_budget_sketch_size_follows_the_budget():
    assert budget_sketch_size(60.0, 0.01) == 6000
    assert budget_sketch_size(120.0, 0.01) == 12000
    assert budget_sketch_size(1.0, 10.0) == MIN_BUDGET_SKETCH
    solver = ResistanceSolver(grid2d(20, 20, 1.0))
    record = Recorder()
    result = solver.across_resistors(exact=False, time_budget=0.05, progress=record.progress,
                                     announce=record.announce)
    plan = record.check(result.sketch_size)
    # the size is the budget over the timed rate, and the stated epsilon is that size's
    assert result.sketch_size == budget_sketch_size(0.05, plan.seconds_per_solve)
    assert result.epsilon_all == pytest.approx(sketch_epsilon(400, result.sketch_size))
    assert result.solves == result.sketch_size


@pytest.fixture
def lattice_file(tmp_path):
    net = grid2d(30, 30, 1.0)
    path = tmp_path / "lattice.csv"
    pd.DataFrame({"from": net.node_labels[net.from_node], "to": net.node_labels[net.to_node],
                  "value": net.value}).to_csv(path, index=False)
    return path


@pytest.fixture
def terminal(monkeypatch):
    """Pretend standard error is a terminal and every query is long enough to report."""
    monkeypatch.setattr(progress_module, "stderr_is_terminal", lambda: True)
    monkeypatch.setattr(progress_module, "QUIET_BELOW_SECONDS", 0.0)


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_messages_on_a_terminal(lattice_file, tmp_path, capsys, terminal):
    code, _, err = run(capsys, "resistance", lattice_file, "--across-resistors", "--estimate",
                       "--sketch-size", "40", "-o", tmp_path / "a.csv")
    assert code == 0 and "40 solves (sketch), about" in err
    code, out, err = run(capsys, "resistance", lattice_file, "--across-resistors", "--estimate",
                         "--time-budget", "0.2", "-o", tmp_path / "b.csv")
    assert code == 0
    assert "chosen to fit the time budget of 0.2 s" in err and "epsilon" in err
    assert "sketch of" in out and "epsilon" in out
    pairs = tmp_path / "pairs.csv"
    pairs.write_text("a,b\n" + "".join(f"0_{i},29_{i}\n" for i in range(30)))
    code, _, err = run(capsys, "resistance", lattice_file, "--pairs", pairs, "--method",
                       "amg-cg", "-o", tmp_path / "p.csv")
    assert code == 0 and "solves (" in err


def test_quiet_and_non_terminals_print_nothing(lattice_file, tmp_path, capsys, monkeypatch):
    argv = ["resistance", lattice_file, "--across-resistors", "--estimate", "--sketch-size", "40"]
    code, _, err = run(capsys, *argv, "-o", tmp_path / "a.csv")       # capsys: not a terminal
    assert code == 0 and err == ""
    monkeypatch.setattr(progress_module, "stderr_is_terminal", lambda: True)
    monkeypatch.setattr(progress_module, "QUIET_BELOW_SECONDS", 0.0)
    code, _, err = run(capsys, *argv, "--quiet", "-o", tmp_path / "b.csv")
    assert code == 0 and err == ""


def test_solve_names_its_stages_on_a_large_network_only(tmp_path, monkeypatch, capsys):
    """`solve` says what it is doing before each long stage (read, check, solve, store) when
    standard error is a terminal and the network has at least STAGE_UNKNOWNS nodes."""
    from ohmgraph.io.branch_table import write_branch_table

    monkeypatch.setattr(progress_module, "stderr_is_terminal", lambda: True)
    monkeypatch.setattr(progress_module, "STAGE_UNKNOWNS", 400)
    write_branch_table(tmp_path / "big.csv", grid2d(30, 30, pads=2, loads=5, seed=1))
    write_branch_table(tmp_path / "small.csv", grid2d(10, 10, pads=2, loads=5, seed=1))
    assert main(["solve", str(tmp_path / "big.csv"), "-o", str(tmp_path / "big.h5")]) == 0
    stages = [line for line in capsys.readouterr().err.splitlines()
              if line.startswith("ohmgraph solve: ")]
    assert [line.split(": ")[1].split()[0] for line in stages] == ["read", "checked", "solved"]
    assert stages[2].endswith(f"writing {tmp_path / 'big.h5'}")
    assert main(["solve", str(tmp_path / "small.csv"), "-o", str(tmp_path / "small.h5")]) == 0
    assert "ohmgraph solve:" not in capsys.readouterr().err
    assert main(["solve", str(tmp_path / "big.csv"), "-o", str(tmp_path / "q.h5"), "-q"]) == 0
    assert "ohmgraph solve:" not in capsys.readouterr().err


def test_reading_commands_name_their_stages_on_a_large_network(tmp_path, monkeypatch, capsys):
    """compare and diagnose say what they start (model, ranking) on a terminal for large
    networks, and nothing with --quiet."""
    from ohmgraph.io.branch_table import write_branch_table

    monkeypatch.setattr(progress_module, "stderr_is_terminal", lambda: True)
    monkeypatch.setattr(progress_module, "STAGE_UNKNOWNS", 400)
    write_branch_table(tmp_path / "net.csv", grid2d(30, 30, pads=2, loads=5, seed=1))
    (tmp_path / "m.csv").write_text("kind,a,b,value,accuracy\nV,3_4,,0.99,1%\nV,20_20,,0.9,1%\n")
    counted = []

    class Recorder:                     # stands in for tqdm: keeps the counter's updates
        def __init__(self, desc, **_):
            self.desc = desc

        def update(self, count):
            counted.append((self.desc, count))

        def close(self):
            pass

        @staticmethod
        def write(text, file):          # as tqdm.write, without bars to redraw
            print(text, file=file)

    monkeypatch.setattr(progress_module, "tqdm", Recorder)
    main(["diagnose", str(tmp_path / "net.csv"), str(tmp_path / "m.csv")])
    err = capsys.readouterr().err
    stages = [line for line in err.splitlines() if line.startswith("ohmgraph diagnose: ")]
    assert len(stages) == 2 and "2 reading(s) on 901 nodes" in stages[0]
    assert "ranking single faults" in stages[1]
    # the ranking's running count of solves (a bar without a total)
    assert counted and {desc for desc, _ in counted} == {"ranking"}
    assert sum(count for _, count in counted) > 0
    main(["compare", str(tmp_path / "net.csv"), str(tmp_path / "m.csv"), "--quiet"])
    assert "ohmgraph compare:" not in capsys.readouterr().err


@pytest.fixture
def forced_switch(monkeypatch):
    """``auto`` first chooses amg-cg while a factorisation is predicted free: every query of
    more than one right-hand side switches to direct after its first column."""
    import ohmgraph.engine.session as session_module
    import ohmgraph.engine.solvers.choice as choice_module
    from ohmgraph.engine.solvers.choice import Choice

    for name in ("ANALYSIS_SECONDS_PER_ENTRY", "FACTOR_SECONDS_PER_FLOP",
                 "FACTOR_SECONDS_PER_ENTRY", "SOLVE_SECONDS_PER_FACTOR_ENTRY",
                 "SOLVE_SECONDS_PER_UNKNOWN"):
        monkeypatch.setattr(choice_module, name, 0.0)
    real = session_module.choose
    monkeypatch.setattr(session_module, "choose", lambda *args, **kwargs: Choice(
        "amg-cg", "forced by the test", real(*args, **kwargs).predicted))


def test_a_switch_to_a_factorisation_is_said_on_a_terminal(lattice_file, tmp_path, capsys,
                                                           terminal, forced_switch):
    """When auto switches to direct during --pairs (here forced: the first choice made
    iterative, a factorisation predicted free), the terminal hears it once, after the plan of
    the whole batch, and the stored table names the back end that finished."""
    import json

    pairs = tmp_path / "pairs.csv"
    pairs.write_text("a,b\n" + "".join(f"0_{i},29_{i}\n" for i in range(30)))
    out = tmp_path / "p.csv"
    code, _, err = run(capsys, "resistance", lattice_file, "--pairs", pairs, "-o", out)
    assert code == 0, err
    lines = err.splitlines()
    switch = [k for k, line in enumerate(lines) if "switching to a factorisation" in line]
    plan = [k for k, line in enumerate(lines) if "30 solves (pair solves), about" in line]
    assert len(switch) == 1 and len(plan) == 1 and plan[0] < switch[0]
    assert "direct is predicted" in lines[switch[0]]
    stored = json.loads((tmp_path / "p.csv.provenance.json").read_text())["summary"]
    assert stored["solver_method"] == "direct"
    assert stored["solver_notes"].startswith("switched to direct after 1 of 30")


def test_diagnose_says_when_auto_switches_to_a_factorisation(tmp_path, monkeypatch, capsys,
                                                            forced_switch):
    """The fault ranking's sessions announce a mid-query switch on a terminal too (forced as in
    the --pairs test above)."""
    from ohmgraph.io.branch_table import write_branch_table

    monkeypatch.setattr(progress_module, "stderr_is_terminal", lambda: True)
    write_branch_table(tmp_path / "net.csv", grid2d(12, 12, pads=2, loads=5, seed=1))
    (tmp_path / "m.csv").write_text("kind,a,b,value,accuracy\nV,3_4,,0.99,1%\nV,10_10,,0.9,1%\n")
    assert main(["diagnose", str(tmp_path / "net.csv"), str(tmp_path / "m.csv")]) in (0, 1)
    err = capsys.readouterr().err
    assert "ohmgraph diagnose: switching to a factorisation for the remaining solves" in err
