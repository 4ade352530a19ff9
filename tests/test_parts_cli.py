"""The reading commands with part tolerances: tolerance --readings, diagnose on real parts."""

from __future__ import annotations

import json
import math
from importlib import resources

import pandas as pd
import pytest

from ohmgraph.io.cli import main
from ohmgraph.io.result_store import read_results

VIN, R1, R2 = 12.0, 1500.0, 4700.0


@pytest.fixture()
def divider(tmp_path):
    (tmp_path / "net.csv").write_text(f"name,kind,from,to,value\nVS,V,in,0,{VIN}\n"
                                      f"R1,R,in,out,{R1}\nR2,R,out,0,{R2}\n")
    (tmp_path / "m.csv").write_text("kind,a,b\nV,out,\nR,out,0\nI,R1,\n")
    return tmp_path


def test_tolerance_of_every_reading_kind_to_csv_and_hdf5(divider, capsys):
    # 1 % parts. V(out) = Vin R2/(R1+R2): dV/dR1 = -Vin R2/(R1+R2)^2, dV/dR2 = Vin R1/(R1+R2)^2;
    # R(out, 0) = R1 R2/(R1+R2): dR/dR1 = (R2/(R1+R2))^2; I(R1) = Vin/(R1+R2):
    # dI/dRk = -Vin/(R1+R2)^2 (closed forms; common practice). Contribution = slope x 0.01 x R.
    s = R1 + R2
    v = [VIN * R2 / s ** 2 * 0.01 * R1, VIN * R1 / s ** 2 * 0.01 * R2]
    r = [(R2 / s) ** 2 * 0.01 * R1, (R1 / s) ** 2 * 0.01 * R2]
    i = [VIN / s ** 2 * 0.01 * R1, VIN / s ** 2 * 0.01 * R2]
    out = divider / "tol.csv"
    code = main(["tolerance", str(divider / "net.csv"), "--readings", str(divider / "m.csv"),
                 "--default", "1%", "-o", str(out)])
    text = capsys.readouterr().out
    assert code == 0 and "line 3 R out 0" in text and "ohm/ohm" in text
    table = pd.read_csv(out, keep_default_na=False)
    assert list(table["kind"]) == ["V", "R", "I"]
    assert list(table["worst_case"]) == pytest.approx([sum(v), sum(r), sum(i)], rel=1e-10)
    assert list(table["rss"]) == pytest.approx([math.hypot(*v), math.hypot(*r), math.hypot(*i)],
                                               rel=1e-10)
    h5 = divider / "tol.h5"
    assert main(["tolerance", str(divider / "net.csv"), "--readings", str(divider / "m.csv"),
                 "--default", "1%", "-o", str(h5), "--samples", "20"]) == 0
    columns, _, root = read_results(h5, "tolerance")
    assert columns["sensitivity"].shape == (3, 2)
    assert columns["monte_carlo_std"].shape == (3,) and root["readings_file"] == "m.csv"


def test_diagnose_on_real_parts_flags_a_contact_error(tmp_path, capsys):
    # The shipped coupon readings (one planted fault, RH_2_2 at 300 ohm) with 2.2 ohm added to
    # one resistance reading (line 16) by a bad contact.
    examples = resources.files("ohmgraph.datasets") / "examples"
    text = (examples / "trim_coupon_readings.csv").read_text()
    lines = text.splitlines()
    assert lines[15].startswith("R,TP_1_2,TP_2_2,89.62,")
    lines[15] = lines[15].replace("89.62", "91.82")
    readings = tmp_path / "readings.csv"
    readings.write_text("\n".join(lines) + "\n")
    out = tmp_path / "diag.h5"
    code = main(["diagnose", str(examples / "trim_coupon.csv"), str(readings), "--accuracy",
                 "0.05%+0.5mV", "--tolerances", str(examples / "trim_coupon_tolerances.csv"),
                 "--default", "1%", "--top", "3", "-o", str(out), "--json"])
    report = json.loads(capsys.readouterr().out)
    assert code == 0
    summary = report["summary"]
    assert summary["flagged_lines"] == [16] and summary["fault_indicated"]
    # Read high by the planted 2.2 ohm: the one-sided contact-error test flags it.
    assert summary["flagged_tests"] == ["contact"]
    shift, shift_std = summary["flagged_shift"][0], summary["flagged_shift_std"][0]
    assert shift == pytest.approx(2.2, abs=3 * shift_std) and shift_std < 0.5
    assert summary["flagged_statistic"][0] ** 2 == pytest.approx(summary["flagged_chi2_drop"][0])
    assert summary["flagged_chi2_drop"][0] > summary["flagged_limit"][0]
    assert summary["readings_used"] == 17
    best = report["hypotheses"][0]
    assert best["branch"] == "RH_2_2" and best["faults"] == 1
    assert best["estimated_ohms"] == pytest.approx(300.0, rel=0.01)
    _, attrs, _ = read_results(out, "diagnosis")
    assert list(attrs["flagged_lines"]) == [16]
    assert main(["diagnose", str(examples / "trim_coupon.csv"), str(readings), "--accuracy",
                 "0.05%+0.5mV", "--default", "1%", "--top", "2"]) == 0
    shown = capsys.readouterr().out
    assert "FLAGGED line 16 (R TP_1_2 TP_2_2): read high by +2.2 ohm" in shown
    assert "contact-error test, one-sided" in shown and "fault indicated" in shown
    assert "de-energise and discharge the network for resistance readings" in shown
    # Without the contact test the same reading is caught by the two-sided gross-error test.
    assert main(["diagnose", str(examples / "trim_coupon.csv"), str(readings), "--accuracy",
                 "0.05%+0.5mV", "--default", "1%", "--top", "2", "--contact-max", "0"]) == 0
    shown = capsys.readouterr().out
    assert "FLAGGED line 16 (R TP_1_2 TP_2_2): off by +2.2 ohm" in shown
    assert "gross-error test" in shown


