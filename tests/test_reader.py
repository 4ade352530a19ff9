"""Tests of the network file reader (``ohmgraph.io.reader``) and its error messages.

Expected values are read off the tiny files written in each test (hand reasoning); the external
IBM power-grid file is checked against the element counts published in its README.
"""

from __future__ import annotations

import csv
import gzip
from pathlib import Path

import numpy as np
import pyarrow as pa
import pytest

from ohmgraph.engine.network import CURRENT_SOURCE, RESISTOR, VOLTAGE_SOURCE
from ohmgraph.engine.solve import solve
from ohmgraph.io import reader
from ohmgraph.io.cli import main
from ohmgraph.io.errors import InputError
from ohmgraph.io.reader import locate_lines, read_network

PG1 = Path(__file__).resolve().parents[1].parent / "shared" / "validation" / "pg1.csv.gz"


def write(tmp_path: Path, name: str, text: str) -> Path:
    path = tmp_path / name
    if name.endswith(".gz"):
        path.write_bytes(gzip.compress(text.encode()))
    else:
        path.write_text(text)
    return path


def branch_table(net) -> list:
    """(name, kind, from label, to label, value) of every branch, for comparisons."""
    labels = net.node_labels
    return [(str(net.branch_names[k]), int(net.kind[k]), str(labels[net.from_node[k]]),
             str(labels[net.to_node[k]]), float(net.value[k])) for k in range(net.n_branches)]


THREE_BRANCHES = "name,kind,from,to,value\nV1,V,in,0,5\nR1,R,in,mid,2\nR2,R,mid,0,3\n"


# ------------------------------------------------------------------------------ formats
def test_csv_branch_table(tmp_path):
    net = read_network(write(tmp_path, "net.csv", THREE_BRANCHES))
    assert branch_table(net) == [("V1", VOLTAGE_SOURCE, "in", "0", 5.0),
                                 ("R1", RESISTOR, "in", "mid", 2.0),
                                 ("R2", RESISTOR, "mid", "0", 3.0)]
    assert sorted(net.node_labels.tolist()) == ["0", "in", "mid"]
    assert net.reference_label == "0"


def test_any_column_order_case_and_optional_columns(tmp_path):
    text = "VALUE,To,from\n2.5,b,a\n4,0,b\n"
    net = read_network(write(tmp_path, "net.csv", text))
    # no name column: 1-based row numbers; no kind column: resistors
    assert branch_table(net) == [("1", RESISTOR, "a", "b", 2.5), ("2", RESISTOR, "b", "0", 4.0)]


def test_kinds_are_case_insensitive_and_empty_kind_is_resistor(tmp_path):
    text = "from,to,kind,value,name\na,0,v,1.5,src\na,b,,10,\nb,0,i,0.25,load\n"
    net = read_network(write(tmp_path, "net.csv", text))
    assert net.kind.tolist() == [VOLTAGE_SOURCE, RESISTOR, CURRENT_SOURCE]
    # an empty name falls back to the row number, like a missing name column
    assert net.branch_names.tolist() == ["src", "2", "load"]


def test_tsv_with_arbitrary_labels(tmp_path):
    text = ("name\tkind\tfrom\tto\tvalue\n"
            "feed\tV\tbus A\tGND\t12\n"
            'r,1\tR\tbus A\t"nœud β"\t1e3\n'
            "r2\tR\t\"nœud β\"\tGND\t  2.5  \n")
    net = read_network(write(tmp_path, "net.tsv", text), ground="GND")
    assert branch_table(net) == [("feed", VOLTAGE_SOURCE, "bus A", "GND", 12.0),
                                 ("r,1", RESISTOR, "bus A", "nœud β", 1000.0),
                                 ("r2", RESISTOR, "nœud β", "GND", 2.5)]
    assert net.reference_label == "GND"


def test_ground_option_names_the_reference(tmp_path):
    net = read_network(write(tmp_path, "net.csv", THREE_BRANCHES), ground="mid")
    assert net.reference_label == "mid"


