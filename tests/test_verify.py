"""``ohmgraph verify`` and :mod:`ohmgraph.engine.evidence`: the evidence recomputed from a file.

Sound solutions must pass with every tolerance of the module table; a stored value changed by
far less than any physical meaning (1e-9 relative) must fail, at the row that was changed.
"""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest

from ohmgraph.engine.evidence import recompute
from ohmgraph.engine.solve import solve
from ohmgraph.io.cli import main
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK
from ohmgraph.io.store import read_solution, write_solution

NET = ("name,kind,from,to,value\nsupply,V,top,0,10\nr_upper,R,top,mid,1000\n"
       "r_lower,R,mid,0,3000\nload,I,mid,0,0.002\n")


def verify(capsys, *argv):
    code = main(["verify", *map(str, argv)])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def divider(tmp_path):
    (tmp_path / "net.csv").write_text(NET)
    out = tmp_path / "sol.h5"
    assert main(["solve", str(tmp_path / "net.csv"), "-o", str(out)]) == EXIT_OK
    return tmp_path


def rewrite(path, name, change):
    """Change one stored dataset the way a bug or an editor would (checksums recomputed)."""
    with h5py.File(path, "a") as h5:
        data = h5[name][()]
        change(data)
        h5[name][...] = data


@pytest.mark.parametrize("seed, method", [(1, "direct"), (2, "direct"), (3, "amg-cg"),
                                          (4, "amg-cg")])
def test_sound_solutions_pass_every_check(tmp_path, make_network, seed, method):
    net = make_network(seed)          # floating and grounded sources, ideal connections
    solution = solve(net, method=method, rtol=1e-10)
    checks = recompute(net, solution.node_voltage, solution.branch_current,
                       solution.branch_voltage, solution.branch_power, solution.rtol,
                       solution.relative_residual)
    assert [c.name for c in checks if not c.passed] == []
    # the tolerances are not vacuous: KCL and the power balance use a visible share of theirs
    assert all(c.worst_ratio < 1 for c in checks)
    path = tmp_path / "sol.h5"
    write_solution(path, solution)
    assert main(["verify", str(path)]) == EXIT_OK


def test_divider_by_hand(divider, capsys):
    code, out, _ = verify(capsys, divider / "sol.h5", divider / "net.csv", "--json")
    assert code == EXIT_OK
    result = json.loads(out)
    assert result["verified"] and len(result["checks"]) == 12
    stored = read_solution(divider / "sol.h5")
    checks = recompute(stored.network, stored.node_voltage, stored.branch_current,
                       stored.branch_voltage, stored.branch_power, 1e-10, 0.0)
    kcl = next(c for c in checks if c.name.startswith("KCL"))
    # hand-worked (common practice): 4 mA through r_upper = 2 mA load + 2 mA through r_lower
    assert np.abs(kcl.error).max() <= 1e-18


@pytest.mark.parametrize("dataset, row, failing", [
    ("branches/current", 1, ["Ohm's law I*R = v", "branch power p = v*I",
                             "KCL: net current leaving each node = 0",
                             "power balance: sum of p = sum of V*KCL residual",
                             "stored KCL max residual"]),
    ("branches/voltage", 2, ["branch voltage = V(from) - V(to)", "Ohm's law I*R = v",
                             "branch power p = v*I"]),
    ("branches/power", 1, ["branch power p = v*I",
                           "power balance: sum of p = sum of V*KCL residual",
                           "stored power balance"]),
    ("nodes/voltage", 1, ["branch voltage = V(from) - V(to)"]),
])
def test_a_changed_value_fails_where_it_was_changed(divider, capsys, dataset, row, failing):
    path = divider / "sol.h5"

    def nudge(data):
        data[row] *= 1 + 1e-9
    rewrite(path, dataset, nudge)
    code, out, _ = verify(capsys, path, "--json")
    assert code == EXIT_FAILED
    result = json.loads(out)
    assert not result["verified"]
    assert [c["check"] for c in result["checks"] if c["failed"]] == failing
    first = next(c for c in result["checks"] if c["failed"])["first_failures"][0]
    stored = read_solution(path)
    names = stored.network.branch_names
    if dataset.startswith("nodes"):       # a branch at the changed node: "branch NAME (A -> B)"
        ends = first["row"].split("(")[1].rstrip(")").split(" -> ")
        assert stored.network.node_labels[row] in ends
    else:
        assert first["row"].startswith(f"branch {names[row]} ")
    assert first["stored"] != first["expected"]


def test_text_report_names_the_first_failing_rows(divider, capsys):
    path = divider / "sol.h5"
    rewrite(path, "branches/current", lambda data: data.__setitem__(1, data[1] * 2))
    code, out, _ = verify(capsys, path)
    assert code == EXIT_FAILED
    lines = out.splitlines()
    assert lines[-1] == "NOT verified: 5 of 10 checks fail"
    ohm = lines.index(next(line for line in lines if "FAIL  Ohm's law" in line))
    assert lines[ohm + 1].startswith("        branch r_upper (top -> mid): stored ")


def test_another_network_is_told_apart(divider, capsys):
    other = divider / "other.csv"
    other.write_text(NET.replace("r_lower,R,mid,0,3000", "r_lower,R,mid,0,3300"))
    code, out, _ = verify(capsys, divider / "sol.h5", other)
    assert code == EXIT_FAILED
    assert f"FAIL  input file SHA-256 matches {other}" in out
    assert ("branch 3 (r_lower): value 3000.0 stored, 3300.0 given") in out
    assert out.splitlines()[-1] == "NOT verified: 2 of 12 checks fail"


def test_the_same_network_in_another_file_differs_only_by_digest(divider, capsys):
    again = divider / "again.csv"
    again.write_text(NET.replace("\n", "\r\n"))
    code, out, _ = verify(capsys, divider / "sol.h5", again)
    assert code == EXIT_FAILED
    assert f"pass  every branch matches {again}" in out
    assert out.splitlines()[-1] == "NOT verified: 1 of 12 checks fail"
