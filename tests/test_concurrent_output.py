"""Two ``ohmgraph solve`` runs creating the same output file at the same time.

Without ``--force`` the finished file is published by a hard link, which fails when the name
exists (POSIX ``link()``: EEXIST), so exactly one run succeeds and the other is refused with
exit code 3. With ``--force`` it is renamed into place (POSIX ``rename()`` replaces the name
atomically), so the file is wholly one run's.
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

import numpy as np
import pytest

from ohmgraph.io.cli import main
from ohmgraph.io.errors import EXIT_OK, EXIT_OUTPUT_REFUSED
from ohmgraph.io.store import file_sha256, read_solution

from solve_process import finish, messages, release, start_solve, wait_for_stage


def divider(volts: float) -> str:
    return (f"name,kind,from,to,value\nsupply,V,top,0,{volts}\nr_upper,R,top,mid,1000\n"
            "r_lower,R,mid,0,3000\n")


@pytest.fixture
def folder(tmp_path):
    (tmp_path / "a.csv").write_text(divider(10))
    (tmp_path / "b.csv").write_text(divider(20))
    return tmp_path


def race(folder, pause: bool, force: bool = False):
    """Start two runs; with ``pause`` both wait with a finished temporary file, then go."""
    runs = [start_solve(folder, name, pause="publish" if pause else None, force=force)
            for name in ("a.csv", "b.csv")]
    lines = [wait_for_stage(run, "publish") if pause else [] for run in runs]
    for run in runs:                     # release both, as close together as possible
        release(run)
    return [finish(run, read) for run, read in zip(runs, lines)]


def assert_one_winner(folder, results):
    codes = sorted(code for code, _, _ in results)
    assert codes == [EXIT_OK, EXIT_OUTPUT_REFUSED], results
    loser = next(err for code, _, err in results if code == EXIT_OUTPUT_REFUSED)
    assert len(messages(loser)) == 1 and "out.h5: already exists" in loser
    assert sorted(p.name for p in folder.iterdir()) == ["a.csv", "b.csv", "out.h5"]
    winner = "a.csv" if results[0][0] == EXIT_OK else "b.csv"
    assert read_solution(folder / "out.h5").attrs["input_sha256"] == file_sha256(folder / winner)


def test_two_runs_publishing_together_one_wins(folder):
    """Both hold a finished file before either publishes: the link decides."""
    results = race(folder, pause=True)
    assert_one_winner(folder, results)
    loser = next(err for code, _, err in results if code == EXIT_OUTPUT_REFUSED)
    assert "another run created it while this one was working" in loser


def test_two_runs_started_together_one_wins(folder):
    assert_one_winner(folder, race(folder, pause=False))


def test_with_force_the_file_is_wholly_one_runs(folder):
    results = race(folder, pause=True, force=True)
    assert [code for code, _, _ in results] == [EXIT_OK, EXIT_OK], results
    assert sorted(p.name for p in folder.iterdir()) == ["a.csv", "b.csv", "out.h5"]
    stored = read_solution(folder / "out.h5")
    source = {file_sha256(folder / name): volts for name, volts in (("a.csv", 10), ("b.csv", 20))}
    volts = source[stored.attrs["input_sha256"]]
    # the divider by hand (common practice): V(mid) = volts * 3000 / 4000
    labels = stored.network.node_labels.tolist()
    assert stored.node_voltage[labels.index("mid")] == pytest.approx(volts * 0.75, rel=1e-12)
    assert np.array_equal(stored.network.value, [volts, 1000, 3000])


def test_without_hard_links_the_name_is_claimed_exclusively(folder, monkeypatch, capsys):
    """A file system without hard links (link() fails with EPERM, as on FAT; Linux link(2))."""
    def no_link(source, target):
        raise PermissionError(errno.EPERM, "Operation not permitted")
    monkeypatch.setattr(os, "link", no_link)
    out = folder / "out.h5"
    assert main(["solve", str(folder / "a.csv"), "-o", str(out)]) == EXIT_OK
    assert read_solution(out).attrs["input_sha256"] == file_sha256(folder / "a.csv")
    # the name taken meanwhile (after the early check): refused, and the file is untouched
    for module in ("ohmgraph.io.atomic", "ohmgraph.io.commands.solve"):
        monkeypatch.setattr(f"{module}.refuse_existing", lambda path, force: Path(path))
    before = out.read_bytes()
    assert main(["solve", str(folder / "b.csv"), "-o", str(out)]) == EXIT_OUTPUT_REFUSED
    assert "another run created it" in capsys.readouterr().err
    assert out.read_bytes() == before
    assert sorted(p.name for p in folder.iterdir()) == ["a.csv", "b.csv", "out.h5"]


def test_two_appends_at_once_both_land(folder):
    """Two runs adding different groups to one solution file: the second waits for the first's
    lock (io/atomic.py: exclusive), reads the file the first published and adds to it."""
    from ohmgraph.io.result_store import read_results
    from solve_process import start

    assert finish(start_solve(folder, "a.csv"))[0] == EXIT_OK
    (folder / "m.csv").write_text("kind,a,b,value,accuracy\nV,mid,,7.5,1%\n")
    first = start(folder, ["compare", "a.csv", "m.csv", "-o", "out.h5", "--append"],
                  pause="publish")
    lines = wait_for_stage(first, "publish")          # holds the lock with its finished copy
    second = start(folder, ["diagnose", "a.csv", "m.csv", "-o", "out.h5", "--append"])
    waited = wait_for_stage(second, "locked-out")
    release(first)
    results = [finish(first, lines), finish(second, waited)]
    assert [code for code, _, _ in results] == [EXIT_OK, EXIT_OK], results
    assert sorted(p.name for p in folder.iterdir()) == ["a.csv", "b.csv", "m.csv", "out.h5"]
    solution = read_solution(folder / "out.h5")            # checks the file's checksums
    assert solution.attrs["input_sha256"] == file_sha256(folder / "a.csv")
    assert read_results(folder / "out.h5", "comparison")[0]["status"].tolist() == ["pass"]
    assert read_results(folder / "out.h5", "diagnosis")[0]


def test_a_killed_append_does_not_block_the_next(folder):
    """The lock dies with its process (flock): a SIGKILLed append leaves at most an unlocked
    lock file, and the next append goes ahead and removes it."""
    import signal

    from ohmgraph.io.result_store import read_results
    from solve_process import start

    assert finish(start_solve(folder, "a.csv"))[0] == EXIT_OK
    (folder / "m.csv").write_text("kind,a,b,value,accuracy\nV,mid,,7.5,1%\n")
    argv = ["compare", "a.csv", "m.csv", "-o", "out.h5", "--append"]
    killed = start(folder, argv, pause="publish")
    wait_for_stage(killed, "publish")
    killed.send_signal(signal.SIGKILL)
    killed.wait(timeout=60)
    killed.watchdog.cancel()
    assert (folder / ".out.h5.lock").exists()
    for leftover in folder.glob(".out.h5.*.tmp"):      # SIGKILL leaves its temporary file
        leftover.unlink()
    code, _, err = finish(start(folder, argv))
    assert code == EXIT_OK, err
    assert sorted(p.name for p in folder.iterdir()) == ["a.csv", "b.csv", "m.csv", "out.h5"]
    assert read_results(folder / "out.h5", "comparison")[0]["status"].tolist() == ["pass"]