@pytest.mark.parametrize("name", ["net.csv.gz", "net.CSV"])
def test_compressed_and_upper_case_extension(tmp_path, name):
    plain = read_network(write(tmp_path, "plain.csv", THREE_BRANCHES))
    other = read_network(write(tmp_path, name, THREE_BRANCHES))
    assert branch_table(other) == branch_table(plain)


EDGE_LIST = """# a ladder of three resistors
# from to ohms

a   b  2.0   # first rung
   # an indented comment
b\t0\t3
\t
a 0 1e1
"""


@pytest.mark.parametrize("name", ["ladder.txt", "ladder.edges", "ladder.el.gz"])
def test_edge_list_with_comments_and_blank_lines(tmp_path, name):
    path = write(tmp_path, name, EDGE_LIST)
    net = read_network(path)
    assert branch_table(net) == [("1", RESISTOR, "a", "b", 2.0), ("2", RESISTOR, "b", "0", 3.0),
                                 ("3", RESISTOR, "a", "0", 10.0)]
    # physical lines of the three data rows, counted by hand in EDGE_LIST
    assert locate_lines(path, [0, 1, 2]).tolist() == [4, 6, 8]


def test_locate_lines_skips_header_and_blank_lines(tmp_path):
    text = "\nname,from,to,value\n\nR1,a,0,1\n\n\nR2,a,0,2\n"
    path = write(tmp_path, "net.csv", text)
    assert read_network(path).branch_names.tolist() == ["R1", "R2"]
    assert locate_lines(path, [1, 0]).tolist() == [7, 4]      # counted by hand
    with pytest.raises(InputError, match="no branch row 2"):
        locate_lines(path, [2])


def test_non_finite_and_negative_values_parse(tmp_path):
    # they are electrical problems, reported by the check, not reading errors
    text = "from,to,value\na,0,nan\na,0,-inf\na,0,-4\na,0,Infinity\n"
    value = read_network(write(tmp_path, "net.csv", text)).value
    assert np.isnan(value[0]) and value[1] == -np.inf and value[2] == -4 and value[3] == np.inf


def test_fast_path_agrees_with_exact_pass(tmp_path):
    """The vectorised reader and the line-by-line exact pass build the same network."""
    rng = np.random.default_rng(7)
    m = 3000
    frm, to = rng.integers(0, 400, m), rng.integers(0, 400, m)
    kinds = rng.choice(["R", "r", "V", "I", ""], m)
    values = rng.uniform(-5, 5, m).tolist()
    rows = [f"b{k},{kinds[k]},n{frm[k]},n{to[k]},{values[k]!r}" for k in range(m)]
    text = "name,kind,from,to,value\n" + "\n".join(rows) + "\nlast,R,n0,0,1\n"
    path = write(tmp_path, "net.csv", text)
    fast = read_network(path)
    exact = reader._build_network(
        path, reader._exact_table(path, ",", ["name", "kind", "from", "to", "value"]), "0")
    assert branch_table(fast) == branch_table(exact)
    assert fast.node_labels.tolist() == exact.node_labels.tolist()

    edges = "\n".join(f"n{a} n{b} {v!r}" for a, b, v in zip(frm, to, values)) + "\nn0 0 1\n"
    path = write(tmp_path, "net.edges", edges)
    fast = read_network(path)
    exact = reader._build_network(path, reader._exact_edge_list(path), "0")
    assert branch_table(fast) == branch_table(exact)

    unweighted = "\n".join(f"n{a}\tn{b}" for a, b in zip(frm, to)) + "\n# end\nn0 0\n"
    path = write(tmp_path, "graph.txt", unweighted)
    fast = reader.read_network_file(path)
    exact_columns = reader._exact_edge_list(path)
    exact = reader._build_network(path, exact_columns, "0")
    assert branch_table(fast.network) == branch_table(exact)
    assert exact_columns.values_defaulted and [f.code for f in fast.findings] == [
        "default-resistance"]


