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
from ohmgraph.io.errors import (EXIT_BAD_INPUT, EXIT_FAILED, EXIT_OK, EXIT_OUTPUT_REFUSED,
                                EXIT_SOLVER_FAILED)

# A loaded divider: 10 V across 1 kohm + 3 kohm, 2 mA drawn from the middle.
NET = ("name,kind,from,to,value\nsupply,V,top,0,10\nr_upper,R,top,mid,1000\n"
       "r_lower,R,mid,0,3000\nload,I,mid,0,0.002\n")
ISLANDS = "from,to,value\na,0,1\nb,c,1\n"             # b-c has no path to the reference
LONG = "x" * 300                                    # longer than a file name may be (POSIX 255)


def _solution(path) -> None:
    main(["solve", "net.csv", "-o", str(path)])


def _tampered(path, change) -> None:
    _solution(path)
    with h5py.File(path, "a") as h5:
        change(h5)


def _replace(h5, name, data) -> None:
    del h5[name]
    h5[name] = data


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
}
FOLDERS = ("folder", "folder.h5", "folder.csv", "demo/sensor_board.csv")
SOLUTIONS = {
    "sol.h5": _solution,
    "foreign.h5": _foreign,
    "rtol_text.h5": lambda p: _tampered(p, lambda h5: h5.attrs.__setitem__("rtol", "abc")),
    "notes_number.h5": lambda p: _tampered(p, lambda h5: h5.attrs.__setitem__("notes", 5)),
    "float_index.h5": lambda p: _tampered(
        p, lambda h5: _replace(h5, "branches/from", np.array([0.5, 1.0, 1.0, 1.0]))),
    "timing_text.h5": lambda p: _tampered(
        p, lambda h5: h5["timings"].attrs.__setitem__("read", "slow")),
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
    ("show rtol_text.h5", EXIT_BAD_INPUT, "'rtol' is 'abc', expected a number"),
    ("show notes_number.h5", EXIT_BAD_INPUT, "'notes' is 5"),
    ("show float_index.h5", EXIT_BAD_INPUT, "/branches/from holds float64"),
    ("show timing_text.h5", EXIT_BAD_INPUT, "/timings"),
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
    # networks that are not well-posed
    ("compare islands.csv meas_islands.csv --accuracy 1%+1mV", EXIT_FAILED, "not well-posed"),
    ("diagnose islands.csv meas_islands.csv --accuracy 1%+1mV", EXIT_FAILED, "not well-posed"),
    ("tolerance kvl.csv --observe 1 --default 1%", EXIT_FAILED, "kvl-violation"),
    ("resistance negative.csv --between 1 0", EXIT_FAILED, "not well-posed"),
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
    ("compare net.csv meas_duplicate.csv --accuracy 1%", EXIT_OK, "2 of 2"),
    # an open-circuit reading against a connected pair fails its comparison (common practice)
    ("compare net.csv meas_open.csv --accuracy 1%", EXIT_FAILED, "FAIL"),
    ("resistance net.csv --pairs pairs_same_node.csv", EXIT_OK, "mid,mid,0"),
    ("resistance net.csv --between top mid --memory-budget 512MB", EXIT_OK, "top"),
    ("tolerance net.csv --observe mid --default 1 --memory-budget 1GiB", EXIT_OK, "mid"),
    ("resistance islands.csv --pairs pairs_islands.csv", EXIT_OK, "a,b,inf"),
    ("diagnose sources_only.csv meas_sources_only.csv --accuracy 1%", EXIT_OK,
     "nothing to diagnose"),
    ("diagnose islands.csv meas_open_islands.csv --accuracy 1%+1mV --accuracy 1% "
     "--allow-floating", EXIT_OK,
     "left out"),
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
    assert code == EXIT_BAD_INPUT and "not enough memory" in text
    assert snapshot(workspace) == before