def test_show_reads_every_result_file(tmp_path, capsys):
    # compare to HDF5 and to CSV (with its provenance sidecar), diagnose appended to a solution
    # file, tolerance and pick-readings results: show prints each with where it came from.
    examples = resources.files("ohmgraph.datasets") / "examples"
    net, meas = str(examples / "trim_coupon.csv"), str(examples / "trim_coupon_readings.csv")
    common = ["--accuracy", "0.05%+0.5mV", "--default", "1%"]
    points = tmp_path / "tp.csv"
    points.write_text("node\nTP_1_1\nTP_2_2\nTP_3_4\n")
    runs = {
        "c.h5": ["compare", net, meas, *common],
        "c.csv": ["compare", net, meas, *common],
        "d.csv": ["diagnose", net, meas, *common],
        "t.h5": ["tolerance", net, "--readings", meas, "--default", "1%"],
        "p.h5": ["pick-readings", net, "--test-points", str(points), "--budget", "2",
                 "--accuracy", "0.05%+0.5mV", "--accuracy", "0.2%+0.05ohm"],
    }
    for name, argv in runs.items():
        main(argv + ["-o", str(tmp_path / name)])
    main(["solve", net, "-o", str(tmp_path / "sol.h5")])
    main(["diagnose", net, meas, *common, "-o", str(tmp_path / "sol.h5"), "--append"])
    capsys.readouterr()
    sidecar = json.loads((tmp_path / "c.csv.provenance.json").read_text())
    assert sidecar["result"] == "comparison" and sidecar["table"] == "c.csv"
    assert sidecar["inputs"]["network"]["file"] == "trim_coupon.csv"
    assert len(sidecar["inputs"]["measurements"]["sha256"]) == 64
    expected = {"c.h5": "/comparison: written", "c.csv": "/comparison: written",
                "d.csv": "/diagnosis: written", "t.h5": "/tolerance: written",
                "p.h5": "/readings_plan: written", "sol.h5": "/diagnosis: written"}
    for name, text in expected.items():
        assert main(["show", str(tmp_path / name)]) == 0
        shown = capsys.readouterr().out
        assert text in shown and "trim_coupon.csv (sha256" in shown, name
    assert main(["show", str(tmp_path / "sol.h5"), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["nodes"] == 16 and "diagnosis" in report["results"]


def test_html_summary_carries_the_cautions(tmp_path, capsys):
    examples = resources.files("ohmgraph.datasets") / "examples"
    net, meas = str(examples / "trim_coupon.csv"), str(examples / "trim_coupon_readings.csv")
    for command in ("compare", "diagnose"):
        out = tmp_path / f"{command}.html"
        main([command, net, meas, "--accuracy", "0.05%+0.5mV", "--default", "1%", "--html",
              str(out)])
        text = out.read_text()
        assert "De-energise and discharge the network before resistance readings" in text
        assert "local safety rules and licensed practice" in text
        assert "trim_coupon_readings.csv" in text and "SHA-256" in text
        assert text.count("<tr class='fail'>") >= 10          # the planted fault's readings
    assert "RH_2_2" in (tmp_path / "diagnose.html").read_text()
    capsys.readouterr()


def test_diagnose_offers_two_faults_when_no_single_fault_fits(tmp_path, capsys):
    # Two parts wrong on the coupon (RH_2_2 300 ohm for 180, RV_2_3 90 ohm for 180); readings
    # from a full re-solve, written with 7 significant digits.
    from ohmgraph.engine.readings.model import build_model
    from ohmgraph.io.measurement_table import read_measurements
    from ohmgraph.io.reader import read_network

    examples = resources.files("ohmgraph.datasets") / "examples"
    net = read_network(examples / "trim_coupon.csv")
    table = read_measurements(examples / "trim_coupon_readings.csv", net, values=False)
    ohms = net.value.copy()
    names = list(net.branch_names)
    ohms[names.index("RH_2_2")], ohms[names.index("RV_2_3")] = 300.0, 90.0
    values = build_model(net.with_values(ohms), table.readings).model_value
    rows = [f"{k},{a},{b},{v:.7g},0.01%+0.01mV" if k == "V" else f"{k},{a},{b},{v:.7g},0.01%"
            for k, a, b, v in zip(table.readings.kind, table.a, table.b, values)]
    readings = tmp_path / "two.csv"
    readings.write_text("kind,a,b,value,accuracy\n" + "\n".join(rows) + "\n")
    code = main(["diagnose", str(examples / "trim_coupon.csv"), str(readings), "--default",
                 "0.01%", "--max-flagged", "0", "--json"])
    report = json.loads(capsys.readouterr().out)
    assert code == 0 and report["summary"]["fault_indicated"]
    assert not report["summary"]["single_fault_fits"]
    pairs = [row for row in report["hypotheses"] if row["faults"] == 2 and row["rank"] == 1]
    assert {row["branch"] for row in pairs} == {"RH_2_2", "RV_2_3"}
    estimate = {row["branch"]: row["estimated_ohms"] for row in pairs}
    assert estimate["RH_2_2"] == pytest.approx(300.0, rel=1e-3)
    assert estimate["RV_2_3"] == pytest.approx(90.0, rel=1e-3)
    main(["diagnose", str(examples / "trim_coupon.csv"), str(readings), "--default", "0.01%",
          "--max-flagged", "0", "--top", "2"])
    assert "no single fault fits" in capsys.readouterr().out
