"""The compare, diagnose and tolerance commands: results, outputs, exit codes, bad input."""

from __future__ import annotations

import json
from importlib import resources

import pytest

from ohmgraph.io.cli import main
from ohmgraph.io.result_store import read_results

VIN, R1, R2 = 12.0, 1500.0, 4700.0
VOUT = VIN * R2 / (R1 + R2)          # voltage-divider rule (common practice)


@pytest.fixture()
def divider_file(tmp_path):
    path = tmp_path / "divider.csv"
    path.write_text(f"name,kind,from,to,value\nVS,V,in,0,{VIN}\nR1,R,in,out,{R1}\n"
                    f"R2,R,out,0,{R2}\n")
    return path


@pytest.fixture()
def fixture_files():
    examples = resources.files("ohmgraph.datasets") / "examples"
    return (examples / "trim_coupon.csv", examples / "trim_coupon_readings.csv",
            examples / "trim_coupon_tolerances.csv")


def write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_compare_passes_within_accuracy(tmp_path, divider_file, capsys):
    # Readings at the divider's closed-form values, 1 mV off, within 0.1 % + 1 mV.
    readings = write(tmp_path, "m.csv", f"kind,a,b,value\nV,out,,{VOUT + 0.001}\n"
                                        f"R,out,0,{R1 * R2 / (R1 + R2)}ohm\nI,R2,,{VOUT / R2}\n")
    code = main(["compare", str(divider_file), str(readings), "--accuracy", "0.1%+1mV",
                 "--accuracy", "0.1%", "--json"])
    report = json.loads(capsys.readouterr().out)
    assert code == 0
    assert report["summary"]["passed"] == 3
    assert report["readings"][0]["model"] == pytest.approx(VOUT, rel=1e-12)


def test_compare_fails_on_planted_fault_and_stores_results(tmp_path, fixture_files, capsys):
    network, readings, _ = fixture_files
    out = tmp_path / "cmp.h5"
    code = main(["compare", str(network), str(readings), "--accuracy", "0.05%+0.5mV",
                 "-o", str(out)])
    text = capsys.readouterr().out
    assert code == 1 and "FAIL" in text and "outside" in text
    columns, attrs, root = read_results(out, "comparison")
    assert set(columns["status"]) <= {"pass", "FAIL"} and "FAIL" in set(columns["status"])
    assert attrs["failed"] == sum(columns["status"] == "FAIL")
    assert root["network_file"] == "trim_coupon.csv" and len(root["network_sha256"]) == 64


def test_diagnose_finds_planted_fault(tmp_path, fixture_files, capsys):
    # The shipped fixture's readings were taken with RH_2_2 fitted as 300 ohm instead of its
    # 180 ohm (the planted fault, known by construction).
    network, readings, _ = fixture_files
    out = tmp_path / "diag.csv"
    code = main(["diagnose", str(network), str(readings), "--accuracy", "0.05%+0.5mV",
                 "--top", "3", "--json", "-o", str(out)])
    report = json.loads(capsys.readouterr().out)
    assert code == 0
    best = report["hypotheses"][0]
    assert best["branch"] == "RH_2_2" and best["kind"] == "value" and best["explains_all"]
    assert best["estimated_ohms"] == pytest.approx(300.0, rel=0.01)
    assert out.read_text().splitlines()[0].startswith("rank,branch,kind")


def test_tolerance_reports_closed_form_spread(tmp_path, divider_file, capsys):
    # Divider at 1 %: worst case 2 t Vin R1 R2/(R1+R2)^2 (first-order analysis; common practice).
    out = tmp_path / "tol.h5"
    code = main(["tolerance", str(divider_file), "--default", "1%", "--observe", "out",
                 "--samples", "20", "--seed", "1", "--json", "-o", str(out)])
    report = json.loads(capsys.readouterr().out)
    assert code == 0
    node = report["nodes"][0]
    assert node["worst_case_V"] == pytest.approx(2 * 0.01 * VIN * R1 * R2 / (R1 + R2) ** 2,
                                                 rel=1e-10)
    assert node["monte_carlo_std_V"] > 0
    columns, attrs, _ = read_results(out, "tolerance")
    assert columns["sensitivity"].shape == (1, 2) and attrs["samples"] == 20


def test_tolerance_file_and_text_output(tmp_path, fixture_files, capsys):
    network, _, tolerances = fixture_files
    code = main(["tolerance", str(network), "--tolerances", str(tolerances), "--default", "1%",
                 "--observe", "TP_2_2", "--top", "2"])
    text = capsys.readouterr().out
    assert code == 0 and "node TP_2_2" in text and "root-sum-square" in text


