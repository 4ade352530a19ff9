"""Model values of readings (V, I, R), the comparison, and the measurement-table reader."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from ohmgraph.engine.readings.model import Readings, build_model, compare
from ohmgraph.engine.network import Network
from ohmgraph.io.errors import InputError
from ohmgraph.io.measurement_table import (accuracy_rules, parse_accuracy, parse_quantity,
                                           read_measurements, read_tolerances)


def bridge(r1, r2, r3, r4, detector=1000.0, volts=10.0) -> Network:
    """Wheatstone bridge: R1 top-a, R2 a-0, R3 top-b, R4 b-0, detector resistor a-b."""
    return Network.from_arrays(["top", "top", "a", "top", "b", "a"],
                               ["0", "a", "0", "b", "0", "b"],
                               [volts, r1, r2, r3, r4, detector],
                               ["V", "R", "R", "R", "R", "R"],
                               ["VS", "R1", "R2", "R3", "R4", "RD"])


@pytest.mark.parametrize("r1, r2, r3, r4", [(100.0, 200.0, 330.0, 660.0),
                                            (47.0, 4700.0, 1.0, 100.0)])
def test_balanced_bridge_reads_zero(r1, r2, r3, r4):
    # Balance condition R1/R2 = R3/R4 gives zero detector voltage and current (C. Wheatstone,
    # Phil. Trans. R. Soc. Lond. 133, 303-327, 1843; textbook result, recalled from memory).
    net = bridge(r1, r2, r3, r4)
    readings = Readings.from_labels(net, ["V", "I"], ["a", "RD"], ["b", ""])
    model = build_model(net, readings)
    assert abs(model.model_value[0]) <= 1e-12 * 10.0
    assert abs(model.model_value[1]) <= 1e-12 * 10.0 / 1000.0


def test_unbalanced_bridge_open_detector_voltage():
    # With the detector absent (very large), V(a) - V(b) = Vs (R2/(R1+R2) - R4/(R3+R4))
    # (voltage-divider rule on each arm; common practice).
    net = bridge(100.0, 300.0, 200.0, 200.0, detector=1e15)
    readings = Readings.from_labels(net, ["V"], ["a"], ["b"])
    expected = 10.0 * (300.0 / 400.0 - 200.0 / 400.0)
    assert build_model(net, readings).model_value[0] == pytest.approx(expected, rel=1e-9)


def test_currents_of_sources_and_ideal_connections_follow_kcl():
    # Series circuit Vs=6 V, R 1k and 2k, and a 0-ohm link: one loop current 6/3000 A flows
    # from the source's + terminal through the resistors (Ohm's and Kirchhoff's laws). The
    # source's own current runs from its from-node to its to-node inside it: -2 mA.
    net = Network.from_arrays(["p", "p", "m", "n"], ["0", "m", "n", "0"],
                              [6.0, 1000.0, 0.0, 2000.0], ["V", "R", "R", "R"],
                              ["VS", "RA", "LINK", "RB"])
    readings = Readings.from_labels(net, ["I", "I", "I", "I"], ["VS", "RA", "LINK", "RB"],
                                    ["", "", "", ""])
    values = build_model(net, readings).model_value
    assert values == pytest.approx([-0.002, 0.002, 0.002, 0.002], rel=1e-12)


def test_current_in_a_loop_of_sources_is_undetermined():
    # Two equal sources in parallel: KVL holds around their loop but the split of the current
    # between them is free (Chua, Desoer & Kuh, Linear and Nonlinear Circuits, 1987, ch. 9).
    net = Network.from_arrays(["p", "p", "p"], ["0", "0", "0"], [2.0, 2.0, 4.0],
                              ["V", "V", "R"], ["VA", "VB", "R"])
    readings = Readings.from_labels(net, ["I", "I"], ["VA", "R"], ["", ""],
                                    measured=[-0.25, 0.5], band=[1.0, 1e-9])
    model = build_model(net, readings)
    assert model.usable.tolist() == [False, True]
    result = compare(model)
    assert result.passed.tolist() == [False, True]          # 2 V / 4 ohm = 0.5 A (Ohm's law)
    assert result.summary()["unusable"] == 1


def test_current_source_reading_is_its_value():
    net = Network.from_arrays(["0", "x"], ["x", "0"], [0.25, 8.0], ["I", "R"], ["J", "R"])
    readings = Readings.from_labels(net, ["I", "V"], ["J", "x"], ["", ""])
    # 0.25 A into x through 8 ohm: 2 V (Ohm's law).
    assert build_model(net, readings).model_value == pytest.approx([0.25, 2.0])


def test_two_point_resistance_matches_networkx():
    # Reference: networkx.resistance_distance on the same weighted graph.
    rng = np.random.default_rng(5)
    graph = nx.connected_watts_strogatz_graph(40, 4, 0.4, seed=7)
    for u, v in graph.edges:
        graph.edges[u, v]["ohms"] = float(rng.uniform(1.0, 100.0))
    net = Network.from_networkx(graph, reference="0", ohms="ohms")
    pairs = [(1, 17), (3, 29), (0, 39), (5, 6)]
    readings = Readings.from_labels(net, ["R"] * 4, [str(a) for a, _ in pairs],
                                    [str(b) for _, b in pairs])
    model = build_model(net, readings)
    for value, (a, b) in zip(model.model_value, pairs):
        assert value == pytest.approx(nx.resistance_distance(graph, a, b, weight="ohms",
                                                             invert_weight=True), rel=1e-9)


def test_two_point_resistance_zeroes_sources_and_sees_islands():
    # Sources zeroed: the V source y-0 becomes a short and the I source is removed, so between
    # x and y lie 10 ohm in series with 20 ohm (m-y) parallel to 30 ohm (m-0, 0 = y): 22 ohm
    # (series/parallel rules). Node z hangs on the current source only: infinite resistance.
    net = Network.from_arrays(["x", "y", "m", "m", "y"], ["m", "0", "y", "0", "z"],
                              [10.0, 5.0, 20.0, 30.0, 1.0], ["R", "V", "R", "R", "I"],
                              ["RA", "VS", "RB", "RC", "J"])
    readings = Readings.from_labels(net, ["R", "R"], ["x", "x"], ["y", "z"],
                                    measured=[22.0, np.inf], band=[0.01, 1.0])
    model = build_model(net, readings, allow_floating=True)
    assert model.model_value[0] == pytest.approx(22.0, rel=1e-12)
    assert np.isinf(model.model_value[1]) and not model.usable[1]
    assert compare(model).passed.tolist() == [True, True]


def test_open_circuit_reading_fails_against_a_finite_model():
    # An ohmmeter showing an open circuit (inf) where the model has 22 ohm (series/parallel
    # rules, as above) must fail, although 1 % of an infinite reading is an infinite band.
    net = Network.from_arrays(["x", "y", "m", "m"], ["m", "0", "y", "0"],
                              [10.0, 5.0, 20.0, 30.0], ["R", "V", "R", "R"])
    readings = Readings.from_labels(net, ["R", "R"], ["x", "x"], ["y", "y"],
                                    measured=[np.inf, 22.0], band=[np.inf, np.inf])
    comparison = compare(build_model(net, readings))
    assert comparison.passed.tolist() == [False, True]
    assert comparison.normalized[0] == np.inf
    assert comparison.summary()["worst_reading"] == 0


def test_compare_pass_and_fail_by_band():
    net = bridge(100.0, 200.0, 100.0, 200.0)
    # V(a) = 10 * 200/300 V by the divider rule; readings 5 mV off with bands 10 mV and 1 mV.
    readings = Readings.from_labels(net, ["V", "V"], ["a", "a"], ["", ""],
                                    measured=[20 / 3 + 0.005] * 2, band=[0.01, 0.001])
    result = compare(build_model(net, readings))
    assert result.passed.tolist() == [True, False]
    assert result.deviation == pytest.approx([0.005, 0.005], rel=1e-9)
    assert result.summary()["failed"] == 1


def test_readings_from_labels_rejects_unknowns():
    net = bridge(1.0, 1.0, 1.0, 1.0)
    with pytest.raises(ValueError, match="reading 0: unknown node 'nowhere'"):
        Readings.from_labels(net, ["V"], ["nowhere"], [""])
    with pytest.raises(ValueError, match="no branch named 'R9'"):
        Readings.from_labels(net, ["I"], ["R9"], [""])


# ------------------------------------------------------------------ accuracy and units
@pytest.mark.parametrize("text, value, kind", [
    ("2.5", 2.5, None), ("120mV", 0.12, "V"), ("4.7 kohm", 4700.0, "R"), ("3uA", 3e-6, "I"),
    ("1.5MΩ", 1.5e6, "R"), ("-2e-3 A", -2e-3, "I"), ("inf", np.inf, None)])
def test_parse_quantity(text, value, kind):
    # SI prefixes (BIPM, The International System of Units, 9th ed., 2019, table 7).
    quantity = parse_quantity(text)
    assert quantity.value == pytest.approx(value, rel=1e-15) and quantity.kind == kind


def test_accuracy_band_is_percent_of_reading_plus_absolute():
    # ±(percent of reading + absolute) as instrument data sheets state it (common practice).
    accuracy = parse_accuracy("0.5% + 1mV")
    assert accuracy.band(np.array([2.0, -2.0])) == pytest.approx([0.011, 0.011])
    assert parse_accuracy("100ppm").percent == pytest.approx(0.01)
    for bad in ["-1%", "1%+-2mV", "abc", "1%+2%", "", "1mV+2V"]:
        with pytest.raises(ValueError):
            parse_accuracy(bad)


def test_accuracy_rules_by_unit():
    rules = accuracy_rules(["0.5%+1mV", "1%"])
    assert rules["V"].absolute == pytest.approx(1e-3) and rules[None].percent == 1.0
    with pytest.raises(InputError, match="two accuracies"):
        accuracy_rules(["1%", "2%"])


def test_read_measurements_units_and_global_accuracy(tmp_path):
    net = bridge(100.0, 200.0, 100.0, 200.0)
    path = tmp_path / "meas.csv"
    path.write_text("# bench readings\nkind,a,b,value,accuracy\n"
                    "V,a,,6.667,\n\nv,a,b,0.3mV,0.1%+1mV\nR,top,a,66.7ohm,1%\nI,RD,,1uA,1uA\n")
    table = read_measurements(path, net, accuracy_rules(["0.5%+1mV"]))
    assert table.lines.tolist() == [3, 5, 6, 7]
    assert table.readings.kind.tolist() == ["V", "V", "R", "I"]
    assert table.readings.measured == pytest.approx([6.667, 3e-4, 66.7, 1e-6])
    assert table.readings.band == pytest.approx([0.005 * 6.667 + 1e-3, 1e-3 + 3e-7, 0.667, 1e-6])


@pytest.mark.parametrize("row, message", [
    ("V,nowhere,,1.0,1%", ":2: column 'a': unknown node 'nowhere'"),
    ("X,a,,1.0,1%", ":2: column 'kind': 'X' is not V, R or I"),
    ("V,a,,1.0,-1%", ":2: column 'accuracy': accuracy '-1%' is negative"),
    ("V,a,,abc,1%", ":2: column 'value': 'abc' is not a number"),
    ("V,a,,1.0mA,1%", ":2: column 'value': unit of '1.0mA' does not suit a V reading"),
    ("R,a,,1.0,1%", ":2: column 'b': a resistance reading needs two nodes"),
    ("I,R7,,1.0,1%", ":2: column 'a': no branch is named 'R7'"),
    ("V,a,,1.0,", ":2: column 'accuracy': empty, and no --accuracy applies"),
])
def test_read_measurements_rejects_bad_rows(tmp_path, row, message):
    net = bridge(100.0, 200.0, 100.0, 200.0)
    path = tmp_path / "meas.csv"
    path.write_text(f"kind,a,b,value,accuracy\n{row}\n")
    with pytest.raises(InputError) as error:
        read_measurements(path, net)
    assert str(error.value).startswith(f"{path}:2: ") and message in str(error.value)


def test_read_measurements_bad_header_and_missing_file(tmp_path):
    net = bridge(1.0, 1.0, 1.0, 1.0)
    path = tmp_path / "meas.csv"
    path.write_text("kind,a,value,colour\nV,a,1,red\n")
    with pytest.raises(InputError, match="unknown column"):
        read_measurements(path, net)
    with pytest.raises(InputError, match="no such file"):
        read_measurements(tmp_path / "absent.csv", net)


def test_read_tolerances(tmp_path):
    net = bridge(100.0, 200.0, 100.0, 200.0)
    path = tmp_path / "tol.csv"
    path.write_text("branch,tolerance\nR1,5%\nR2,0.1\n")
    tolerance = read_tolerances(path, net, default=0.01)
    assert tolerance[[1, 2, 3]] == pytest.approx([0.05, 0.001, 0.01])
    path.write_text("branch,tolerance\nVS,1%\nR1,-2%\nR8,1%\n")
    with pytest.raises(InputError) as error:
        read_tolerances(path, net)
    text = str(error.value)
    assert ":2: column 'branch': 'VS' is not a resistor" in text
    assert ":3: column 'tolerance'" in text and ":4: column 'branch'" in text
