"""The one HDF5 result-group writer (``ohmgraph.io.result_store``): provenance, the layout
version, and readers that accept every earlier layout and refuse a newer one."""

from __future__ import annotations

import hashlib
import json

import h5py
import pytest

from ohmgraph.engine import Network, solve
from ohmgraph.io import read_solution, write_solution
from ohmgraph.io.cli import main
from ohmgraph.io.errors import InputError
from ohmgraph.io.layout import LAYOUT_VERSION, check_layout_version
from ohmgraph.io.result_store import read_results, write_results

NET = "name,kind,from,to,value\nV1,V,in,0,5\nR1,R,in,mid,2\nR2,R,mid,0,3\n"


@pytest.fixture
def divider(tmp_path):
    path = tmp_path / "net.csv"
    path.write_text(NET)
    return path


def test_resistance_group_carries_provenance_and_layout_version(tmp_path, divider, capsys):
    pairs = tmp_path / "pairs.csv"
    pairs.write_text("a,b\nin,mid\n")
    out = tmp_path / "r.h5"
    assert main(["resistance", str(divider), "--pairs", str(pairs), "-o", str(out)]) == 0
    columns, group, root = read_results(out, "resistance")
    # V1 shorts 'in' to the reference: R(in, mid) = 2 || 3 = 1.2 ohm (common practice)
    assert columns["ohms"][0] == pytest.approx(1.2, rel=1e-12)
    for attrs in (group, root):
        assert attrs["layout_version"] == LAYOUT_VERSION
        assert attrs["network_sha256"] == hashlib.sha256(divider.read_bytes()).hexdigest()
        assert attrs["pairs_file"] == "pairs.csv" and attrs["command"] == "resistance"
    options = json.loads(group["command_options"])
    assert options["pairs"] == str(pairs) and options["method"] == "auto"
    assert "run" not in options and "output_formats" not in options
    assert root["result"] == "resistance" and "created" in group and "tool_version" in group


def test_readings_group_records_the_command_options(tmp_path, divider):
    meas = tmp_path / "meas.csv"
    meas.write_text("kind,a,b,value\nV,mid,,3\n")
    out = tmp_path / "c.h5"
    assert main(["compare", str(divider), str(meas), "--accuracy", "1%", "-o", str(out)]) == 0
    _, group, _ = read_results(out, "comparison")
    assert group["command"] == "compare" and json.loads(group["command_options"])[
        "accuracy"] == ["1%"]
    assert group["measurements_sha256"] == hashlib.sha256(meas.read_bytes()).hexdigest()


def test_earlier_layouts_are_read_and_newer_ones_refused(tmp_path):
    out = tmp_path / "r.h5"
    write_results(out, "comparison", {"value": [1.5]})
    with h5py.File(out, "a") as h5:               # a group written before versions were stamped
        del h5["comparison"].attrs["layout_version"]
    assert read_results(out, "comparison")[0]["value"].tolist() == [1.5]
    with h5py.File(out, "a") as h5:
        h5["comparison"].attrs["layout_version"] = LAYOUT_VERSION + 1
    with pytest.raises(InputError, match=f"layout version {LAYOUT_VERSION + 1} by a newer"):
        read_results(out, "comparison")
    assert check_layout_version("x", {"layout_version": 1}) == 1
    with pytest.raises(InputError, match="is not a layout version"):
        check_layout_version("x", {"layout_version": "two"})


def test_solution_files_of_every_earlier_layout_are_read(tmp_path):
    net = Network.from_arrays(["in", "in", "mid"], ["0", "mid", "0"], [5.0, 2.0, 3.0],
                              kinds=["V", "R", "R"])
    path = tmp_path / "sol.h5"
    write_solution(path, solve(net))
    for version in range(1, LAYOUT_VERSION + 1):
        with h5py.File(path, "a") as h5:
            h5.attrs["layout_version"] = version
        # 5 V over 2 + 3 ohm: V(mid) = 3 V (voltage divider, common practice)
        stored = read_solution(path)
        assert stored.node_voltage[stored.network.label_index["mid"]] == pytest.approx(3.0)
    with h5py.File(path, "a") as h5:
        h5.attrs["layout_version"] = LAYOUT_VERSION + 1
    with pytest.raises(InputError, match="by a newer ohmgraph"):
        read_solution(path)