@pytest.mark.parametrize("row, message", [
    ("V,nowhere,,1.0,1%", ":2: column 'a': unknown node 'nowhere'"),
    ("Q,out,,1.0,1%", ":2: column 'kind': 'Q' is not V, R or I"),
    ("V,out,,1.0,-2%", ":2: column 'accuracy': accuracy '-2%' is negative"),
    ("V,out,,twelve,1%", ":2: column 'value': 'twelve' is not a number"),
])
@pytest.mark.parametrize("command", ["compare", "diagnose"])
def test_bad_tables_exit_2_and_write_nothing(tmp_path, divider_file, capsys, command, row,
                                             message):
    readings = write(tmp_path, "m.csv", f"kind,a,b,value,accuracy\n{row}\n")
    out = tmp_path / "out.h5"
    code = main([command, str(divider_file), str(readings), "-o", str(out)])
    error = capsys.readouterr().err
    assert code == 2
    assert f"{readings}{message}" in error and "Traceback" not in error
    assert sorted(path.name for path in tmp_path.iterdir()) == ["divider.csv", "m.csv"]


def test_existing_output_is_refused(tmp_path, divider_file, capsys):
    readings = write(tmp_path, "m.csv", f"kind,a,b,value,accuracy\nV,out,,{VOUT},1%\n")
    out = write(tmp_path, "out.csv", "keep me\n")
    assert main(["compare", str(divider_file), str(readings), "-o", str(out)]) == 3
    assert out.read_text() == "keep me\n"
    assert main(["compare", str(divider_file), str(readings), "-o", str(out), "--force"]) == 0
    assert out.read_text().startswith("line,kind,a,b,measured")
    assert main(["compare", str(divider_file), str(readings), "-o",
                 str(tmp_path / "out.txt")]) == 2


def test_diagnose_refuses_zero_accuracy(tmp_path, divider_file, capsys):
    readings = write(tmp_path, "m.csv", f"kind,a,b,value,accuracy\nV,out,,{VOUT},0\n")
    assert main(["diagnose", str(divider_file), str(readings)]) == 2
    assert ":2: column 'accuracy'" in capsys.readouterr().err


def test_tolerance_argument_errors(tmp_path, divider_file, capsys):
    assert main(["tolerance", str(divider_file), "--observe", "out"]) == 2
    assert "--tolerances FILE, --default PCT" in capsys.readouterr().err
    assert main(["tolerance", str(divider_file), "--default", "1%", "--observe", "nope"]) == 2
    assert "unknown node(s) 'nope'" in capsys.readouterr().err


def test_not_well_posed_network_exits_1(tmp_path, capsys):
    # Node "far" hangs on a current source only: KCL cannot hold there (checks module).
    network = write(tmp_path, "bad.csv", "name,kind,from,to,value\nVS,V,a,0,1\nR1,R,a,0,10\n"
                                         "J,I,0,far,1\n")
    readings = write(tmp_path, "m.csv", "kind,a,b,value,accuracy\nV,a,,1.0,1%\n")
    assert main(["compare", str(network), str(readings)]) == 1
    assert "not well-posed" in capsys.readouterr().err


def test_result_store_round_trip_and_failures(tmp_path, monkeypatch):
    import ohmgraph.io.result_store as store
    from ohmgraph.io.errors import InputError

    out = tmp_path / "r.h5"
    store.write_results(out, "comparison", {"a": ["x", "yz"], "value": [1.5, 2.5]},
                        units={"value": "V"}, attrs={"summary": {"failed": 1}, "notes": ["n"]})
    columns, attrs, root = store.read_results(out, "comparison")
    assert columns["a"].tolist() == ["x", "yz"] and columns["value"].tolist() == [1.5, 2.5]
    assert attrs["summary.failed"] == 1 and root["result"] == "comparison"
    with pytest.raises(InputError, match="no group '/diagnosis'"):
        store.read_results(out, "diagnosis")
    with pytest.raises(InputError, match="not a readable HDF5 file"):
        store.read_results(write(tmp_path, "x.csv", "a,b\n"), "comparison")

    def broken():
        raise RuntimeError("disk full")

    monkeypatch.setattr(store, "tool_version", broken)
    failed = tmp_path / "failed.h5"
    with pytest.raises(RuntimeError):
        store.write_results(failed, "comparison", {"a": [1]})
    assert not failed.exists() and not list(tmp_path.glob(".failed.h5*"))


def test_append_result_to_solution_file(tmp_path, divider_file, capsys):
    from ohmgraph.io.store import read_solution

    solution = tmp_path / "divider.h5"
    assert main(["solve", str(divider_file), "-o", str(solution)]) == 0
    readings = write(tmp_path, "m.csv", f"kind,a,b,value,accuracy\nV,out,,{VOUT},1%\n")
    args = ["compare", str(divider_file), str(readings), "-o", str(solution)]
    assert main(args) == 3                                   # exists, no --append
    assert main(args + ["--append"]) == 0
    columns, attrs, _ = read_results(solution, "comparison")
    assert columns["status"].tolist() == ["pass"] and attrs["network_file"] == "divider.csv"
    assert read_solution(solution).node_voltage.size == 3  # the solution is still there
    assert main(args + ["--append"]) == 3                    # the group exists, no --force
    assert "already holds '/comparison'" in capsys.readouterr().err
    assert main(args + ["--append", "--force"]) == 0
    assert main(["compare", str(divider_file), str(readings), "--append", "-o",
                 str(tmp_path / "absent.h5")]) == 3
