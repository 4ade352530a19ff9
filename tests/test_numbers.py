"""Printed numbers (``ohmgraph.io.numbers``): digits from the stated accuracy, at most 12 in CSV,
every digit on request, and the commands that print and write them."""

from __future__ import annotations

import io
import json
import math

import h5py
import numpy as np
import pandas as pd
import pytest

from ohmgraph.io.cli import main
from ohmgraph.io.csv_table import write_csv
from ohmgraph.io.numbers import (CSV_DIGITS, DEFAULT_DIGITS, MAX_DIGITS, digits_beside,
                                 digits_for, quantity, significant, uncertainty)

# 'a' to '0' through 1 ohm in parallel with 0.5 ohm: 1/3 ohm (series/parallel, common practice),
# a value with no short decimal form.
THIRD = "name,kind,from,to,value\nR1,R,a,0,1\nR2,R,a,0,0.5\n"


def test_digits_follow_the_relative_accuracy():
    assert digits_for(1e-9) == 9 and digits_for(2e-9) == 9 and digits_for(0.08) == 2
    assert digits_for(0.5) == 1 and digits_for(0.0) == MAX_DIGITS == 15
    assert digits_for(2.2e-16) == MAX_DIGITS and digits_for(None) == DEFAULT_DIGITS
    assert digits_for(math.inf) == DEFAULT_DIGITS
    # GUM (JCGM 100:2008, 7.2.6): 2.9575 V beside an uncertainty of 0.0020 V keeps 4 decimals
    assert digits_beside(2.9575, 0.001979) == 5
    assert significant(3.01029123, digits_beside(3.01029123, 0.001979)) == "3.0103"
    assert digits_beside(1.0, 0.0) == DEFAULT_DIGITS
    assert [uncertainty(u) for u in (0.001979, 0.46, 46.2, 1e-16, 5.0)] == [
        "0.0020", "0.46", "46", "1.0e-16", "5.0"]


def test_the_classic_artefact_prints_as_written():
    assert f"{2.2:.17g}" == "2.2000000000000002"          # what 17 digits used to print
    assert significant(2.2, digits_for(1e-12)) == "2.2"
    assert quantity(2.2000000000000002, "ohm", MAX_DIGITS) == "2.2 ohm"
    assert significant(-0.0) == "0" and significant(math.inf) == "inf"
    assert significant(0.25, 3, sign=True) == "+0.25" and significant(-math.inf, sign=True) == "-inf"
    buffer = io.StringIO()
    write_csv(buffer, {"ohms": [2.2, 0.1 + 0.2]})
    assert buffer.getvalue().splitlines() == ["ohms", "2.2", "0.3"]


def test_printed_values_round_trip_within_their_digits():
    rng = np.random.default_rng(3)
    values = rng.uniform(-1, 1, 400) * 10.0 ** rng.integers(-300, 300, 400)
    for value, digits in zip(values, rng.integers(1, MAX_DIGITS + 1, 400)):
        back = float(significant(value, digits))
        # half a unit in the last digit shown
        half_unit = 0.5 * 10.0 ** (math.floor(math.log10(abs(value))) - digits + 1)
        assert abs(back - value) <= half_unit * (1 + 1e-12)


def test_csv_holds_twelve_digits_or_every_digit_on_request():
    rng = np.random.default_rng(5)
    values = rng.standard_normal(300) * 10.0 ** rng.integers(-200, 200, 300)
    short, full = io.StringIO(), io.StringIO()
    write_csv(short, {"x": values})
    write_csv(full, {"x": values}, full_precision=True)
    # Python's float() parses correctly rounded (IEEE 754), the reference reader here
    read_short = np.array([float(line) for line in short.getvalue().splitlines()[1:]])
    read_full = np.array([float(line) for line in full.getvalue().splitlines()[1:]])
    np.testing.assert_array_equal(read_full, values)                 # exact round trip
    np.testing.assert_allclose(read_short, values, rtol=0.5 * 10.0 ** (1 - CSV_DIGITS))
    assert not np.array_equal(read_short, values)                    # digits were dropped


def test_resistance_prints_the_digits_its_bound_supports(tmp_path, capsys):
    net = tmp_path / "third.csv"
    net.write_text(THIRD)
    assert main(["resistance", str(net), "--between", "a", "0", "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert result["ohms"] == pytest.approx(1 / 3, rel=1e-14)
    assert main(["resistance", str(net), "--between", "a", "0"]) == 0
    text = capsys.readouterr().out
    shown = text.split("= ")[1].split(" ohm")[0]
    assert shown == significant(result["ohms"], digits_for(result["accuracy"]))
    assert len(shown.replace("0.", "", 1)) == digits_for(result["accuracy"])   # all 3s


def test_resistance_csv_full_precision_matches_hdf5(tmp_path, capsys):
    net, pairs = tmp_path / "third.csv", tmp_path / "pairs.csv"
    net.write_text(THIRD)
    pairs.write_text("a,b\na,0\n")
    base = ["resistance", str(net), "--pairs", str(pairs), "-o"]
    assert main([*base, str(tmp_path / "r.h5")]) == 0
    assert main([*base, str(tmp_path / "short.csv")]) == 0
    assert main([*base, str(tmp_path / "full.csv"), "--full-precision"]) == 0
    with h5py.File(tmp_path / "r.h5") as h5:
        exact = float(h5["resistance/ohms"][0])                     # HDF5: every digit
    short = (tmp_path / "short.csv").read_text().splitlines()[1].split(",")[2]
    full = (tmp_path / "full.csv").read_text().splitlines()[1].split(",")[2]
    assert short == f"{exact:.12g}" and float(full) == exact and full == repr(exact)
    assert main(["resistance", str(net), "--pairs", str(pairs), "--full-precision"]) == 0
    assert repr(exact) in capsys.readouterr().out


def test_compare_csv_full_precision(tmp_path, capsys):
    net, meas = tmp_path / "third.csv", tmp_path / "meas.csv"
    net.write_text(THIRD)
    meas.write_text("kind,a,b,value,accuracy\nR,a,0,0.3334,1%\n")
    assert main(["compare", str(net), str(meas), "-o", str(tmp_path / "c.csv"),
                 "--full-precision"]) == 0
    table = pd.read_csv(tmp_path / "c.csv")
    assert table["model"][0] == pytest.approx(1 / 3, rel=1e-14) and table["status"][0] == "pass"
    out = capsys.readouterr().out
    # the reading and its model to the place of the band's second digit: 0.0033 ohm -> 4 places
    assert " 0.3334 ohm " in out and " 0.3333 ohm " in out
