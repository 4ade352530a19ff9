"""Damaged and hostile solution files: refused with a clear message, never misread.

Damage is made by flipping bytes of a stored file; hostile files are crafted with h5py.
Fletcher-32 is HDF5's checksum filter (HDF5 User's Guide, "HDF5 Datasets", filters:
H5Pset_fletcher32); a dataset whose chunks are not stored declares data the file does not hold.
"""

from __future__ import annotations

import time

import h5py
import numpy as np
import pytest

from ohmgraph.io.cli import main
from ohmgraph.io.errors import EXIT_BAD_INPUT, EXIT_OK, InputError
from ohmgraph.io.hdf5_integrity import DIGEST_ATTRIBUTE
from ohmgraph.io.result_store import read_results
from ohmgraph.io.store import LAYOUT_VERSION, read_solution

# 10 V across 1 kohm + 3 kohm with a 2 mA load: V(mid) = 6 V by hand (common practice)
NET = ("name,kind,from,to,value\nsupply,V,top,0,10\nr_upper,R,top,mid,1000\n"
       "r_lower,R,mid,0,3000\nload,I,mid,0,0.002\n")


@pytest.fixture
def stored(tmp_path):
    (tmp_path / "net.csv").write_text(NET)
    path = tmp_path / "sol.h5"
    assert main(["solve", str(tmp_path / "net.csv"), "-o", str(path)]) == EXIT_OK
    return path


def show(path, capsys):
    code = main(["show", str(path)])
    return code, capsys.readouterr().err


def flip(path, offset: int, count: int = 1) -> None:
    data = bytearray(path.read_bytes())
    for k in range(offset, offset + count):
        data[k] ^= 0xFF
    path.write_bytes(bytes(data))


def test_every_dataset_is_checksummed_and_the_attributes_sealed(stored):
    with h5py.File(stored, "r") as h5:
        datasets = []
        h5.visititems(lambda name, item: datasets.append(item)
                      if isinstance(item, h5py.Dataset) else None)
        assert len(datasets) >= 11 and all(d.fletcher32 and d.chunks for d in datasets)
        assert h5.attrs["layout_version"] == LAYOUT_VERSION == 2
        assert len(h5.attrs[DIGEST_ATTRIBUTE]) == 64


@pytest.mark.parametrize("name", ["nodes/voltage", "branches/current", "branches/name"])
def test_a_flipped_data_byte_is_refused(stored, capsys, name):
    with h5py.File(stored, "r") as h5:
        offset = h5[name].id.get_chunk_info(0).byte_offset
    flip(stored, offset)
    code, err = show(stored, capsys)
    assert code == EXIT_BAD_INPUT
    assert err == (f"ohmgraph show: error: {stored}: /{name} is damaged: its data fail their "
                   f"checksum or cannot be decoded (Can't synchronously read data "
                   f"(filter returned failure during read))\n")


def test_a_changed_attribute_is_refused(stored, capsys):
    with h5py.File(stored, "a") as h5:
        h5.attrs["rtol"] = 0.5                    # same type, other value
    code, err = show(stored, capsys)
    assert code == EXIT_BAD_INPUT
    assert err == (f"ohmgraph show: error: {stored}: damaged: the attributes of / do not match "
                   "their SHA-256 digest (they were changed after the file was written)\n")


def test_a_flipped_attribute_byte_is_refused(stored, capsys):
    with h5py.File(stored, "r") as h5:
        digest = h5.attrs["input_sha256"].encode()
    flip(stored, stored.read_bytes().index(digest) + 5)
    code, err = show(stored, capsys)
    assert code == EXIT_BAD_INPUT and f"{stored}: damaged" in err and "Traceback" not in err


def test_a_byte_flipped_anywhere_is_refused_or_harmless(stored, tmp_path):
    """300 single-byte flips at seeded positions: each file is refused, or (a byte HDF5 never
    reads) read back exactly as written; never misread, never another exception."""
    original, pristine = read_solution(stored), stored.read_bytes()
    rng = np.random.default_rng(12)
    damaged = tmp_path / "damaged.h5"
    outcomes = {"refused": 0, "same": 0}
    for offset in rng.integers(len(pristine), size=300):
        data = bytearray(pristine)
        data[offset] ^= 0xFF
        damaged.write_bytes(bytes(data))
        try:
            read = read_solution(damaged)
        except InputError:
            outcomes["refused"] += 1
            continue
        assert read.attrs == original.attrs, offset
        for field in ("node_voltage", "branch_current", "branch_voltage", "branch_power"):
            assert np.array_equal(getattr(read, field), getattr(original, field)), offset
        assert np.array_equal(read.network.node_labels, original.network.node_labels), offset
        outcomes["same"] += 1
    assert outcomes["refused"] >= 50, outcomes         # 93 of 300 (seeded; the rest is padding)


