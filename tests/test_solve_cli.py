"""The ``solve`` and ``show`` commands: exit codes, no partial output, stored evidence."""

from __future__ import annotations

import json
from pathlib import Path

import h5py
import numpy as np
import pytest
import scipy.sparse as sp

import ohmgraph.io.commands.solve as solve_command
from ohmgraph.engine.solvers import SolverFailed
from ohmgraph.io.cli import main

PG1 = Path(__file__).resolve().parents[2] / "shared" / "validation" / "pg1.csv.gz"

DIVIDER = """name,kind,from,to,value
supply,V,top,0,10
r_upper,R,top,mid,1000
r_lower,R,mid,0,3000
load,I,mid,0,0.002
"""


@pytest.fixture
def divider(tmp_path):
    path = tmp_path / "divider.csv"
    path.write_text(DIVIDER)
    return path


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_solve_stores_and_prints_the_solution(tmp_path, divider, capsys):
    out = tmp_path / "divider.h5"
    code, text, err = run(capsys, "solve", divider, "-o", out)
    assert code == 0, err
    assert "relative residual" in text and "KCL max residual" in text and "store" in text
    with h5py.File(out, "r") as h5:
        labels = h5["nodes/label"].asstr()[...].tolist()
        voltage = h5["nodes/voltage"][...]
        timings = dict(h5["timings"].attrs)
    # loaded divider solved by hand (common practice): (10/1000 - 0.002) / (1/1000 + 1/3000) = 6 V
    assert voltage[labels.index("mid")] == pytest.approx(6.0, rel=1e-12)
    assert voltage[labels.index("top")] == pytest.approx(10.0, rel=1e-12)
    assert {"read", "check", "solve", "store"} <= set(timings)


def test_show_prints_what_solve_printed(tmp_path, divider, capsys):
    out = tmp_path / "divider.h5"
    code, solved, _ = run(capsys, "solve", divider, "-o", out)
    assert code == 0
    code, shown, _ = run(capsys, "show", out)
    assert code == 0
    assert "divider.csv" in shown.splitlines()[0]
    assert solved.splitlines()[1:] == shown.splitlines()[1:]


def test_json_output_parses_and_matches_show(tmp_path, divider, capsys):
    out = tmp_path / "divider.h5"
    code, solved, _ = run(capsys, "solve", divider, "-o", out, "--json")
    assert code == 0
    solved = json.loads(solved)
    assert solved.pop("output") == str(out)
    assert solved["voltage_max"] == {"node": "top", "volts": 10.0}
    code, shown, _ = run(capsys, "show", out, "--json")
    assert code == 0
    shown = json.loads(shown)
    assert shown.pop("stored")["input_file"] == "divider.csv"
    assert shown == solved