def test_two_field_edge_list_is_one_ohm_resistors_with_an_info_finding(tmp_path, capsys):
    # the usual form of an unweighted graph: 'from to' per line
    path = write(tmp_path, "graph.txt", "# path graph\na b\nb 0  # trailing comment\n\na 0\n")
    read = reader.read_network_file(path)
    assert branch_table(read.network) == [("1", RESISTOR, "a", "b", 1.0),
                                          ("2", RESISTOR, "b", "0", 1.0),
                                          ("3", RESISTOR, "a", "0", 1.0)]
    (finding,) = read.findings
    assert (finding.severity, finding.code) == ("info", "default-resistance")
    assert "3 branch(es) is read as a 1 ohm resistor" in finding.message
    report = read.check()
    assert report.solvable and report.findings[-1] is finding
    assert main(["check", str(path)]) == 0
    assert "info default-resistance:" in capsys.readouterr().out
    # a weighted list has no such finding
    assert reader.read_network_file(write(tmp_path, "w.txt", "a 0 2\n")).findings == ()


@pytest.mark.parametrize("text, line, count, width", [
    ("a b\n\nb 0 2\na 0\n", 3, 3, 2),      # first branch line two fields, line 3 three
    ("# w\na b 2\nb 0\n", 3, 2, 3),         # first branch line three fields, line 3 two
])
def test_mixed_two_and_three_field_edge_list_is_refused_at_first_offender(tmp_path, capsys,
                                                                         text, line, count,
                                                                         width):
    path = write(tmp_path, "mixed.txt", text)
    with pytest.raises(InputError) as raised:
        read_network(path)
    first = str(raised.value).splitlines()[0]
    assert first.startswith(f"{path}:{line}: {count} field(s), expected {width}")
    assert "every line a value or none" in first


def test_readme_three_branch_example(tmp_path):
    """The sign-convention example of the README, solved and checked by hand.

    By Ohm's law and KVL (common practice): 5 V across 2 + 3 ohm in series drives 1 A; R1 drops
    2 V and absorbs 2 W, R2 drops 3 V and absorbs 3 W. Inside V1 the current runs from ``0`` up
    to ``in``, i.e. -1 A in the from→to sense, so V1 absorbs 5 V × -1 A = -5 W (it delivers).
    """
    net = read_network(write(tmp_path, "divider.csv", THREE_BRANCHES))
    solution = solve(net)
    order = [net.branch_names.tolist().index(name) for name in ("V1", "R1", "R2")]
    np.testing.assert_allclose(solution.branch_current[order], [-1.0, 1.0, 1.0], atol=1e-9)
    np.testing.assert_allclose(solution.branch_voltage[order], [5.0, 2.0, 3.0], atol=1e-9)
    np.testing.assert_allclose(solution.branch_power[order], [-5.0, 2.0, 3.0], atol=1e-9)
    np.testing.assert_allclose(solution.node_voltage[net.node_index(["in", "mid", "0"])],
                               [5.0, 3.0, 0.0], atol=1e-9)


@pytest.mark.skipif(not PG1.exists(), reason="../shared/validation/pg1.csv.gz is absent")
def test_ibm_power_grid_file():
    net = read_network(PG1)
    # element counts published in ../shared/validation/README.md (IBM power grid benchmark
    # pg1, Nassif, ASP-DAC 2008, converted to the branch table)
    assert net.counts_by_kind() == {"R": 30027, "V": 14308, "I": 10774}
    volts = net.value[net.kind == VOLTAGE_SOURCE]
    assert int((volts == 0).sum()) == 14031 + 177      # ideal layer connections + ground pads
    assert int((volts == 1.8).sum()) == 100              # supply pads
    # every branch against Python's standard csv module as the reference parser
    with gzip.open(PG1, "rt", newline="") as stream:
        rows = list(csv.DictReader(stream))
    kind_code = {"R": RESISTOR, "V": VOLTAGE_SOURCE, "I": CURRENT_SOURCE}
    assert branch_table(net) == [(r["name"], kind_code[r["kind"]], r["from"], r["to"],
                                  float(r["value"])) for r in rows]
    assert net.n_nodes == len({r["from"] for r in rows} | {r["to"] for r in rows})


