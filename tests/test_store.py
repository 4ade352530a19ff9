"""The HDF5 solution store and the summary view: round trip, layout, atomicity, refusals."""

from __future__ import annotations

import hashlib
import importlib.metadata
from datetime import datetime, timedelta, timezone

import h5py
import numpy as np
import pytest

from ohmgraph.engine import Network, solve
from ohmgraph.engine.drop import supply_drop
from ohmgraph.io import read_solution, write_solution
from ohmgraph.io.errors import InputError, OutputRefused
from ohmgraph.io.solution_view import (POWER_CAUTION, format_solution, solution_summary,
                                       summary_from_stored)
from ohmgraph.io.hdf5_integrity import COMPRESS_FROM, compresses
from ohmgraph.io.store import SolutionWriter, decode_strings, encode_strings, solution_file


@pytest.fixture
def divider():
    """A 10 V source over 1 kohm + 3 kohm, a 2 mA load at the middle, and non-ASCII labels."""
    net = Network.from_arrays(
        ["top", "top", "mitte_ü", "mitte_ü"], ["0", "mitte_ü", "0", "0"],
        [10.0, 1000.0, 3000.0, 0.002], ["V", "R", "R", "I"],
        names=["supply", "r_upper", "r_lower", "load_µ"])
    return net, solve(net)


@pytest.fixture
def network_file(tmp_path):
    path = tmp_path / "divider.csv"
    path.write_text("name,kind,from,to,value\nsupply,V,top,0,10\n")
    return path


def test_round_trip_arrays_and_attributes(tmp_path, divider, network_file):
    net, solution = divider
    out = tmp_path / "divider.h5"
    seconds = write_solution(out, solution, input_path=network_file)
    stored = read_solution(out)

    back = stored.network
    np.testing.assert_array_equal(back.node_labels, net.node_labels)
    np.testing.assert_array_equal(back.branch_names, net.branch_names)
    np.testing.assert_array_equal(back.kind, net.kind)
    np.testing.assert_array_equal(back.from_node, net.from_node)
    np.testing.assert_array_equal(back.to_node, net.to_node)
    np.testing.assert_array_equal(back.value, net.value)
    assert back.reference == net.reference
    np.testing.assert_array_equal(stored.node_voltage, solution.node_voltage)
    np.testing.assert_array_equal(stored.branch_current, solution.branch_current)
    np.testing.assert_array_equal(stored.branch_voltage, solution.branch_voltage)
    np.testing.assert_array_equal(stored.branch_power, solution.branch_power)
    np.testing.assert_array_equal(stored.current_determined, solution.current_determined)

    attrs = stored.attrs
    assert attrs["tool_version"] == importlib.metadata.version("ohmgraph")
    assert attrs["input_file"] == "divider.csv"
    # reference digest from hashlib over the whole file (Python standard library)
    assert attrs["input_sha256"] == hashlib.sha256(network_file.read_bytes()).hexdigest()
    assert attrs["reference"] == "0"
    assert attrs["method"] == solution.method
    assert attrs["rtol"] == solution.rtol
    assert attrs["iterations"] == solution.iterations
    assert attrs["relative_residual"] == solution.relative_residual
    assert attrs["kcl_max_residual"] == solution.kcl_max_residual
    assert attrs["power_balance"] == solution.power_balance
    assert attrs["power_delivered"] == solution.power_delivered
    assert attrs["power_dissipated"] == solution.power_dissipated
    created = datetime.fromisoformat(attrs["created"])
    assert created.utcoffset() == timedelta(0)
    assert abs(datetime.now(timezone.utc) - created) < timedelta(minutes=5)
    assert stored.timings["store"] == seconds
    assert set(solution.timings) < set(stored.timings)
    assert [f.code for f in stored.findings] == [f.code for f in solution.report.findings]
    assert stored.check_summary == solution.report.summary


def test_stored_values_satisfy_the_divider_rule(tmp_path, divider):
    # voltage divider with a load, solved by hand (common practice): the middle node sits at
    # (10 V / 1 kohm - 2 mA) / (1/1 kohm + 1/3 kohm) = 6 V, so 4 mA flows through the upper
    # resistor and 2 mA through the lower one.
    _, solution = divider
    out = tmp_path / "divider.h5"
    write_solution(out, solution)
    with h5py.File(out, "r") as h5:
        labels = h5["nodes/label"].asstr()[...].tolist()
        voltage = h5["nodes/voltage"][...]
        names = h5["branches/name"].asstr()[...].tolist()
        current = h5["branches/current"][...]
    assert voltage[labels.index("mitte_ü")] == pytest.approx(6.0, rel=1e-12)
    assert current[names.index("r_upper")] == pytest.approx(4e-3, rel=1e-12)
    assert current[names.index("r_lower")] == pytest.approx(2e-3, rel=1e-12)


