"""The ``resistance`` command: lattice values, tables, exit codes, no partial output."""

from __future__ import annotations

import json
import math
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.io.cli import main

SIDE = 61          # odd, so the lattice has a centre node
CENTRE = SIDE // 2


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def lattice(tmp_path_factory):
    """A 61 x 61 lattice of 2-ohm resistors as a branch table (reference: the corner 0_0)."""
    net = grid2d(SIDE, SIDE, 2.0)
    path = tmp_path_factory.mktemp("lattice") / "lattice.csv"
    pd.DataFrame({"name": net.branch_names, "kind": "R",
                  "from": net.node_labels[net.from_node], "to": net.node_labels[net.to_node],
                  "value": net.value}).to_csv(path, index=False)
    return path


@pytest.fixture
def small(tmp_path):
    path = tmp_path / "small.csv"
    path.write_text("name,kind,from,to,value\n"
                    "r1,R,0,a,2\nr2,R,a,b,3\nr3,R,0,b,5\nsupply,V,b,c,5\nload,I,c,0,1\n"
                    "r4,R,x,y,1\n")
    return path


def test_lattice_values_through_the_command(lattice, capsys):
    centre = f"{CENTRE}_{CENTRE}"
    code, out, err = run(capsys, "resistance", lattice, "--ground", "0_0",
                         "--between", centre, f"{CENTRE + 1}_{CENTRE}", "--json")
    assert code == 0, err
    adjacent = json.loads(out)
    code, out, _ = run(capsys, "resistance", lattice, "--ground", "0_0",
                       "--between", centre, f"{CENTRE + 1}_{CENTRE + 1}", "--json")
    diagonal = json.loads(out)
    # Infinite square lattice of resistors R: adjacent R/2, diagonal 2R/pi (J. Cserti, Am. J.
    # Phys. 68, 896 (2000)); the finite lattice reads slightly more (Rayleigh monotonicity).
    assert adjacent["ohms"] == pytest.approx(2.0 / 2, rel=2e-3)
    assert diagonal["ohms"] == pytest.approx(2 * 2.0 / math.pi, rel=2e-3)
    assert adjacent["ohms"] >= 1.0 and diagonal["ohms"] >= 4.0 / math.pi
    assert adjacent["accuracy"] < 1e-10


def test_between_prints_value_and_islands_plainly(small, capsys):
    code, out, _ = run(capsys, "resistance", small, "--between", "0", "a")
    # Series/parallel (common practice): 2 ohm parallel to (3 + 5) ohm = 1.6 ohm.
    assert code == 0 and "R(0, a) = 1.6 ohm" in out
    code, out, _ = run(capsys, "resistance", small, "--between", "0", "x")
    assert code == 0 and "infinite" in out and "different islands" in out


def test_pairs_to_csv_and_hdf5(small, tmp_path, capsys):
    pairs = tmp_path / "pairs.csv"
    pairs.write_text("a,b\n0,a\nb,c\n0,x\na,a\n")
    out_csv = tmp_path / "out.csv"
    code, _, err = run(capsys, "resistance", small, "--pairs", pairs, "-o", out_csv)
    assert code == 0, err
    table = pd.read_csv(out_csv, dtype={"a": str, "b": str})
    assert list(table.columns) == ["a", "b", "ohms", "accuracy"]
    # 1.6 ohm (series/parallel, common practice); b-c joined by a shorted source: 0;
    # different islands: infinite; one node: 0.
    np.testing.assert_allclose(table["ohms"], [1.6, 0.0, np.inf, 0.0])
    out_h5 = tmp_path / "out.h5"
    code, _, _ = run(capsys, "resistance", small, "--pairs", pairs, "-o", out_h5)
    assert code == 0
    with h5py.File(out_h5) as store:
        group = store["resistance"]
        np.testing.assert_allclose(group["ohms"][:], [1.6, 0.0, np.inf, 0.0])
        assert [s.decode() for s in group["a"][:]] == ["0", "b", "0", "a"]
        assert group.attrs["pairs"] == 4


def test_many_pairs_state_bounds_rounded_up_to_two_digits(lattice, tmp_path, capsys):
    rng = np.random.default_rng(5)
    x = rng.integers(0, SIDE, (4, 60))
    pairs = tmp_path / "pairs.csv"
    pairs.write_text("a,b\n" + "".join(f"{p}_{q},{r}_{s}\n" for p, q, r, s in x.T))
    out = tmp_path / "out.csv"
    code, printed, err = run(capsys, "resistance", lattice, "--pairs", pairs, "-o", out, "--json",
                             "--method", "direct")
    assert code == 0, err
    summary = json.loads(printed)
    assert summary["method"] == "factor reach" and 0 < summary["factor_delta"] < 1e-8
    text = pd.read_csv(out, dtype=str)["accuracy"]
    # two significant digits, each at least the engine's bound (rounded up, never down)
    assert all(len(t.split("e")[0].replace(".", "").lstrip("0")) <= 2 for t in text)
    stated = text.astype(float).to_numpy()
    assert np.all(stated >= summary["factor_delta"]) and stated.max() < 1e-8
    # the stored table says which back end did the work, why, and what it reached
    stored = json.loads(Path(f"{out}.provenance.json").read_text())["summary"]
    assert stored["solver_method"] == "direct" and stored["solver_reason"] == "asked for"
    assert stored["solver_solves"] == summary["solves"]
    assert 0 < stored["solver_max_relative_residual"] <= 1e-10