# ------------------------------------------------------------------------------ bad input
def run_check(capsys, *argv) -> tuple[int, str]:
    code = main(["check", *map(str, argv)])
    captured = capsys.readouterr()
    assert "Traceback" not in captured.err
    return code, captured.err


BAD_INPUTS = [
    # (file name, text, expected pieces of the message)
    ("empty.csv", "", ["empty.csv", "empty"]),
    ("blank.csv", "\n\n", ["blank.csv", "empty"]),
    ("nohead.csv", "from,to\na,0\n", ["nohead.csv:1:", "no column 'value'"]),
    ("colour.csv", "from,to,value,colour\na,0,1,red\n", ["colour.csv:1:", "'colour'"]),
    ("twice.csv", "from,to,value,to\na,0,1,b\n", ["twice.csv:1:", "repeats", "'to'"]),
    ("fields.csv", "from,to,value\na,0,1\na,0\n", ["fields.csv:3:", "2 field(s), expected 3"]),
    ("nofrom.csv", "from,to,value\n\n ,0,1\n", ["nofrom.csv:3:", "column 'from'", "empty"]),
    ("noto.csv", "from,to,value\na,0,1\na,,1\n", ["noto.csv:3:", "column 'to'"]),
    ("kind.csv", "kind,from,to,value\nR,a,0,1\nC,a,0,1\n",
     ["kind.csv:3:", "column 'kind'", "'C'"]),
    ("value.csv", "from,to,value\na,0,1\na,0,abc\n",
     ["value.csv:3:", "column 'value'", "'abc' is not a number"]),
    ("novalue.csv", "from,to,value\na,0,\n", ["novalue.csv:2:", "column 'value'", "empty"]),
    ("under.csv", "from,to,value\na,0,1_000\n", ["under.csv:2:", "'1_000' is not a number"]),
    ("value.tsv", "from\tto\tvalue\na\t0\t1 ohm\n", ["value.tsv:2:", "'1 ohm'"]),
    ("ladder.txt", "# c\n\na 0 1\nb 0\n", ["ladder.txt:4:", "2 field(s), expected 3"]),
    ("single.txt", "a\nb 0\n", ["single.txt:1:", "1 field(s), expected 3 (from to ohms) or 2"]),
    ("four.txt", "a 0 1\nb 0 1 2\n", ["four.txt:2:", "4 field(s), expected 3"]),
    ("ladder.edges", "a 0 1\n  # c\nb 0 1k\n", ["ladder.edges:3:", "column 'value'", "'1k'"]),
    ("comments.txt", "# only comments\n\n", ["comments.txt", "no branches"]),
    ("header.csv", "name,from,to,value\n", ["header.csv", "no branches"]),
    ("bytes.csv", b"from,to,value\na,0,1\n\xff,0,1\n", ["bytes.csv:3:", "UTF-8"]),
    ("broken.csv.gz", b"this is not gzip data", ["broken.csv.gz", "cannot be read"]),
    ("short.edges.gz", gzip.compress(np.random.default_rng(1).bytes(4000))[:2000],
     ["short.edges.gz", "cannot be read"]),
]


@pytest.mark.parametrize("name, content, pieces", BAD_INPUTS, ids=[c[0] for c in BAD_INPUTS])
def test_bad_input_is_one_clear_message_and_exit_2(tmp_path, capsys, name, content, pieces):
    path = tmp_path / name
    path.write_bytes(content if isinstance(content, bytes) else content.encode())
    code, err = run_check(capsys, path)
    assert code == 2
    for piece in pieces:
        assert piece in err


