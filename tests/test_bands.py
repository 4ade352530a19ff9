"""Bands with part tolerances: hand calculations on a divider and a Wheatstone bridge."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from ohmgraph.engine.network import Network
from ohmgraph.engine.readings.bands import part_spread, reading_bands
from ohmgraph.engine.readings.model import Readings, build_model, compare
from ohmgraph.io.cli import main


def divider() -> Network:
    # 5 V across two 1 kohm resistors: V(mid) = 2.5 V.
    return Network.from_arrays(["in", "in", "mid"], ["0", "mid", "0"], [5.0, 1000.0, 1000.0],
                               ["V", "R", "R"], ["VS", "R1", "R2"])


def bridge() -> Network:
    # 10 V across two arms of two 1 kohm resistors each; a = R1/R2 midpoint, b = R3/R4.
    return Network.from_arrays(["top", "top", "a", "top", "b"], ["0", "a", "0", "b", "0"],
                               [10.0, 1000.0, 1000.0, 1000.0, 1000.0],
                               ["V", "R", "R", "R", "R"], ["VS", "R1", "R2", "R3", "R4"])


def test_divider_band_by_hand():
    # dV/dR1 = -Vin R2/(R1+R2)^2 = -1.25e-3 V/ohm, so each 1 % part (10 ohm) moves V(mid) by
    # 12.5 mV (closed form; common practice). GUM: u = a/sqrt(3) for a limit +-a (JCGM 100:2008
    # §4.3.7), root-sum-square (§5.1.2), U = k u_c (§6.2.1).
    net = divider()
    model = build_model(net, Readings.from_labels(net, ["V"], ["mid"], [""], [2.5], [0.01]))
    spread = part_spread(model, np.full(3, 0.01), covariance=True)
    assert spread.worst_case[0] == pytest.approx(0.025, rel=1e-12)
    assert spread.rss[0] == pytest.approx(0.0125 * math.sqrt(2), rel=1e-12)
    assert spread.covariance[0, 0] == pytest.approx(2 * 0.0125 ** 2 / 3, rel=1e-12)
    gum = reading_bands(model.readings.band, spread)
    u_instrument, u_parts = 0.01 / math.sqrt(3), 0.0125 * math.sqrt(2) / math.sqrt(3)
    assert gum.parts[0] == pytest.approx(2 * u_parts, rel=1e-12)
    assert gum.band[0] == pytest.approx(2 * math.sqrt(u_instrument ** 2 + u_parts ** 2), rel=1e-12)
    assert gum.band[0] == pytest.approx(0.0234521, rel=1e-6)          # worked by hand
    worst = reading_bands(model.readings.band, spread, "worst")
    assert worst.band[0] == pytest.approx(0.035, rel=1e-12)           # 0.01 + 2 x 0.0125
    three = reading_bands(model.readings.band, spread, coverage=3.0)
    assert three.band[0] == pytest.approx(1.5 * gum.band[0], rel=1e-12)


def test_wheatstone_bridge_band_by_hand():
    # Balanced bridge, 1 % parts: each arm resistor moves V(a) - V(b) by 10 V x 1000/(2000)^2
    # x 10 ohm = 25 mV; R(a, b) = R1||R2 + R3||R4 = 1000 ohm, dR/dR1 = (R2/(R1+R2))^2 = 1/4, so
    # 2.5 ohm per part (closed forms; common practice). Instrument: 0.5 mV and 0.1 ohm.
    net = bridge()
    readings = Readings.from_labels(net, ["V", "R", "V", "V"], ["a", "a", "a", "b"],
                                    ["b", "b", "", ""], [0.0, 1000.0, 5.0, 5.0],
                                    [0.5e-3, 0.1, 0.5e-3, 0.5e-3])
    model = build_model(net, readings)
    assert model.model_value[:2] == pytest.approx([0.0, 1000.0], abs=1e-9)
    spread = part_spread(model, np.full(5, 0.01), covariance=True)
    assert spread.worst_case[:2] == pytest.approx([0.1, 10.0], rel=1e-12)
    assert spread.rss[:2] == pytest.approx([0.05, 5.0], rel=1e-12)
    bands = reading_bands(model.readings.band, spread)
    expected = [2 * math.sqrt((0.5e-3) ** 2 / 3 + 0.05 ** 2 / 3),
                2 * math.sqrt(0.1 ** 2 / 3 + 5.0 ** 2 / 3)]
    assert bands.band[:2] == pytest.approx(expected, rel=1e-12)
    # V(a) and V(b) share no resistor: uncorrelated; V(a) - V(b) has the sum of both variances.
    cov = spread.covariance
    assert cov[2, 3] == pytest.approx(0.0, abs=1e-18)
    assert cov[0, 0] == pytest.approx(cov[2, 2] + cov[3, 3], rel=1e-12)
    assert cov[0, 2] == pytest.approx(cov[2, 2], rel=1e-12)


def test_compare_uses_the_combined_band():
    net = divider()
    readings = Readings.from_labels(net, ["V"], ["mid"], [""], [2.52], [0.01])
    model = build_model(net, readings)
    assert not compare(model).passed[0]                      # 20 mV > 10 mV instrument
    bands = reading_bands(readings.band, part_spread(model, np.full(3, 0.01)))
    assert compare(model, bands.band).passed[0]              # 20 mV < 23.5 mV with the parts


def test_compare_command_prints_both_parts_of_the_band(tmp_path, capsys):
    (tmp_path / "net.csv").write_text("name,kind,from,to,value\nVS,V,in,0,5\nR1,R,in,mid,1000\n"
                                      "R2,R,mid,0,1000\n")
    (tmp_path / "m.csv").write_text("kind,a,b,value,accuracy\nV,mid,,2.52,10mV\n")
    args = ["compare", str(tmp_path / "net.csv"), str(tmp_path / "m.csv"), "--default", "1%"]
    assert main(args) == 0
    text = capsys.readouterr().out
    # Bands print to two significant digits (GUM, JCGM 100:2008 §7.2.6): 0.02345 V and 0.02041 V.
    row = text.splitlines()[1].split()
    assert row[-4:] == ["0.023", "0.010", "0.020", "pass"] and "coverage factor k = 2" in text
    assert main(args + ["--worst-case", "--json"]) == 0
    row = json.loads(capsys.readouterr().out)["readings"][0]
    assert row["band"] == pytest.approx(0.035) and row["parts_band"] == pytest.approx(0.025)
    assert row["instrument_band"] == pytest.approx(0.01)
