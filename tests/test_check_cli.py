"""Tests of ``ohmgraph check``: exit codes, findings and their rendering on tiny circuits.

Every expected finding follows from hand reasoning on the circuit written in the test (the
reasoning is in the comment beside it), never from running ohmgraph first.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from ohmgraph.io.cli import main

HEADER = "name,kind,from,to,value\n"
# 5 V source feeding two resistors in series to the reference: one loop, every node grounded.
DIVIDER = "V1,V,in,0,5\nR1,R,in,mid,2\nR2,R,mid,0,3\n"


def write(tmp_path: Path, rows: str, name: str = "net.csv") -> Path:
    path = tmp_path / name
    path.write_text(HEADER + rows if name.endswith(".csv") else rows)
    return path


def check(capsys, path, *options) -> tuple[int, str]:
    code = main(["check", str(path), *options])
    captured = capsys.readouterr()
    assert "Traceback" not in captured.err
    return code, captured.out


def check_json(capsys, path, *options) -> tuple[int, dict]:
    code, out = check(capsys, path, "--json", *options)
    return code, json.loads(out)


def finding(report: dict, code: str) -> dict:
    found = [f for f in report["findings"] if f["code"] == code]
    assert len(found) == 1, [f["code"] for f in report["findings"]]
    return found[0]


def codes(report: dict) -> set:
    return {f["code"] for f in report["findings"]}


def test_well_posed_network(tmp_path, capsys):
    code, out = check(capsys, write(tmp_path, DIVIDER))
    assert code == 0
    assert out.strip().endswith("well-posed: solvable")
    # by inspection: 3 nodes, 1 source, 2 resistors; V1 merges `in` with the reference, leaving
    # one unknown potential (`mid`) of full rank
    assert "nodes 3, branches 3 (R 2, V 1, I 0)" in out
    assert "unknowns 1, rank 1" in out


def test_well_posed_edge_list(tmp_path, capsys):
    path = write(tmp_path, "# two resistors\na b 1\nb 0 2\n", name="pair.txt")
    code, report = check_json(capsys, path)
    assert code == 0 and report["solvable"] and report["findings"] == []


def test_kvl_violation_names_the_loop(tmp_path, capsys):
    # by KVL around the loop V1, V2: V(a) - V(0) cannot be 5 V and 6 V at once
    path = write(tmp_path, "V1,V,a,0,5\nV2,V,a,0,6\nR1,R,a,0,10\n")
    code, out = check(capsys, path)
    assert code == 1
    assert "error kvl-violation" in out and "'V1' (line 2)" in out and "'V2' (line 3)" in out
    assert out.strip().endswith("NOT solvable: 1 error")
    code, report = check_json(capsys, path)
    kvl = finding(report, "kvl-violation")
    assert code == 1 and not report["solvable"]
    assert sorted(kvl["branches"]) == ["V1", "V2"] and sorted(kvl["lines"]) == [2, 3]
    assert sorted(kvl["nodes"]) == ["0", "a"]


def test_consistent_source_loop_is_a_warning(tmp_path, capsys):
    # by KVL around the loop: V1 and V2 both set V(a) - V(0) = 5 V, consistent, but the current
    # circulating between them is undetermined
    path = write(tmp_path, "V1,V,a,0,5\nV2,V,0,b,-5\nR0,R,a,b,0\nR1,R,a,0,10\n")
    code, report = check_json(capsys, path)
    assert code == 0
    loop = finding(report, "source-loop")
    assert loop["severity"] == "warning" and loop["n_branches"] == 1


def test_current_sources_into_an_island_break_kcl(tmp_path, capsys):
    # nodes b, c reach the rest only through I1, which pushes 1 A into b: by KCL over the cut
    # set {I1} the net current into {b, c} must be zero, and it is 1 A
    path = write(tmp_path, "R1,R,a,0,1\nI1,I,0,b,1\nR2,R,b,c,1\n")
    code, report = check_json(capsys, path)
    assert code == 1
    kcl = finding(report, "kcl-violation")
    assert kcl["severity"] == "error"
    assert sorted(kcl["nodes"]) == ["b", "c"] and kcl["branches"] == ["I1"]


def test_balanced_current_sources_into_an_island_float(tmp_path, capsys):
    # I1 pushes 1 A into b and I2 takes 1 A out of c: KCL holds over the cut set, but nothing
    # fixes the potential of {b, c} relative to the reference
    path = write(tmp_path, "R1,R,a,0,1\nI1,I,0,b,1\nI2,I,c,0,1\nR2,R,b,c,1\n")
    code, report = check_json(capsys, path)
    assert code == 1 and codes(report) == {"floating"}
    assert sorted(finding(report, "floating")["nodes"]) == ["b", "c"]


def test_floating_island_and_allow_floating(tmp_path, capsys):
    # R2 joins x and y to each other only: no path to the reference
    path = write(tmp_path, "R1,R,a,0,1\nR2,R,x,y,1\n")
    code, out = check(capsys, path)
    assert code == 1 and "error floating" in out and "'x', 'y'" in out
    code, report = check_json(capsys, path, "--allow-floating")
    assert code == 0 and report["solvable"]
    pinned = finding(report, "pinned-island")
    assert pinned["severity"] == "info"
    # one node of the one island is pinned at 0 V
    assert len(report["pinned_nodes"]) == 1 and report["pinned_nodes"][0] in {"x", "y"}
    assert pinned["nodes"] == report["pinned_nodes"]


def test_negative_resistance(tmp_path, capsys):
    path = write(tmp_path, DIVIDER + "Rneg,R,mid,0,-4\n")
    code, report = check_json(capsys, path)
    assert code == 1
    negative = finding(report, "negative-resistance")
    assert negative["severity"] == "error" and negative["branches"] == ["Rneg"]
    assert negative["lines"] == [5]


@pytest.mark.parametrize("value", ["nan", "inf", "-Infinity"])
def test_non_finite_value(tmp_path, capsys, value):
    path = write(tmp_path, DIVIDER + f"Rbad,R,mid,0,{value}\n")
    code, report = check_json(capsys, path)
    assert code == 1
    assert finding(report, "non-finite-value")["branches"] == ["Rbad"]


def test_self_loop_is_a_warning(tmp_path, capsys):
    # Rloop starts and ends on `mid`: it carries no current and changes nothing
    path = write(tmp_path, DIVIDER + "Rloop,R,mid,mid,7\n")
    code, report = check_json(capsys, path)
    assert code == 0
    loop = finding(report, "self-loop")
    assert loop["severity"] == "warning" and loop["nodes"] == ["mid"]
    assert loop["branches"] == ["Rloop"]


def test_duplicate_names_are_a_warning(tmp_path, capsys):
    path = write(tmp_path, "V1,V,in,0,5\nR1,R,in,mid,2\nR1,R,mid,0,3\n")
    code, report = check_json(capsys, path)
    assert code == 0
    duplicate = finding(report, "duplicate-name")
    assert duplicate["branches"] == ["R1", "R1"] and duplicate["lines"] == [3, 4]


def test_ideal_connection_is_information(tmp_path, capsys):
    # a 0-ohm resistor ties `mid` to `tap`: one supernode, no extra unknown
    path = write(tmp_path, DIVIDER + "Rtie,R,mid,tap,0\n")
    code, report = check_json(capsys, path)
    assert code == 0
    ideal = finding(report, "ideal-connection")
    assert ideal["severity"] == "info" and ideal["branches"] == ["Rtie"]
    assert report["summary"]["ideal_connections"] == 1
    assert report["summary"]["unknowns"] == 1      # {mid, tap}; `in` is fixed by V1


def test_wide_conductance_spread_is_a_warning(tmp_path, capsys):
    # 1 milliohm and 10 gigaohm: a ratio of 1e13, beyond the 1e12 limit (double precision keeps
    # about 16 significant digits, so such a ratio costs 12 or more of them; common practice)
    path = write(tmp_path, "V1,V,in,0,5\nRlow,R,in,mid,1e-3\nRhigh,R,mid,0,1e10\n")
    code, report = check_json(capsys, path)
    assert code == 0
    spread = finding(report, "ill-conditioned")
    assert spread["severity"] == "warning" and sorted(spread["branches"]) == ["Rhigh", "Rlow"]
    assert report["summary"]["conductance_spread"] == pytest.approx(1e13)


def test_ground_option(tmp_path, capsys):
    path = write(tmp_path, "R1,R,gnd,a,1\nR2,R,a,b,1\n")
    code, _ = check(capsys, path)
    assert code == 2                                    # there is no node "0"
    code, report = check_json(capsys, path, "--ground", "gnd")
    assert code == 0 and report["summary"]["reference"] == "gnd"


def test_text_report_lists_a_few_and_counts_the_rest(tmp_path, capsys):
    # eight resistors between x and y only: an island of 2 nodes; eight duplicate names
    rows = "R1,R,a,0,1\n" + "".join(f"Rdup,R,x,y,{k + 1}\n" for k in range(8))
    code, out = check(capsys, write(tmp_path, rows))
    assert code == 1
    assert "warning duplicate-name" in out and "(+3 more)" in out
    # the first five of the eight (file lines 3 to 7) are shown
    assert "'Rdup' (line 3)" in out and "(line 7)" in out and "(line 8)" not in out


def test_json_output_is_complete(tmp_path, capsys):
    path = write(tmp_path, "V1,V,a,0,5\nV2,V,a,0,6\nRz,R,a,b,0\nRn,R,b,0,-1\n")
    code, report = check_json(capsys, path)
    assert code == 1
    # by hand: V1/V2 break KVL, Rn is negative, Rz is an ideal connection
    assert {"kvl-violation", "negative-resistance", "ideal-connection"} <= codes(report)
    assert report["summary"]["errors"] == 2
    for item in report["findings"]:
        assert set(item) == {"severity", "code", "message", "nodes", "n_nodes", "branches",
                             "n_branches", "lines"}
        assert len(item["lines"]) == len(item["branches"])
