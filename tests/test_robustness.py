"""Adversarial inputs to every command: one clear message, the documented exit code, no
traceback, no warning noise and no output or temporary file left behind.

Each case runs the command line in-process inside a folder of small input files (built by
:func:`workspace`). A traceback fails the test (the exception escapes :func:`main`), NumPy
floating-point warnings are turned into errors, and after the run the folder must hold exactly
the files it held before, with the inputs unchanged.
"""

from __future__ import annotations

import gzip
import warnings

import h5py
import numpy as np
import pytest

import ohmgraph.datasets.generators as generators
from ohmgraph.io.cli import main
from ohmgraph.io.errors import (EXIT_BAD_INPUT, EXIT_FAILED, EXIT_NO_MEMORY, EXIT_OK,
                                EXIT_OUTPUT_REFUSED, EXIT_SOLVER_FAILED)

# A loaded divider: 10 V across 1 kohm + 3 kohm, 2 mA drawn from the middle.
NET = ("name,kind,from,to,value\nsupply,V,top,0,10\nr_upper,R,top,mid,1000\n"
       "r_lower,R,mid,0,3000\nload,I,mid,0,0.002\n")
ISLANDS = "from,to,value\na,0,1\nb,c,1\n"             # b-c has no path to the reference


def _parquet(columns: dict) -> bytes:
    import pyarrow as pa
    import pyarrow.parquet as pq

    sink = pa.BufferOutputStream()
    pq.write_table(pa.table(columns), sink)
    return sink.getvalue().to_pybytes()


LONG = "x" * 300                                    # longer than a file name may be (POSIX 255)


def _solution(path) -> None:
    main(["solve", "net.csv", "-o", str(path)])


def _tampered(path, change) -> None:
    _solution(path)
    with h5py.File(path, "a") as h5:
        change(h5)


def _tampered_network(path) -> None:
    main(["convert", "net.csv", "-o", str(path)])
    with h5py.File(path, "a") as h5:
        h5["branches/kind"][1] = b"X"


def _replace(h5, name, data) -> None:
    del h5[name]
    h5[name] = data


def _readings_result(path) -> None:
    """An ohmgraph HDF5 file of another kind: the result of comparing readings."""
    main(["compare", "net.csv", "meas.csv", "-o", str(path)])


def _foreign(path) -> None:
    with h5py.File(path, "w") as h5:
        h5["x"] = np.arange(3)