def test_refuses_to_overwrite_then_force_replaces(tmp_path, divider, capsys):
    out = tmp_path / "divider.h5"
    out.write_bytes(b"keep me")
    code, _, err = run(capsys, "solve", divider, "-o", out)
    assert code == 3 and "already exists" in err
    assert out.read_bytes() == b"keep me"
    code, _, _ = run(capsys, "solve", divider, "-o", out, "--force")
    assert code == 0
    assert h5py.is_hdf5(out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["divider.csv", "divider.h5"]


def test_missing_output_folder_is_refused(tmp_path, divider, capsys):
    code, _, err = run(capsys, "solve", divider, "-o", tmp_path / "nowhere" / "out.h5")
    assert code == 3 and "does not exist" in err


def test_not_solvable_network_exits_1_and_writes_nothing(tmp_path, capsys):
    net = tmp_path / "island.csv"
    # nodes a and b have no path to the reference: their potential floats (common practice)
    net.write_text("name,kind,from,to,value\nr1,R,1,0,5\nr2,R,a,b,5\n")
    out = tmp_path / "island.h5"
    code, text, _ = run(capsys, "solve", net, "-o", out)
    assert code == 1 and "floating" in text
    assert not out.exists()
    code, text, _ = run(capsys, "solve", net, "-o", out, "--json")
    assert code == 1
    json.loads(text)
    assert not out.exists()
    code, text, _ = run(capsys, "solve", net, "-o", out, "--allow-floating")
    assert code == 0 and "pinned" in text


def test_unreadable_input_exits_2_and_writes_nothing(tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text("name,kind,from,to,value\nr1,R,1,0,five\n")
    out = tmp_path / "bad.h5"
    code, _, err = run(capsys, "solve", bad, "-o", out)
    assert code == 2 and "bad.csv" in err
    assert not out.exists()
    code, _, err = run(capsys, "solve", tmp_path / "absent.csv", "-o", out)
    assert code == 2 and "absent.csv" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.csv"]


def test_bad_arguments_exit_2(divider, tmp_path):
    for argv in (["--rtol", "-1"], ["--rtol", "abc"], ["--method", "guess"]):
        with pytest.raises(SystemExit) as stop:
            main(["solve", str(divider), "-o", str(tmp_path / "x.h5"), *argv])
        assert stop.value.code == 2


def test_unknown_ground_exits_2(tmp_path, divider, capsys):
    code, _, err = run(capsys, "solve", divider, "-o", tmp_path / "x.h5", "--ground", "nope")
    assert code == 2 and "nope" in err


def test_solver_failure_exits_4_and_writes_nothing(tmp_path, divider, capsys, monkeypatch):
    def failing(*args, **kwargs):
        raise SolverFailed("no convergence")

    monkeypatch.setattr(solve_command, "solve", failing)
    out = tmp_path / "divider.h5"
    code, _, err = run(capsys, "solve", divider, "-o", out)
    assert code == 4 and "no convergence" in err
    assert not out.exists()


def test_show_rejects_a_file_that_is_not_a_solution(tmp_path, divider, capsys):
    code, _, err = run(capsys, "show", divider)
    assert code == 2 and "not an HDF5 file" in err
    plain = tmp_path / "plain.h5"
    with h5py.File(plain, "w") as h5:
        h5["x"] = np.arange(3)
    code, _, err = run(capsys, "show", plain)
    assert code == 2 and "missing dataset /nodes/label" in err


@pytest.mark.skipif(not PG1.exists(), reason="../shared/validation/pg1.csv.gz not present")
def test_stored_pg1_solution_obeys_kirchhoff(tmp_path, capsys):
    # IBM power grid benchmark ibmpg1 (Nassif, ASP-DAC 2008); the stored arrays must satisfy
    # KCL at every node and KVL on every branch (Kirchhoff's laws), checked here with a scipy
    # incidence matrix independent of the engine.
    out = tmp_path / "pg1.h5"
    code, _, err = run(capsys, "solve", PG1, "-o", out)
    assert code == 0, err
    with h5py.File(out, "r") as h5:
        v = h5["nodes/voltage"][...]
        frm, to = h5["branches/from"][...], h5["branches/to"][...]
        kind = h5["branches/kind"].asstr()[...]
        value = h5["branches/value"][...]
        current, voltage = h5["branches/current"][...], h5["branches/voltage"][...]
    m = frm.size
    incidence = sp.csr_matrix((np.r_[np.ones(m), -np.ones(m)], (np.r_[frm, to], np.r_[0:m, 0:m])),
                              shape=(v.size, m))
    net_out = incidence @ current        # every branch is in the table: KCL holds everywhere
    assert np.abs(net_out).max() <= 1e-9 * np.abs(current).max()
    np.testing.assert_allclose(voltage, v[frm] - v[to], rtol=0, atol=1e-12)
    sources = kind == "V"
    np.testing.assert_allclose(voltage[sources], value[sources], rtol=0, atol=1e-9)
    resistors = (kind == "R") & (value > 0)
    np.testing.assert_allclose(current[resistors] * value[resistors], voltage[resistors],
                               rtol=1e-9, atol=1e-12)