def test_layout_is_plain_hdf5_with_units(tmp_path, divider):
    _, solution = divider
    out = tmp_path / "divider.h5"
    write_solution(out, solution)
    with h5py.File(out, "r") as h5:
        assert h5["nodes/voltage"].attrs["units"] == "V"
        assert h5["branches/current"].attrs["units"] == "A"
        assert h5["branches/voltage"].attrs["units"] == "V"
        assert h5["branches/power"].attrs["units"] == "W"
        assert h5["branches/value"].attrs["units"] == "ohm|V|A by kind"
        assert h5["branches/kind"].asstr()[...].tolist() == ["V", "R", "R", "I"]
        assert h5["branches/from"].dtype.kind == "i"
        # fixed-length UTF-8 strings, the HDF5 type every tool reads
        label_type = h5["nodes/label"].id.get_type()
        assert isinstance(label_type, h5py.h5t.TypeStringID) and not label_type.is_variable_str()
        assert label_type.get_cset() == h5py.h5t.CSET_UTF8
        assert h5["timings"].attrs["units"] == "s"
        assert h5["checks/code"].asstr()[...].tolist() == [f.code for f in solution.report.findings]


def test_large_arrays_are_chunked_checksummed_and_compressed_where_it_pays(tmp_path, make_network):
    net = make_network(3, n_nodes=COMPRESS_FROM + 100, extra_resistors=COMPRESS_FROM)
    solution = solve(net)
    out = tmp_path / "large.h5"
    write_solution(out, solution)
    with h5py.File(out, "r") as h5:
        # text and indices deflate well; random-looking float64 results do not
        for name in ("nodes/label", "branches/from", "branches/name", "branches/kind"):
            assert h5[name].compression == "gzip" and h5[name].chunks is not None
        assert compresses(h5["branches/from"][()])
        for name in ("nodes/voltage", "branches/current", "branches/power"):
            data = h5[name][()]
            assert (h5[name].compression == "gzip") == compresses(data)
        assert not compresses(np.random.default_rng(0).random(COMPRESS_FROM))
        assert h5["nodes/voltage"].compression is None
        h5.visititems(lambda name, item: None if not isinstance(item, h5py.Dataset)
                      else (item.fletcher32 and item.chunks) or pytest.fail(name))
    stored = read_solution(out)
    np.testing.assert_array_equal(stored.node_voltage, solution.node_voltage)
    np.testing.assert_array_equal(stored.network.node_labels, net.node_labels)
    np.testing.assert_array_equal(stored.branch_power, solution.branch_power)


@pytest.mark.parametrize("strings", [["n1", "", "node_12345"], ["Ω", "a", "ünïcode-λ"], []])
def test_string_codec_round_trip(strings):
    strings = np.array(strings, dtype=str)
    encoded = encode_strings(strings)
    # Python's own UTF-8 codec is the reference for the bytes
    assert encoded.tolist() == [s.encode("utf-8") for s in strings.tolist()]
    assert encoded.dtype.itemsize == max([1] + [len(s.encode("utf-8")) for s in strings.tolist()])
    np.testing.assert_array_equal(decode_strings(encoded), strings)


def test_failure_midway_leaves_no_file(tmp_path, divider, monkeypatch):
    _, solution = divider
    real = h5py.Group.create_dataset

    def failing(self, name, *args, **kwargs):
        if name == "current":
            raise RuntimeError("disk gave up")
        return real(self, name, *args, **kwargs)

    monkeypatch.setattr(h5py.Group, "create_dataset", failing)
    with pytest.raises(RuntimeError, match="disk gave up"):
        write_solution(tmp_path / "out.h5", solution)
    assert list(tmp_path.iterdir()) == []


def test_refuses_to_overwrite_without_force(tmp_path, divider):
    _, solution = divider
    out = tmp_path / "out.h5"
    out.write_bytes(b"precious")
    with pytest.raises(OutputRefused, match="already exists"):
        write_solution(out, solution)
    assert out.read_bytes() == b"precious"
    write_solution(out, solution, force=True)
    assert read_solution(out).node_voltage.shape == (solution.network.n_nodes,)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.h5"]


def test_unwritable_folder_is_refused(tmp_path, divider):
    with pytest.raises(OutputRefused):
        write_solution(tmp_path / "missing" / "out.h5", divider[1])


def test_read_rejects_what_is_not_a_solution(tmp_path, divider):
    with pytest.raises(InputError, match="no such file"):
        read_solution(tmp_path / "absent.h5")
    text = tmp_path / "notes.h5"
    text.write_text("not hdf5\n")
    with pytest.raises(InputError, match="not an HDF5 file"):
        read_solution(text)
    out = tmp_path / "out.h5"
    write_solution(out, divider[1])
    with h5py.File(out, "a") as h5:
        del h5["branches/power"]
    with pytest.raises(InputError, match=r"out\.h5.*missing dataset /branches/power"):
        read_solution(out)
    write_solution(out, divider[1], force=True)
    with h5py.File(out, "a") as h5:
        del h5["nodes/voltage"]
        h5["nodes/voltage"] = np.zeros(2)
    with pytest.raises(InputError, match=r"/nodes/voltage has shape"):
        read_solution(out)