FILES = {
    "net.csv": NET,
    "net_bom_crlf.csv": "\ufeff" + NET.replace("\n", "\r\n"),
    "net_unicode.csv": "from,to,value\nα,0,1\nα,Ω ß,2\nΩ ß,0,3\n",
    "net.csv.gz": gzip.compress(NET.encode()),
    "truncated.csv.gz": gzip.compress(NET.encode())[:20],
    "garbage.csv": bytes(range(255, -1, -1)) * 4,    # invalid UTF-8 on line 1
    "empty.csv": "",
    "header_only.csv": "name,kind,from,to,value\n",
    "nul_label.csv": "from,to,value\na\x00,0,1\na,0,2\n",
    "tiny_ohms.csv": "from,to,value\n1,0,1e-320\n",
    "wide_spread.csv": "name,kind,from,to,value\nV1,V,1,0,1\nR1,R,1,2,1e-300\nR2,R,2,0,1e300\n",
    "overflow.csv": "name,kind,from,to,value\nV1,V,1,0,1e300\nR1,R,1,0,1e-300\n",
    "islands.csv": ISLANDS,
    "graph.txt": "top mid\nmid 0\n",
    "mixed.txt": "top mid\nmid 0 3000\n",
    "bad.parquet": _parquet({"from": ["1", "", "2"], "to": ["0", "2", "0"],
                             "value": ["1", "x", "0.5"]}),
    "no_value.parquet": _parquet({"from": ["1"], "to": ["0"]}),
    "junk.parquet": "not parquet",
    "kvl.csv": "name,kind,from,to,value\nV1,V,1,0,5\nV2,V,1,0,3\nR1,R,1,0,1\n",
    "negative.csv": "name,kind,from,to,value\nR1,R,1,0,-1\nR2,R,1,0,1\n",
    "sources_only.csv": "name,kind,from,to,value\nV1,V,1,0,5\n",
    "meas.csv": "kind,a,b,value,accuracy\nV,mid,,6,1%\n",
    "meas_inf.csv": "kind,a,b,value\nV,mid,,inf\n",
    "meas_overflow.csv": "kind,a,b,value\nV,mid,,1e400\n",
    "meas_nan.csv": "kind,a,b,value\nV,mid,,nan\n",
    "meas_empty_cell.csv": "kind,a,b,value\nV,mid,,\n",
    "meas_unknown.csv": "kind,a,b,value\nV,nowhere,,1\n",
    "meas_unit.csv": "kind,a,b,value\nV,mid,,6mA\n",
    "meas_duplicate.csv": "kind,a,b,value\nV,mid,,6\nV,mid,,6\n",
    "meas_open.csv": "kind,a,b,value\nR,top,0,inf\n",
    "meas_zero_accuracy.csv": "kind,a,b,value,accuracy\nV,mid,,6,0%\n",
    "meas_open_islands.csv": "kind,a,b,value\nR,a,b,inf\nV,a,,0\n",
    "meas_sources_only.csv": "kind,a,b,value\nV,1,,5\n",
    "meas_islands.csv": "kind,a,b,value\nV,a,,0\n",
    "pairs.csv": "a,b\ntop,mid\n",
    "pairs_truncated.csv.gz": gzip.compress(b"a,b\ntop,mid\n")[:12],
    "meas_truncated.csv.gz": gzip.compress(b"kind,a,b,value\nV,mid,,6\n")[:12],
    "pairs_extra_field.csv": "a,b\ntop,mid,0\n",
    "pairs_repeated.csv": "a,b,a\ntop,mid,0\n",
    "pairs_no_b.csv": "a\ntop\n",
    "pairs_same_node.csv": "a,b\nmid,mid\n",
    "pairs_islands.csv": "a,b\na,b\n",
    "tol_negative.csv": "branch,tolerance\nr_upper,-1%\n",
    "tol_hundred.csv": "branch,tolerance\nr_upper,100%\n",
    "tol_source.csv": "branch,tolerance\nsupply,1%\n",
    "notes.txt": "not hdf5\n",
    "broken.parquet": b"PAR1 not really a Parquet file",
    "nodes_unknown.csv": "label,x,y\ntop,0,0\nnowhere,1,1\n",
    "nodes_bad.csv": "label,x,y\ntop,0,0\nmid,east,1\n",
    "nodes_column.csv": "label,x,y,z\ntop,0,0,1\n",
    "rated_zero.csv": "name,kind,from,to,value,max_current\nsupply,V,top,0,10,\nr1,R,top,0,5,0\n",
    "rated_negative.csv": "name,from,to,value,max_power\nr1,top,0,5,-2\n",
    "imax.csv": "name,from,to,value,imax\nr1,top,0,5,1\n",
    "chg_missing.csv": "name,value\nr_upper,2000\nnowhere,5\n",
    "chg_open_source.csv": "name,value\nsupply,inf\n",
    "chg_column.csv": "name,value,colour\nr_upper,1,red\n",
    "chg_wrong_ends.csv": "name,from,to,value\nr_upper,mid,top,5\n",
    "chg_twice.csv": "name,value\nr_upper,1\nr_upper,2\n",
    "chg_isolate.csv": "name,value\nr_upper,inf\nr_lower,inf\n",
    "tp.csv": "node\ntop\nmid\n",
    "tp_one.csv": "node\nmid\n",
    "tp_unknown.csv": "node\ntop\nnowhere\n",
    "tp_twice.csv": "node\nmid\nmid\n",
    "tp_no_header.csv": "mid\n",
}
FOLDERS = ("folder", "folder.h5", "folder.csv", "demo/sensor_board.csv")
SOLUTIONS = {
    "sol.h5": _solution,
    "foreign.h5": _foreign,
    "readings.h5": _readings_result,
    "rtol_text.h5": lambda p: _tampered(p, lambda h5: h5.attrs.__setitem__("rtol", "abc")),
    "notes_number.h5": lambda p: _tampered(p, lambda h5: h5.attrs.__setitem__("notes", 5)),
    "float_index.h5": lambda p: _tampered(
        p, lambda h5: _replace(h5, "branches/from", np.array([0.5, 1.0, 1.0, 1.0]))),
    "timing_text.h5": lambda p: _tampered(
        p, lambda h5: h5["timings"].attrs.__setitem__("read", "slow")),
    "net.h5": lambda p: main(["convert", "net.csv", "-o", str(p)]),
    "bad_kind_net.h5": lambda p: _tampered_network(p),
}