def test_missing_file(tmp_path, capsys):
    code, err = run_check(capsys, tmp_path / "absent.csv")
    assert code == 2 and "absent.csv: no such file" in err


def test_reference_not_a_node(tmp_path, capsys):
    path = write(tmp_path, "net.csv", THREE_BRANCHES)
    code, err = run_check(capsys, path, "--ground", "gnd")
    assert code == 2 and "'gnd' is not a node" in err and "name another with --ground" in err


def test_every_bad_row_is_reported_up_to_ten(tmp_path, capsys):
    rows = "".join(f"a,0,x{k}\n" for k in range(12))
    path = write(tmp_path, "many.csv", "from,to,value\n" + rows)
    code, err = run_check(capsys, path)
    assert code == 2
    assert "many.csv:2: column 'value': 'x0'" in err and "many.csv:11:" in err
    assert "many.csv:12:" not in err and "and 2 more" in err


def test_parquet_branch_table_reads_like_the_csv(tmp_path, make_network):
    import pyarrow as pa
    import pyarrow.parquet as pq

    from ohmgraph.io.branch_table import write_branch_table

    write_branch_table(tmp_path / "net.csv", make_network(4))
    expected = read_network(tmp_path / "net.csv")
    # Typed columns (integers for labels, doubles for values), upper-case names, other order.
    pq.write_table(pa.table({
        "VALUE": expected.value, "From": expected.node_labels[expected.from_node].astype(int),
        "to": expected.node_labels[expected.to_node].astype(int),
        "kind": np.array(["R", "V", "I"])[expected.kind], "name": expected.branch_names}),
        tmp_path / "net.parquet")
    got = read_network(tmp_path / "net.parquet")
    for field in ("node_labels", "branch_names", "kind", "from_node", "to_node", "value"):
        np.testing.assert_array_equal(getattr(got, field), getattr(expected, field))


def test_spellings_that_trim_to_one_label_are_one_node(tmp_path):
    # labels are trimmed in the endpoint dictionary; the exact pass trims every field first
    text = ("name,kind,from,to,value\n"
            "a,R, n2 ,n1,1\nb, r ,n1 ,0,2\nc,R,n3,  n2,3\nd,V,0,n3\t,1\ne,R,n1,n3, 4 \n")
    path = write(tmp_path, "spaced.csv", text)
    fast = read_network(path)
    exact = reader._build_network(
        path, reader._exact_table(path, ",", ["name", "kind", "from", "to", "value"]), "0")
    assert fast.node_labels.tolist() == ["n2", "n1", "n3", "0"]
    assert fast.node_labels.tolist() == exact.node_labels.tolist()
    assert branch_table(fast) == branch_table(exact)


@pytest.mark.parametrize("texts", [["n1", "", "node_12345"], ["Ω", "a", "ünï-λ"], [], [""]])
def test_arrow_text_to_numpy_agrees_with_python_strings(texts):
    array = pa.array(texts, pa.string())
    fast = reader._to_numpy_text(array)
    expected = reader._to_numpy_text_reference(array)
    assert fast.dtype.kind == "U" and fast.tolist() == expected.tolist() == texts
    sliced = pa.array(["skip", *texts], pa.string()).slice(1)
    assert reader._to_numpy_text(sliced).tolist() == texts


@pytest.mark.parametrize("texts, may", [(["a", "bc", ""], False), (["a ", "b"], True),
                                        (["\tx"], True), (["x\x1f"], True), (["xλ"], True),
                                        (["\u00a0x"], True), ([], False), ([""], False)])
def test_trimming_is_skipped_only_where_it_cannot_change_anything(texts, may):
    array = pa.array(["pad", *texts], pa.string()).slice(1)
    assert reader._may_need_trimming(array) == may
    if not may:                             # Arrow's trim is the reference
        assert pa.compute.utf8_trim_whitespace(array).to_pylist() == texts