def _declare(h5, name, entries, dtype):
    del h5[name]
    h5.create_dataset(name, shape=(entries,), dtype=dtype, chunks=(min(entries, 1 << 16),))


def test_an_absurd_declared_size_is_refused_at_once(stored, capsys):
    with h5py.File(stored, "a") as h5:
        _declare(h5, "nodes/label", 10**12, "S8")
        _declare(h5, "nodes/voltage", 10**12, "f8")
    start = time.perf_counter()
    code, err = show(stored, capsys)
    assert time.perf_counter() - start < 5
    assert code == EXIT_BAD_INPUT
    assert err == (f"ohmgraph show: error: {stored}: /nodes/label declares 1,000,000,000,000 "
                   "entries (8,000,000,000,000 bytes) but stores only 0 bytes: the file is "
                   "damaged or was not written by ohmgraph\n")


def test_inconsistent_lengths_are_refused(stored, capsys):
    with h5py.File(stored, "a") as h5:
        _declare(h5, "branches/current", 10**12, "f8")
    start = time.perf_counter()
    code, err = show(stored, capsys)
    assert time.perf_counter() - start < 5
    assert code == EXIT_BAD_INPUT
    assert err == (f"ohmgraph show: error: {stored}: /branches/current has shape "
                   "(1000000000000,), but /branches/name has (4,): the file is damaged or not "
                   "ohmgraph's\n")


def test_an_absurd_string_width_is_refused(stored, capsys):
    with h5py.File(stored, "a") as h5:
        _declare(h5, "branches/name", 4, "S1000000000")
    code, err = show(stored, capsys)
    assert code == EXIT_BAD_INPUT and "/branches/name declares 4 entries" in err


def test_a_newer_layout_is_refused(stored, capsys):
    with h5py.File(stored, "a") as h5:
        h5.attrs["layout_version"] = 3
    code, err = show(stored, capsys)
    assert code == EXIT_BAD_INPUT
    assert err == (f"ohmgraph show: error: {stored}: written with layout version 3 by a newer "
                   "ohmgraph; this one reads versions 1 to 2\n")


def test_layout_1_without_checksums_is_still_read(stored, tmp_path):
    """Layout 1: contiguous datasets without filters, no digest (as ohmgraph 0.1 wrote)."""
    old = tmp_path / "old.h5"
    with h5py.File(stored, "r") as new, h5py.File(old, "w") as h5:
        def copy(name, item):
            if isinstance(item, h5py.Group):
                h5.require_group(name).attrs.update(item.attrs)
            else:
                h5.create_dataset(name, data=item[()]).attrs.update(item.attrs)
        new.visititems(copy)
        h5.attrs.update({k: v for k, v in new.attrs.items() if k != DIGEST_ATTRIBUTE})
        h5.attrs["layout_version"] = 1
    with h5py.File(old, "r") as h5:
        assert h5["nodes/voltage"].chunks is None and not h5["nodes/voltage"].fletcher32
    read = read_solution(old)
    labels = read.network.node_labels.tolist()
    assert read.node_voltage[labels.index("mid")] == pytest.approx(6.0, rel=1e-12)
    np.testing.assert_array_equal(read.branch_current, read_solution(stored).branch_current)


def test_appending_to_a_damaged_file_is_refused(stored, capsys, tmp_path):
    (tmp_path / "meas.csv").write_text("kind,a,b,value,accuracy\nV,mid,,6,1%\n")
    with h5py.File(stored, "r") as h5:
        offset = h5["branches/power"].id.get_chunk_info(0).byte_offset
    flip(stored, offset)
    before = stored.read_bytes()
    code = main(["compare", str(tmp_path / "net.csv"), str(tmp_path / "meas.csv"),
                 "-o", str(stored), "--append"])
    err = capsys.readouterr().err
    assert code == EXIT_BAD_INPUT and "/branches/power is damaged" in err
    assert stored.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["meas.csv", "net.csv", "sol.h5"]


def test_a_damaged_result_file_is_refused(stored, tmp_path, capsys):
    (tmp_path / "meas.csv").write_text("kind,a,b,value,accuracy\nV,mid,,6,1%\n")
    out = tmp_path / "cmp.h5"
    assert main(["compare", str(tmp_path / "net.csv"), str(tmp_path / "meas.csv"),
                 "-o", str(out)]) in (0, 1)
    columns, _, root = read_results(out, "comparison")
    assert columns["measured"].tolist() == [6.0] and len(root[DIGEST_ATTRIBUTE]) == 64
    with h5py.File(out, "r") as h5:
        offset = h5["comparison/model"].id.get_chunk_info(0).byte_offset
    flip(out, offset)
    with pytest.raises(InputError, match="/comparison/model is damaged"):
        read_results(out, "comparison")