def test_summary_from_file_equals_summary_of_solve(tmp_path, make_network):
    solution = solve(make_network(5))
    out = tmp_path / "random.h5"
    seconds = write_solution(out, solution)
    drop = supply_drop(solution.network, solution.node_voltage)
    fresh = solution_summary(solution, {"store": seconds}, drop)
    assert summary_from_stored(read_solution(out)) == fresh
    text = format_solution(fresh)
    for needle in ("relative residual", "KCL max residual", "power balance",
                   "largest branch currents", "largest resistor powers", "source powers",
                   POWER_CAUTION, "time (s)", f"{solution.network.n_nodes:,} nodes"):
        assert needle in text


# ---------------------------------------------------------------- writing beside the solve
def test_the_file_started_before_the_solve_equals_the_one_written_after(tmp_path, divider):
    """``solution_file`` (network first, in a thread of its own; solution added by ``finish``)
    stores exactly what ``write_solution`` stores, the node table and ratings included."""
    net, solution = divider
    early_extra = {"branches/max_current": np.array([np.nan, 0.1, 0.1, np.nan]),
                   "nodes/x": np.arange(net.n_nodes, dtype=float)}
    drop = supply_drop(net, solution.node_voltage)
    late_extra = {"nodes/drop": drop.drop}
    write_solution(tmp_path / "after.h5", solution, extra={**early_extra, **late_extra})
    with solution_file(tmp_path / "before.h5", net, solution.report, extra=early_extra) as out:
        assert isinstance(out, SolutionWriter)
        out.finish(solution, extra=late_extra)
    after, before = read_solution(tmp_path / "after.h5"), read_solution(tmp_path / "before.h5")
    assert sorted(before.extra) == sorted(after.extra) == ["branches/max_current", "nodes/drop",
                                                           "nodes/x"]
    for name in after.extra:
        np.testing.assert_array_equal(before.extra[name], after.extra[name])
    np.testing.assert_array_equal(before.network.branch_names, after.network.branch_names)
    np.testing.assert_array_equal(before.node_voltage, after.node_voltage)
    np.testing.assert_array_equal(before.branch_power, after.branch_power)
    assert before.findings == after.findings and before.check_summary == after.check_summary
    stamped = ("created", "attrs_sha256")        # the time of writing, and the digest over it
    assert {k: v for k, v in before.attrs.items() if k not in stamped} == {
        k: v for k, v in after.attrs.items() if k not in stamped}


def test_signals_are_not_held_while_the_file_is_open(tmp_path, divider):
    """The writer's HDF5 calls run in its own thread: the main thread keeps acting on SIGINT
    (io/interrupts.py) for as long as the solve takes."""
    from ohmgraph.io.interrupts import _State, handling

    net, solution = divider
    with handling(), solution_file(tmp_path / "out.h5", net, solution.report) as out:
        out._begun.result()
        assert _State.deferring == 0
        out.finish(solution)
    assert read_solution(tmp_path / "out.h5").node_voltage.size == net.n_nodes


def test_a_failed_or_unfinished_block_leaves_nothing(tmp_path, divider):
    net, solution = divider
    with pytest.raises(KeyboardInterrupt):
        with solution_file(tmp_path / "out.h5", net, solution.report):
            raise KeyboardInterrupt          # as an interrupt during the solve would
    with pytest.raises(RuntimeError, match="without finish"):
        with solution_file(tmp_path / "out.h5", net, solution.report):
            pass
    other = solve(Network.from_arrays(["a", "a"], ["0", "0"], [1.0, 5.0], ["V", "R"]))
    with pytest.raises(ValueError, match="another network"):
        with solution_file(tmp_path / "out.h5", net, solution.report) as out:
            out.finish(other)
    assert list(tmp_path.iterdir()) == []


def test_reading_without_branch_results(tmp_path, divider):
    """What a re-solve from the stored network reads: the same network and voltages, no branch
    results; a damaged required dataset is still refused."""
    net, solution = divider
    out = tmp_path / "out.h5"
    write_solution(out, solution)
    whole, lean = read_solution(out), read_solution(out, branch_results=False)
    np.testing.assert_array_equal(lean.network.branch_names, whole.network.branch_names)
    np.testing.assert_array_equal(lean.network.value, whole.network.value)
    np.testing.assert_array_equal(lean.node_voltage, whole.node_voltage)
    assert lean.findings == whole.findings and lean.attrs == whole.attrs
    assert (lean.branch_current, lean.branch_voltage, lean.branch_power,
            lean.current_determined) == (None, None, None, None)
    with h5py.File(out, "a") as h5:
        del h5["branches/power"]
    with pytest.raises(InputError, match="missing dataset /branches/power"):
        read_solution(out, branch_results=False)


def test_an_error_after_finish_still_leaves_nothing(tmp_path, divider):
    net, solution = divider
    with pytest.raises(ZeroDivisionError):
        with solution_file(tmp_path / "out.h5", net, solution.report) as out:
            out.finish(solution)
            1 / 0                              # the block fails after the file was closed
    assert list(tmp_path.iterdir()) == []
