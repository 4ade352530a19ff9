"""``resistance`` needs a reference node only for --to-reference."""

from __future__ import annotations

import json

import pytest

from ohmgraph.io.cli import main


@pytest.fixture
def cube(tmp_path):
    """The unit-resistor cube with corners c0..c7 (no node named 0)."""
    edges = [(u, v) for u in range(8) for v in range(u + 1, 8) if bin(u ^ v).count("1") == 1]
    path = tmp_path / "cube.csv"
    path.write_text("from,to,value\n" + "".join(f"c{u},c{v},1\n" for u, v in edges))
    return path


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


# Unit-resistor cube: body diagonal 5/6, face diagonal 3/4, edge 7/12 ohm
# (F. J. van Steenwijk, Am. J. Phys. 66, 90 (1998); values recalled from memory).
def test_between_without_a_reference(cube, capsys):
    code, out, err = run(capsys, "resistance", cube, "--between", "c0", "c7", "--json")
    assert code == 0, err
    assert json.loads(out)["ohms"] == pytest.approx(5 / 6, rel=1e-12)
    # an explicit --ground is still honoured, and gives the same value
    code, out, _ = run(capsys, "resistance", cube, "--ground", "c3", "--between", "c0", "c7",
                       "--json")
    assert code == 0 and json.loads(out)["ohms"] == pytest.approx(5 / 6, rel=1e-12)


def test_pairs_kirchhoff_and_across_without_a_reference(cube, tmp_path, capsys):
    pairs = tmp_path / "pairs.csv"
    pairs.write_text("a,b\nc0,c7\nc0,c3\nc0,c1\n")
    code, out, err = run(capsys, "resistance", cube, "--pairs", pairs, "--json")
    assert code == 0, err
    assert [r["ohms"] for r in json.loads(out)["rows"]] == pytest.approx([5 / 6, 3 / 4, 7 / 12])
    code, out, _ = run(capsys, "resistance", cube, "--across-resistors", "--json")
    assert code == 0
    assert {round(r["ohms"], 12) for r in json.loads(out)["rows"]} == {round(7 / 12, 12)}
    code, out, _ = run(capsys, "resistance", cube, "--kirchhoff", "--json")
    # Sum over the 28 pairs: 12 edges of 7/12, 12 face diagonals of 3/4, 4 body diagonals
    # of 5/6 (van Steenwijk 1998) = 7 + 9 + 10/3.
    assert code == 0 and json.loads(out)["value"] == pytest.approx(7 + 9 + 10 / 3, rel=1e-12)


def test_to_reference_still_needs_one(cube, capsys):
    code, _, err = run(capsys, "resistance", cube, "--to-reference", "c7")
    assert code == 2 and "reference node '0' is not a node" in err and "--ground" in err
    code, out, err = run(capsys, "resistance", cube, "--to-reference", "c7", "--ground", "c0",
                         "--json")
    assert code == 0, err
    assert json.loads(out)["rows"][0]["ohms"] == pytest.approx(5 / 6, rel=1e-12)