@pytest.fixture
def workspace(tmp_path, monkeypatch, capsys):
    """A folder of adversarial inputs, made the working directory."""
    monkeypatch.chdir(tmp_path)
    for name, content in FILES.items():
        path = tmp_path / name
        path.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8"))
    for name in FOLDERS:
        (tmp_path / name).mkdir(parents=True)
    for name, build in SOLUTIONS.items():
        build(tmp_path / name)
    (tmp_path / "truncated.h5").write_bytes((tmp_path / "sol.h5").read_bytes()[:4000])
    capsys.readouterr()                         # what building the solutions printed
    return tmp_path


def snapshot(folder) -> dict:
    """Every file and folder below ``folder`` with its content (None for a folder)."""
    return {str(p.relative_to(folder)): (None if p.is_dir() else p.read_bytes())
            for p in folder.rglob("*")}


def run_cli(argv, capsys) -> tuple[int, str]:
    """Exit code and everything printed; floating-point warnings are errors."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        try:
            code = main(argv)
        except SystemExit as stop:          # argparse rejected an argument
            code = stop.code
    out, err = capsys.readouterr()
    return code, out + err


# (command line, exit code, text the message must hold)
REFUSED = [
    # outputs that cannot be written: nothing may appear, not even a temporary file
    ("solve net.csv -o folder --force", EXIT_OUTPUT_REFUSED, "is a folder"),
    ("solve net.csv -o net.csv/out.h5", EXIT_OUTPUT_REFUSED, "cannot be written"),
    ("solve net.csv -o missing/out.h5", EXIT_OUTPUT_REFUSED, "does not exist"),
    ("generate grid2d 2 2 -o net.csv/out.csv", EXIT_OUTPUT_REFUSED, "cannot be written"),
    ("compare net.csv meas.csv -o net.csv/out.csv", EXIT_OUTPUT_REFUSED, "cannot be written"),
    ("compare net.csv meas.csv -o folder.h5 --append", EXIT_OUTPUT_REFUSED, "is a folder"),
    ("compare net.csv meas.csv -o notes.txt.h5 --append", EXIT_OUTPUT_REFUSED, "does not exist"),
    ("compare net.csv meas.csv -o truncated.h5 --append", EXIT_OUTPUT_REFUSED,
     "not a readable HDF5"),
    ("resistance net.csv --pairs pairs.csv -o net.csv/out.h5", EXIT_OUTPUT_REFUSED,
     "cannot be written"),
    ("resistance net.csv --pairs pairs.csv -o folder.csv --force", EXIT_OUTPUT_REFUSED,
     "is a folder"),
    ("demo --output-dir demo --size 8", EXIT_OUTPUT_REFUSED, "is a folder"),
    (f"solve net.csv -o {LONG}.h5", EXIT_OUTPUT_REFUSED, "cannot be written"),
    (f"compare net.csv meas.csv -o {LONG}.h5 --append", EXIT_OUTPUT_REFUSED, "not a readable"),
    (f"check {LONG}.csv", EXIT_BAD_INPUT, "cannot be used"),
    (f"show {LONG}.h5", EXIT_BAD_INPUT, "cannot be used"),
    (f"resistance net.csv --pairs {LONG}.csv", EXIT_BAD_INPUT, "cannot be used"),
    # an output naming an input would destroy it, --force or not
    ("solve net.csv -o net.csv --force", EXIT_BAD_INPUT, "is also the input file"),
    ("compare net.csv meas.csv -o meas.csv --force", EXIT_BAD_INPUT, "is also the input file"),
    ("resistance net.csv --pairs pairs.csv -o pairs.csv --force", EXIT_BAD_INPUT,
     "is also the input file"),
    # network files
    ("check truncated.csv.gz", EXIT_BAD_INPUT, "truncated.csv.gz: cannot be read"),
    ("check garbage.csv", EXIT_BAD_INPUT, "garbage.csv:1: not valid UTF-8"),
    ("check folder", EXIT_BAD_INPUT, "folder: not a file"),
    ("check empty.csv", EXIT_BAD_INPUT, "empty.csv: the file is empty"),
    ("check header_only.csv", EXIT_BAD_INPUT, "holds no branches"),
    ("check mixed.txt", EXIT_BAD_INPUT,
     "mixed.txt:2: 3 field(s), expected 2 (from to) like line 1"),
    ("solve mixed.txt -o out.h5", EXIT_BAD_INPUT, "mixed.txt:2: 3 field(s)"),
    ("check sol.h5", EXIT_BAD_INPUT, "sol.h5: not an ohmgraph network file"),
    ("check broken.parquet", EXIT_BAD_INPUT, "broken.parquet: not a readable Parquet file"),
    ("resistance net.csv --pairs pairs.csv -o out.txt", EXIT_BAD_INPUT,
     "-o out.txt: unsuitable output type '.txt'"),
    ("compare net.csv meas.csv --accuracy 1% -o out.parquet", EXIT_BAD_INPUT,
     "unsuitable output type '.parquet'"),
    ("generate ladder 3 -o net.xlsx", EXIT_BAD_INPUT, "unknown output type '.xlsx'"),
    ("solve net.csv -o out.csv", EXIT_BAD_INPUT, "-o out.csv: unsuitable output type '.csv'"),
    ("check nul_label.csv", EXIT_BAD_INPUT, "nul_label.csv:2: column 'from': holds a NUL"),
    ("check net.csv --ground nowhere", EXIT_BAD_INPUT, "reference node 'nowhere'"),
    ("solve net.csv -o out.h5 --ground nowhere", EXIT_BAD_INPUT, "reference node 'nowhere'"),
    ("resistance net.csv --between top mid --ground nowhere", EXIT_BAD_INPUT,
     "reference node 'nowhere'"),
    # memory budgets
    ("solve net.csv -o out.h5 --memory-budget 4XB", EXIT_BAD_INPUT, "unknown unit 'XB'"),
    ("resistance net.csv --between top mid --memory-budget=-1GB", EXIT_BAD_INPUT,
     "greater than 0"),
    ("solve net.csv -o out.h5 --memory-budget 10B", EXIT_SOLVER_FAILED,
     "neither back end fits the memory budget"),
    ("compare net.csv meas.csv --accuracy 1% --memory-budget 10B", EXIT_SOLVER_FAILED,
     "neither back end fits the memory budget"),
    # values beyond double precision
    ("check tiny_ohms.csv", EXIT_FAILED, "conductance-overflow"),
    ("solve tiny_ohms.csv -o out.h5", EXIT_FAILED, "conductance-overflow"),
    ("resistance tiny_ohms.csv --between 1 0", EXIT_FAILED, "no finite conductance"),
    ("solve overflow.csv -o out.h5", EXIT_SOLVER_FAILED, "overflows double precision"),
    ("compare overflow.csv meas_sources_only.csv --accuracy 1%", EXIT_SOLVER_FAILED,
     "overflows double precision"),
    # show
    ("show foreign.h5", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("show truncated.h5", EXIT_BAD_INPUT, "not an HDF5 file"),
    ("show notes.txt", EXIT_BAD_INPUT, "not an HDF5 file"),
    ("show folder", EXIT_BAD_INPUT, "folder: not a file"),
    ("show pairs.csv", EXIT_BAD_INPUT, "no provenance sidecar pairs.csv.provenance.json"),
    ("show rtol_text.h5", EXIT_BAD_INPUT, "'rtol' is 'abc', expected a number"),
    ("show notes_number.h5", EXIT_BAD_INPUT, "'notes' is 5"),
    ("show float_index.h5", EXIT_BAD_INPUT, "/branches/from holds float64"),
    ("show timing_text.h5", EXIT_BAD_INPUT, "/timings"),
    ("verify foreign.h5", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("verify truncated.h5", EXIT_BAD_INPUT, "not an HDF5 file"),
    ("verify sol.h5 missing.csv", EXIT_BAD_INPUT, "missing.csv: no such file"),
    ("verify sol.h5 garbage.csv", EXIT_BAD_INPUT, "garbage.csv"),
    # Parquet branch tables
    ("check bad.parquet", EXIT_BAD_INPUT, "bad.parquet:row 2: column 'value': 'x' is not a number"),
    ("check bad.parquet", EXIT_BAD_INPUT, "bad.parquet:row 2: column 'from': empty node label"),
    ("check no_value.parquet", EXIT_BAD_INPUT, "has no column 'value'"),
    ("solve junk.parquet -o out.h5", EXIT_BAD_INPUT, "not a readable Parquet file"),
    # HDF5 network files
    ("convert islands.csv -o out.h5", EXIT_FAILED, "floating"),
    ("convert net.csv -o net.h5", EXIT_OUTPUT_REFUSED, "already exists"),
    ("convert net.csv -o net.csv --force", EXIT_BAD_INPUT, "is also the input file"),
    ("convert truncated.csv.gz -o out.h5", EXIT_BAD_INPUT, "cannot be read"),
    ("check sol.h5", EXIT_BAD_INPUT, "not an ohmgraph network file"),
    ("solve foreign.h5 -o out.h5", EXIT_BAD_INPUT, "not an ohmgraph network file"),
    ("solve truncated.h5 -o out.h5", EXIT_BAD_INPUT, "not an HDF5 file"),
    ("solve net.h5 -o out.h5 --ground nowhere", EXIT_BAD_INPUT, "reference node 'nowhere'"),
    ("check bad_kind_net.h5", EXIT_BAD_INPUT, "b'X' at row 1 is not a branch kind"),
    # measurement tables
    ("compare net.csv meas_inf.csv --accuracy 1%", EXIT_BAD_INPUT,
     "meas_inf.csv:2: column 'value': 'inf' is not a finite number"),
    ("compare net.csv meas_overflow.csv --accuracy 1%", EXIT_BAD_INPUT,
     "meas_overflow.csv:2: column 'value': '1e400' is not a finite number"),
    ("compare net.csv meas_nan.csv --accuracy 1%", EXIT_BAD_INPUT,
     "meas_nan.csv:2: column 'value'"),
    ("compare net.csv meas_empty_cell.csv --accuracy 1%", EXIT_BAD_INPUT,
     "meas_empty_cell.csv:2: column 'value'"),
    ("compare net.csv meas_unknown.csv --accuracy 1%", EXIT_BAD_INPUT,
     "meas_unknown.csv:2: column 'a': unknown node 'nowhere'"),
    ("compare net.csv meas_unit.csv --accuracy 1%", EXIT_BAD_INPUT,
     "meas_unit.csv:2: column 'value': unit of '6mA' does not suit"),
    ("diagnose net.csv garbage.csv --accuracy 1%", EXIT_BAD_INPUT, "garbage.csv: cannot be read"),
    # pairs files
    ("resistance net.csv --pairs pairs_extra_field.csv", EXIT_BAD_INPUT,
     "Expected 2 fields in line 2, saw 3"),
    ("resistance net.csv --pairs pairs_repeated.csv", EXIT_BAD_INPUT,
     "pairs_repeated.csv:1: the header repeats column 'a'"),
    ("resistance net.csv --pairs pairs_no_b.csv", EXIT_BAD_INPUT, "missing column 'b'"),
    ("resistance net.csv --pairs folder", EXIT_BAD_INPUT, "folder: not a file"),
    ("resistance net.csv --pairs pairs_truncated.csv.gz", EXIT_BAD_INPUT,
     "pairs_truncated.csv.gz: cannot be read"),
    ("compare net.csv meas_truncated.csv.gz --accuracy 1%", EXIT_BAD_INPUT,
     "meas_truncated.csv.gz: cannot be read"),
    # tolerances
    ("tolerance net.csv --observe mid --tolerances tol_negative.csv", EXIT_BAD_INPUT,
     "tol_negative.csv:2: column 'tolerance'"),
    ("tolerance net.csv --observe mid --tolerances tol_hundred.csv --samples 5", EXIT_BAD_INPUT,
     "must be below 100%"),
    ("tolerance net.csv --observe mid --default 150% --samples 5", EXIT_BAD_INPUT,
     "must be below 100%"),
    ("tolerance net.csv --observe mid --tolerances tol_source.csv", EXIT_BAD_INPUT,
     "'supply' is not a resistor"),
    ("tolerance net.csv --observe nowhere --default 1%", EXIT_BAD_INPUT, "unknown node"),
    ("tolerance net.csv --observe mid --default 1% --samples 3 --seed -1", EXIT_BAD_INPUT,
     "--seed: '-1' must be at least 0"),
    ("resistance net.csv --kirchhoff --estimate --seed -1", EXIT_BAD_INPUT,
     "--seed: '-1' must be at least 0"),
    ("resistance net.csv --across-resistors --time-budget 0", EXIT_BAD_INPUT, "--time-budget"),
    ("resistance net.csv --across-resistors --time-budget 5 --epsilon 0.2", EXIT_BAD_INPUT,
     "not allowed with argument"),
    ("resistance net.csv --to-reference mid --ground nowhere", EXIT_BAD_INPUT,
     "reference node 'nowhere' is not a node"),
    # node tables and ratings
    ("solve net.csv -o out.h5 --nodes nodes_unknown.csv", EXIT_BAD_INPUT,
     "nodes_unknown.csv:3: column 'label': unknown node 'nowhere'"),
    ("solve net.csv -o out.h5 --nodes nodes_bad.csv", EXIT_BAD_INPUT,
     "nodes_bad.csv:3: column 'x': 'east' is not a finite number"),
    ("solve net.csv -o out.h5 --nodes nodes_column.csv", EXIT_BAD_INPUT,
     "unknown column(s) 'z' (expected label, x, y, layer)"),
    ("solve net.csv -o out.h5 --nodes missing.csv", EXIT_BAD_INPUT, "missing.csv: no such file"),
    ("solve rated_zero.csv -o out.h5", EXIT_BAD_INPUT,
     "rated_zero.csv:3: column 'max_current': '0' is not a rating"),
    ("solve rated_negative.csv -o out.h5", EXIT_BAD_INPUT,
     "rated_negative.csv:2: column 'max_power': '-2' is not a rating"),
    ("check imax.csv", EXIT_BAD_INPUT, "max_current, max_power)"),
    ("solve net.csv -o out.h5 --drop-thresholds 5%,x", EXIT_BAD_INPUT, "'x' is not a drop limit"),
    # limits, export, map, report
    ("limits sol.h5", EXIT_BAD_INPUT, "nothing to check"),
    ("limits foreign.h5 --max-drop 5%", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("limits readings.h5 --max-drop 5%", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("report readings.h5 -o out.html", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("export readings.h5 --nodes out.csv", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("limits notes.txt --max-drop 5%", EXIT_BAD_INPUT, "not an HDF5 file"),
    ("limits sol.h5 --max-drop 0%", EXIT_BAD_INPUT, "is not a drop limit greater than 0"),
    ("limits sol.h5 --max-current -1", EXIT_BAD_INPUT, "greater than 0"),
    ("export sol.h5 --nodes out.txt", EXIT_BAD_INPUT, "unknown table type"),
    ("export sol.h5", EXIT_BAD_INPUT, "nothing to write"),
    ("export foreign.h5 --nodes out.csv", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("export sol.h5 --nodes sol.h5.csv --branches folder.csv --force", EXIT_OUTPUT_REFUSED,
     "is a folder"),
    ("map sol.h5 -o out.png", EXIT_BAD_INPUT, "no node coordinates"),
    ("map sol.h5 -o out.jpg --histograms", EXIT_BAD_INPUT, "unknown picture type"),
    ("map foreign.h5 -o out.png --histograms", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("report foreign.h5 -o out.html", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("report sol.h5 -o sol.h5 --force", EXIT_BAD_INPUT, "is also the input file"),
    ("report sol.h5 -o missing/out.html", EXIT_OUTPUT_REFUSED, "does not exist"),
    # change files, warm starts, diff
    ("solve net.csv -o out.h5 --changes chg_missing.csv", EXIT_BAD_INPUT,
     "chg_missing.csv:3: column 'name': no branch 'nowhere' in the network"),
    ("solve net.csv -o out.h5 --changes chg_open_source.csv", EXIT_BAD_INPUT,
     "chg_open_source.csv:2: column 'value': V source 'supply' cannot be opened"),
    ("solve net.csv -o out.h5 --changes chg_column.csv", EXIT_BAD_INPUT,
     "unknown column(s) 'colour'"),
    ("solve net.csv -o out.h5 --changes chg_wrong_ends.csv", EXIT_BAD_INPUT,
     "branch 'r_upper' joins top -> mid"),
    ("solve net.csv -o out.h5 --changes chg_twice.csv", EXIT_BAD_INPUT, "is changed twice"),
    ("solve net.csv -o out.h5 --changes empty.csv", EXIT_BAD_INPUT, "empty.csv"),
    ("solve net.csv -o out.h5 --changes chg_isolate.csv", EXIT_FAILED, "NOT solvable"),
    ("solve net.csv -o out.h5 --start-from foreign.h5", EXIT_BAD_INPUT,
     "not an ohmgraph solution file"),
    ("solve net.csv -o sol.h5 --start-from sol.h5 --force", EXIT_BAD_INPUT,
     "is also the input file"),
    ("solve net.csv -o out.h5 --keep-setup --changes chg_missing.csv --start-from sol.h5",
     EXIT_BAD_INPUT, "nowhere"),
    ("diff sol.h5 foreign.h5", EXIT_BAD_INPUT, "not an ohmgraph solution file"),
    ("diff sol.h5 sol.h5 --map out.png", EXIT_BAD_INPUT, "no node coordinates"),
    ("diff sol.h5 sol.h5 --map out.gif", EXIT_BAD_INPUT, "unknown picture type"),
    # networks that are not well-posed
    ("compare islands.csv meas_islands.csv --accuracy 1%+1mV", EXIT_FAILED, "not well-posed"),
    ("diagnose islands.csv meas_islands.csv --accuracy 1%+1mV", EXIT_FAILED, "not well-posed"),
    ("tolerance kvl.csv --observe 1 --default 1%", EXIT_FAILED, "kvl-violation"),
    ("resistance negative.csv --between 1 0", EXIT_FAILED, "not well-posed"),
    # part tolerances in compare and diagnose, readings in tolerance
    ("compare net.csv meas.csv --default 150%", EXIT_BAD_INPUT, "must be below 100%"),
    ("compare net.csv meas.csv --tolerances tol_negative.csv", EXIT_BAD_INPUT,
     "tol_negative.csv:2: column 'tolerance'"),
    ("diagnose net.csv meas.csv --tolerances tol_source.csv", EXIT_BAD_INPUT,
     "tol_source.csv:2: column 'branch': 'supply' is not a resistor"),
    ("compare net.csv meas.csv --default 1% --coverage 0", EXIT_BAD_INPUT,
     "greater than 0"),
    ("compare net.csv meas.csv --default 1% --coverage 2 --worst-case", EXIT_BAD_INPUT,
     "not allowed with"),
    ("diagnose net.csv meas.csv --default 1% --significance 1", EXIT_BAD_INPUT,
     "strictly between 0 and 1"),
    ("diagnose net.csv meas.csv --default 1% --max-flagged -1", EXIT_BAD_INPUT,
     "must be at least 0"),
    ("diagnose net.csv meas.csv --default 1% --contact-max -1", EXIT_BAD_INPUT,
     "'-1' must be 0 or more"),
    ("diagnose net.csv meas.csv --default 1% --contact-significance 0", EXIT_BAD_INPUT,
     "strictly between 0 and 1"),
    ("diagnose net.csv meas.csv --tolerances missing.csv", EXIT_BAD_INPUT,
     "missing.csv: no such file"),
    ("tolerance net.csv --readings meas_unknown.csv --default 1%", EXIT_BAD_INPUT,
     "meas_unknown.csv:2: column 'a': unknown node 'nowhere'"),
    ("tolerance net.csv --readings meas_truncated.csv.gz --default 1%", EXIT_BAD_INPUT,
     "cannot be read"),
    ("tolerance net.csv --readings meas.csv --observe mid --default 1%", EXIT_BAD_INPUT,
     "not allowed with"),
    ("tolerance net.csv --readings meas.csv", EXIT_BAD_INPUT, "give --tolerances"),
    ("tolerance net.csv --readings meas.csv --default 1% -o meas.csv --force", EXIT_BAD_INPUT,
     "is also the input file"),
    ("tolerance net.csv --readings meas.csv --default 1% -o out.txt", EXIT_BAD_INPUT,
     "unsuitable output type '.txt'"),
    ("compare net.csv meas.csv --accuracy 1% --html notes.txt", EXIT_OUTPUT_REFUSED,
     "already exists"),
    ("diagnose net.csv meas.csv --accuracy 1% --html meas.csv --force", EXIT_BAD_INPUT,
     "is also the input file"),
    ("diagnose net.csv meas.csv --accuracy 1% --html missing/x.html", EXIT_OUTPUT_REFUSED,
     "does not exist"),
    # choosing readings
    ("pick-readings net.csv --test-points tp_unknown.csv --budget 2 --accuracy 1%",
     EXIT_BAD_INPUT, "tp_unknown.csv:3: column 'node': unknown node 'nowhere'"),
    ("pick-readings net.csv --test-points tp_twice.csv --budget 2 --accuracy 1%",
     EXIT_BAD_INPUT, "tp_twice.csv:3: column 'node': 'mid' is listed twice"),
    ("pick-readings net.csv --test-points tp_no_header.csv --budget 2 --accuracy 1%",
     EXIT_BAD_INPUT, "tp_no_header.csv:1: header has unknown column(s) 'mid'"),
    ("pick-readings net.csv --test-points tp.csv --budget 2 --accuracy 1mV", EXIT_BAD_INPUT,
     "none applies to R readings"),
    ("pick-readings net.csv --test-points tp.csv --budget 0 --accuracy 1%", EXIT_BAD_INPUT,
     "must be at least 1"),
    ("pick-readings net.csv --test-points tp_one.csv --budget 1 --kinds R --accuracy 1%",
     EXIT_BAD_INPUT, "one test point gives no resistance reading"),
    ("pick-readings net.csv --test-points tp.csv --budget 1 --accuracy 1% -o tp.csv --force",
     EXIT_BAD_INPUT, "is also the input file"),
    ("pick-readings net.csv --test-points tp.csv --budget 1 --accuracy 1% --change 100%",
     EXIT_BAD_INPUT, "below 100%"),
    ("pick-readings islands.csv --test-points tp.csv --budget 1 --accuracy 1%", EXIT_BAD_INPUT,
     "unknown node 'top'"),
]


@pytest.mark.parametrize("command, code, message", REFUSED, ids=[c[0][:60] for c in REFUSED])
def test_bad_input_gives_one_message_and_leaves_nothing(workspace, capsys, command, code,
                                                       message):
    before = snapshot(workspace)
    got, text = run_cli(command.split(), capsys)
    assert got == code, text
    assert message in text
    assert "Traceback" not in text
    assert snapshot(workspace) == before       # no output, no temporary file, inputs unchanged


# Awkward but valid input: exit 0 (or 1 for a failed reading) with no traceback or warning.
ACCEPTED = [
    ("check net_bom_crlf.csv", EXIT_OK, "well-posed"),
    ("check net.csv.gz", EXIT_OK, "well-posed"),
    ("check net_unicode.csv", EXIT_OK, "well-posed"),
    ("check wide_spread.csv", EXIT_OK, "ill-conditioned"),
    ("check graph.txt", EXIT_OK, "info default-resistance"),
    ("resistance graph.txt --between top 0", EXIT_OK, "R(top, 0) = 2"),
    ("compare net.csv meas_duplicate.csv --accuracy 1%", EXIT_OK, "2 of 2"),
    # an open-circuit reading against a connected pair fails its comparison (common practice)
    ("compare net.csv meas_open.csv --accuracy 1%", EXIT_FAILED, "FAIL"),
    ("resistance net.csv --pairs pairs_same_node.csv", EXIT_OK, "mid,mid,0"),
    ("resistance net.csv --pairs pairs.csv --full-precision", EXIT_OK, "top,mid,"),
    ("resistance net.csv --between top mid --memory-budget 512MB", EXIT_OK, "top"),
    ("tolerance net.csv --observe mid --default 1 --memory-budget 1GiB", EXIT_OK, "mid"),
    ("resistance islands.csv --pairs pairs_islands.csv", EXIT_OK, "a,b,inf"),
    ("diagnose sources_only.csv meas_sources_only.csv --accuracy 1%", EXIT_OK,
     "nothing to diagnose"),
    ("diagnose islands.csv meas_open_islands.csv --accuracy 1%+1mV --accuracy 1% "
     "--allow-floating", EXIT_OK,
     "left out"),
    # a zero instrument band is usable once the parts give the reading a spread
    ("diagnose net.csv meas_zero_accuracy.csv --default 1%", EXIT_OK, "fault indicated"),
    ("tolerance net.csv --readings meas_open.csv --default 1%", EXIT_OK, "line 2 R top 0"),
    ("pick-readings net.csv --test-points tp.csv --budget 9 --accuracy 1%", EXIT_OK,
     "separated"),
]


@pytest.mark.parametrize("command, code, message", ACCEPTED, ids=[c[0] for c in ACCEPTED])
def test_awkward_valid_input_is_accepted(workspace, capsys, command, code, message):
    before = snapshot(workspace)
    got, text = run_cli(command.split(), capsys)
    assert got == code, text
    assert message in text
    assert snapshot(workspace) == before


def test_unicode_labels_survive_solve_and_show(workspace, capsys):
    assert run_cli(["solve", "net_unicode.csv", "-o", "unicode.h5"], capsys)[0] == EXIT_OK
    code, text = run_cli(["show", "unicode.h5"], capsys)
    assert code == EXIT_OK and "Ω ß" in text


def test_running_out_of_memory_is_a_message(workspace, capsys, monkeypatch):
    def too_large(*args, **kwargs):
        raise MemoryError

    monkeypatch.setattr(generators, "grid2d", too_large)
    before = snapshot(workspace)
    code, text = run_cli(["generate", "grid2d", "100000", "100000", "-o", "big.csv"], capsys)
    assert code == EXIT_NO_MEMORY and "ran out of memory (an allocation failed)" in text
    assert snapshot(workspace) == before