def test_to_reference_and_across_resistors(small, capsys):
    code, out, _ = run(capsys, "resistance", small, "--to-reference", "a", "b", "--json")
    rows = json.loads(out)["rows"]
    assert code == 0 and [r["b"] for r in rows] == ["0", "0"]
    # 2 || 8 = 1.6 ohm and 5 || 5 = 2.5 ohm (series/parallel, common practice).
    assert [r["ohms"] for r in rows] == pytest.approx([1.6, 2.5])
    code, out, _ = run(capsys, "resistance", small, "--across-resistors", "--json")
    result = json.loads(out)
    assert code == 0 and result["exact"]
    # Foster (1949), per island: (3 - 1) for the triangle plus (2 - 1) for x-y.
    assert result["share_sum"] == pytest.approx(3.0)


def test_kirchhoff_command(tmp_path, capsys):
    path = tmp_path / "ring.csv"
    n = 10
    path.write_text("from,to,value\n" + "".join(f"{i},{(i + 1) % n},1\n" for i in range(n)))
    code, out, _ = run(capsys, "resistance", path, "--kirchhoff", "--json")
    # Cycle C_n with unit resistors: (n^3 - n) / 12 (Klein & Randić, J. Math. Chem. 12, 1993).
    assert code == 0 and json.loads(out)["value"] == pytest.approx((n ** 3 - n) / 12)
    code, out, _ = run(capsys, "resistance", path, "--kirchhoff", "--estimate", "--samples", "50")
    assert code == 0 and "confidence interval" in out


@pytest.mark.parametrize("content, expected", [
    ("a,b\n0,a\n0,nowhere\n", "pairs.csv:3: column 'b': unknown node 'nowhere'"),
    ("a,c\n0,a\n", "pairs.csv:1: missing column 'b'"),
    ("a,b\n0,a\n\n", "pairs.csv:3: column 'a' is empty"),
    ("a,b\n0,a,extra,more\n0\n", "pairs.csv"),
    ("", "pairs.csv: the file is empty"),
])
def test_bad_pairs_file_exit_2_without_output(small, tmp_path, capsys, content, expected):
    pairs = tmp_path / "pairs.csv"
    pairs.write_text(content)
    out = tmp_path / "out.csv"
    code, _, err = run(capsys, "resistance", small, "--pairs", pairs, "-o", out)
    assert code == 2 and expected in err and "Traceback" not in err
    assert not out.exists() and list(tmp_path.glob(".out.csv*")) == []


def test_bad_queries_exit_2(small, tmp_path, capsys):
    code, _, err = run(capsys, "resistance", small, "--between", "0", "ghost")
    assert code == 2 and "--between: unknown node 'ghost'" in err
    code, _, err = run(capsys, "resistance", small, "--to-reference", "ghost")
    assert code == 2 and "unknown node 'ghost'" in err
    code, _, err = run(capsys, "resistance", tmp_path / "missing.csv", "--between", "0", "a")
    assert code == 2 and "no such file" in err
    code, _, err = run(capsys, "resistance", small, "--across-resistors", "-o", tmp_path / "x.txt")
    assert code == 2 and "unsuitable output type '.txt'" in err
    code, _, err = run(capsys, "resistance", small, "--kirchhoff", "-o", tmp_path / "k.csv")
    assert code == 2 and "-o writes a table" in err and not (tmp_path / "k.csv").exists()
    with pytest.raises(SystemExit) as stop:
        main(["resistance", str(small)])          # no query chosen
    assert stop.value.code == 2


def test_existing_output_needs_force(small, tmp_path, capsys):
    out = tmp_path / "out.csv"
    out.write_text("keep me")
    code, _, err = run(capsys, "resistance", small, "--across-resistors", "-o", out)
    assert code == 3 and "already exists" in err and out.read_text() == "keep me"
    code, _, _ = run(capsys, "resistance", small, "--across-resistors", "-o", out, "--force")
    assert code == 0 and out.read_text().startswith("name,from,to")


def test_negative_resistance_is_not_well_posed(tmp_path, capsys):
    path = tmp_path / "neg.csv"
    path.write_text("from,to,value\n0,1,-5\n")
    code, _, err = run(capsys, "resistance", path, "--between", "0", "1")
    assert code == 1 and "not well-posed" in err


def test_across_resistors_sketch_to_hdf5(lattice, tmp_path, capsys):
    out = tmp_path / "shares.h5"
    code, text, err = run(capsys, "resistance", lattice, "--ground", "0_0", "--across-resistors",
                          "--estimate", "--sketch-size", "64", "-o", out, "--json")
    assert code == 0, err
    summary = json.loads(text)
    assert not summary["exact"] and summary["sketch_size"] == 64
    with h5py.File(out) as store:
        group = store["resistance"]
        share = group["share"][:]
        assert group.attrs["sketch_size"] == 64 and share.size == 2 * SIDE * (SIDE - 1)
        # Foster (1949): the shares sum to n - 1; the sketch's sum carries the per-value relative
        # spread sqrt(2/k) (Spielman & Srivastava 2008) divided by about sqrt(number of values).
        assert share.sum() == pytest.approx(SIDE * SIDE - 1, rel=0.02)
        np.testing.assert_allclose(group["accuracy"][:], math.sqrt(2 / 64))
