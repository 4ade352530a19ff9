"""The file-format registry (``ohmgraph.io.formats``) and Parquet branch tables.

Expected values are read off the small networks each test writes (hand reasoning); Parquet
files are written and read back with pyarrow, the reference implementation of the format.
"""

from __future__ import annotations

import ast
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from ohmgraph.datasets import ladder
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.cli import main
from ohmgraph.io.errors import EXIT_FAILED, InputError, NotWellPosed, UserError
from ohmgraph.io.formats import (CSV, EDGE_LIST, HDF5, PARQUET, TSV, detect_format,
                                 network_format, require_format, suffixes_of)
from ohmgraph.io.reader import locate_lines, read_network

ARRAYS = ("node_labels", "branch_names", "kind", "from_node", "to_node", "value")
COMMANDS = Path(__file__).resolve().parents[1] / "io" / "commands"


@pytest.mark.parametrize("name, expected, gzipped", [
    ("net.csv", CSV, False), ("NET.CSV.GZ", CSV, True), ("net.tsv.gz", TSV, True),
    ("g.txt", EDGE_LIST, False), ("g.edges", EDGE_LIST, False), ("g.el.gz", EDGE_LIST, True),
    ("net.parquet", PARQUET, False), ("out.h5", HDF5, False), ("out.HDF5", HDF5, False),
])
def test_suffixes_map_to_one_format_each(name, expected, gzipped):
    found = detect_format(name)
    assert (found.name, found.gzipped) == (expected, gzipped)


def test_unknown_and_unsuitable_suffixes_are_refused_clearly():
    assert detect_format("net.xlsx") is None and detect_format("net.parquet.gz") is None
    with pytest.raises(InputError, match=r"-o out.xlsx: unknown output type '.xlsx' "
                                         r"\(expected .csv, .h5, .hdf5, .csv.gz\)"):
        require_format("out.xlsx", (CSV, HDF5), role="-o")
    with pytest.raises(InputError, match="unsuitable output type '.csv', a comma-separated"):
        require_format("out.csv", (HDF5,))
    assert suffixes_of((CSV, TSV)) == [".csv", ".tsv", ".csv.gz", ".tsv.gz"]
    # a network file with no known suffix is an edge list (README: "any other extension")
    assert network_format("graph.dat").name == EDGE_LIST
    assert network_format("graph.dat.gz").gzipped
    with pytest.raises(InputError, match="an HDF5 file is not a network file"):
        network_format("solution.h5")


def test_parquet_branch_table_round_trip(tmp_path):
    net = ladder(4)
    write_branch_table(tmp_path / "net.parquet", net)
    write_branch_table(tmp_path / "net.csv", net)
    from_parquet = read_network(tmp_path / "net.parquet")
    from_csv = read_network(tmp_path / "net.csv")
    for name in ARRAYS:
        np.testing.assert_array_equal(getattr(from_parquet, name), getattr(from_csv, name))
    np.testing.assert_array_equal(from_parquet.value, net.value)     # every bit kept
    assert locate_lines(tmp_path / "net.parquet", [2, 0]).tolist() == [3, 1]   # 1-based rows


def test_parquet_with_typed_columns_and_optional_ones(tmp_path):
    # integer labels become their decimal text; no name or kind column: row numbers, resistors
    path = tmp_path / "typed.parquet"
    pq.write_table(pa.table({"FROM": pa.array([1, 2], pa.int64()), "to": pa.array([0, 0]),
                             "value": pa.array([0.1 + 0.2, 4.0])}), path)
    net = read_network(path)
    assert net.node_labels.tolist() == ["1", "2", "0"]
    assert net.branch_names.tolist() == ["1", "2"] and net.value.tolist() == [0.1 + 0.2, 4.0]


def test_bad_parquet_rows_are_named_by_row(tmp_path, capsys):
    path = tmp_path / "bad.parquet"
    pq.write_table(pa.table({"from": ["a", None, "b"], "to": ["0", "0", "0"],
                             "value": ["1", "2", "x"]}), path)
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert f"{path}:row 2: column 'from': empty node label" in err
    assert f"{path}:row 3: column 'value': 'x' is not a number" in err
    pq.write_table(pa.table({"from": ["a"], "to": ["0"], "ohms": [1.0]}), path)
    assert main(["check", str(path)]) == 2
    assert "has unknown column(s) 'ohms'" in capsys.readouterr().err
    path.write_bytes(b"PAR1 not really")
    assert main(["check", str(path)]) == 2
    assert "not a readable Parquet file" in capsys.readouterr().err


def test_check_report_names_parquet_rows(tmp_path, capsys):
    path = tmp_path / "loop.parquet"
    pq.write_table(pa.table({"from": ["a", "a"], "to": ["a", "0"], "value": [1.0, 1.0]}), path)
    assert main(["check", str(path)]) == 0
    assert "'1' (row 1)" in capsys.readouterr().out           # the self-loop warning


def test_not_well_posed_is_an_io_error_with_exit_1():
    assert issubclass(NotWellPosed, UserError) and NotWellPosed.exit_code == EXIT_FAILED == 1


@pytest.mark.parametrize("command", ["diagnose.py", "tolerance.py"])
def test_reading_commands_do_not_import_compare(command):
    tree = ast.parse((COMMANDS / command).read_text())
    imported = {node.module for node in ast.walk(tree) if isinstance(node, ast.ImportFrom)}
    assert "ohmgraph.io.commands.compare" not in imported
    assert "ohmgraph.io.commands.reading_options" in imported
