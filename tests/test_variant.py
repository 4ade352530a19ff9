"""Variants: change files, re-solves that reuse the base set-up or start from a stored
solution, and diff — each checked against a fresh solve of the changed network."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest

from ohmgraph.datasets.generators import grid2d, layered_mesh
from ohmgraph.engine import Network, check, solve
from ohmgraph.engine.solve import NetworkNotSolvable
from ohmgraph.engine.formulation import assemble
from ohmgraph.engine.network import RESISTOR
from ohmgraph.engine.variant import BranchChanges, _updated_system, apply_changes, resolve
from ohmgraph.io.cli import main

DIVIDER = "name,kind,from,to,value\nV1,V,in,0,5\nR1,R,in,mid,2\nR2,R,mid,0,3\n"


def _random_changes(net, fraction, seed):
    rng = np.random.default_rng(seed)
    resistors = np.flatnonzero(net.kind == RESISTOR)
    index = np.sort(rng.choice(resistors, max(1, int(net.n_branches * fraction)), replace=False))
    return BranchChanges(index, net.value[index] * rng.uniform(0.5, 2.0, index.size))


def test_updated_system_equals_a_new_assembly():
    net = layered_mesh(12, 12, 2, pads=3, loads=20, seed=4)
    base = solve(net)
    changes = _random_changes(net, 0.05, 1)
    loads = np.flatnonzero(net.kind == 2)[:3]
    changes = BranchChanges(np.concatenate([changes.index, loads]),
                            np.concatenate([changes.value, net.value[loads] * 2]))
    changed = apply_changes(net, changes)
    updated = _updated_system(base, changed, changes.index)
    report = check(changed)
    fresh = assemble(changed, report.contraction, report.pinned_nodes)
    np.testing.assert_allclose(updated.matrix.toarray(), fresh.matrix.toarray(), atol=1e-12)
    np.testing.assert_allclose(updated.rhs, fresh.rhs, atol=1e-12)


@pytest.mark.parametrize("side, method", [(20, "direct"), (120, "amg-cg")])
def test_resolve_matches_a_fresh_solve(side, method):
    net = grid2d(side, side, 1.0, pads=4, loads=side * side // 10, load_amps=1e-4, seed=1)
    base = solve(net, method=method)
    changes = _random_changes(net, 0.01, 2)
    _matches_a_fresh_solve(base, changes, method)


def _matches_a_fresh_solve(base, changes, method):
    """The variant re-solved with the base set-up agrees with a fresh solve of the changed
    network: both meet rtol 1e-10 on systems whose solution is about 1 V and whose condition
    number is below 1e4 (lattices of at most 120 x 120), so 1e-8 V and 1e-8 A are generous;
    its evidence (KCL residual, power balance) is recomputed."""
    variant = resolve(base, changes)
    fresh = solve(apply_changes(base.network, changes), method=method)
    assert "base set-up" in variant.notes[0]
    assert variant.relative_residual <= base.rtol
    np.testing.assert_allclose(variant.node_voltage, fresh.node_voltage, atol=1e-8)
    np.testing.assert_allclose(variant.branch_current, fresh.branch_current, atol=1e-8)
    assert variant.kcl_max_residual < 1e-8
    assert abs(variant.power_balance) < 1e-8 * variant.power_delivered


def test_resolve_with_structural_changes():
    """The divider: opening R2 leaves 'mid' at 5 V; adding R3 = 3 ohm beside R2 gives
    V(mid) = 5 * 1.5 / 3.5; a new node 'tap' behind R4 = 1 ohm from 'mid' carries no current
    and sits at V(mid) (common practice: voltage divider)."""
    net = Network.from_arrays(["in", "in", "mid"], ["0", "mid", "0"], [5.0, 2.0, 3.0],
                              ["V", "R", "R"], names=["V1", "R1", "R2"])
    base = solve(net)
    added = BranchChanges(np.empty(0, np.int64), np.empty(0), np.array(["R3"]),
                          np.array([RESISTOR], np.uint8), np.array(["mid"]), np.array(["0"]),
                          np.array([3.0]))
    variant = resolve(base, added)
    mid = variant.network.node_index("mid")[0]
    assert variant.node_voltage[mid] == pytest.approx(5 * 1.5 / 3.5)
    assert "base set-up" in variant.notes[0] and "structure checked" in variant.notes[0]
    opened = resolve(base, BranchChanges(np.array([2]), np.array([np.inf])))
    assert opened.network.n_branches == 2
    assert opened.node_voltage[opened.network.node_index("mid")[0]] == pytest.approx(5.0)
    tap = resolve(base, BranchChanges(np.empty(0, np.int64), np.empty(0), np.array(["R4"]),
                                      np.array([RESISTOR], np.uint8), np.array(["mid"]),
                                      np.array(["tap"]), np.array([1.0])))
    assert "from scratch" in tap.notes[-1]                   # a new node: new unknowns
    assert tap.node_voltage[tap.network.node_index("tap")[0]] == pytest.approx(3.0)


def _mesh_and_base(method):
    net = grid2d(40, 40, 1.0, pads=4, loads=160, load_amps=1e-4, seed=3)
    return net, solve(net, method=method)


@pytest.mark.parametrize("method", ["direct", "amg-cg"])
def test_opened_and_added_resistors_match_a_fresh_solve(method):
    net, base = _mesh_and_base(method)
    rng = np.random.default_rng(7)
    resistors = np.flatnonzero(net.kind == RESISTOR)
    # open resistors of the lattice's interior (both ends keep other resistors)
    opened = rng.choice(resistors[np.char.startswith(net.branch_names[resistors].astype(str),
                                                     "R")], 16, replace=False)
    labels = net.node_labels
    pairs = rng.choice(np.flatnonzero(labels != net.reference_label), (8, 2), replace=False)
    changes = BranchChanges(
        np.concatenate([opened, resistors[:4]]),
        np.concatenate([np.full(opened.size, np.inf), net.value[resistors[:4]] * 3]),
        np.array([f"added{k}" for k in range(8)]), np.full(8, RESISTOR, np.uint8),
        labels[pairs[:, 0]], labels[pairs[:, 1]], rng.uniform(0.5, 5.0, 8))
    _matches_a_fresh_solve(base, changes, method)


def test_a_change_that_cuts_nodes_off_is_refused_as_the_check_would():
    net, base = _mesh_and_base("amg-cg")
    corner = net.node_index("0_0")[0]                 # two resistors, no source here
    around = np.flatnonzero(((net.from_node == corner) | (net.to_node == corner))
                            & (net.kind == RESISTOR))
    changes = BranchChanges(around, np.full(around.size, np.inf))
    with pytest.raises(NetworkNotSolvable) as refused:
        resolve(base, changes)
    expected = check(apply_changes(net, changes))
    assert [f.code for f in refused.value.report.findings] == [f.code for f in
                                                              expected.findings]
    assert "floating" in [f.code for f in refused.value.report.findings]
    pinned = resolve(base, changes, allow_floating=True)         # as solve(allow_floating)
    assert pinned.node_voltage[corner] == 0.0 and "pinned" in " ".join(pinned.notes)


def test_value_changes_skip_the_check_but_recompute_the_spread():
    net, base = _mesh_and_base("amg-cg")
    resistor = int(np.flatnonzero(net.kind == RESISTOR)[5])
    changes = BranchChanges(np.array([resistor]), np.array([1e13]))
    variant = resolve(base, changes)
    assert variant.timings["check"] == 0.0 and "update" in variant.timings
    fresh_report = check(apply_changes(net, changes))
    assert [f.code for f in variant.report.findings] == [f.code for f in fresh_report.findings]
    assert "ill-conditioned" in [f.code for f in variant.report.findings]
    assert variant.report.summary == fresh_report.summary
    np.testing.assert_allclose(variant.node_voltage,
                               solve(apply_changes(net, changes)).node_voltage, atol=1e-8)


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out + err


def test_cli_variant_with_changes_and_warm_start(tmp_path, capsys):
    (tmp_path / "d.csv").write_text(DIVIDER)
    # R1 set to 1 ohm and R3 = 3 ohm added beside R2: 1 + 1.5 = 2.5 ohm, 2 A, V(mid) = 3 V
    # (common practice: series and parallel resistors)
    (tmp_path / "c.csv").write_text("name,kind,from,to,value\nR1,R,in,mid,1\nR3,R,mid,0,3\n")
    assert run(capsys, "solve", tmp_path / "d.csv", "-o", tmp_path / "a.h5")[0] == 0
    code, text = run(capsys, "solve", tmp_path / "d.csv", "--changes", tmp_path / "c.csv",
                     "--start-from", tmp_path / "a.h5", "-o", tmp_path / "b.h5")
    assert code == 0, text
    assert "1 value(s) set" in text and "1 branch(es) added" in text and "started from" in text
    with h5py.File(tmp_path / "b.h5") as h5:
        names = h5["branches/name"].asstr()[...].tolist()
        current = h5["branches/current"][...]
    assert current[names.index("R1")] == pytest.approx(2.0)
    assert current[names.index("R3")] == pytest.approx(1.0)
    assert "network taken from" in text            # NET unchanged since a.h5: reused
    # b.h5 holds a changed network: a run from it must read NET again
    code, text = run(capsys, "solve", tmp_path / "d.csv", "--start-from", tmp_path / "b.h5",
                     "-o", tmp_path / "again.h5")
    assert code == 0 and "network taken from" not in text
    with h5py.File(tmp_path / "again.h5") as h5:
        assert h5["branches/name"].shape == (3,)
    code, text = run(capsys, "diff", tmp_path / "a.h5", tmp_path / "b.h5", "--json")
    result = json.loads(text)
    assert code == 0 and result["branches"]["only_in_B"] == 1
    assert result["voltage_change_V"]["largest_magnitude"] == pytest.approx(0.0, abs=1e-12)
    changes = {row["branch"]: row["change"] for row in result["top_branches"]}
    assert changes["R1"] == pytest.approx(1.0) and changes["V1"] == pytest.approx(-1.0)


def test_cli_warm_start_matches_a_cold_solve_on_a_mesh(tmp_path, capsys):
    net = grid2d(150, 150, 0.01, pads=6, loads=2000, load_amps=1e-3, supply_volts=0.9, seed=5)
    from ohmgraph.io.branch_table import write_branch_table

    write_branch_table(tmp_path / "m.csv", net)
    rng = np.random.default_rng(3)
    picked = rng.choice(np.flatnonzero(net.kind == RESISTOR), net.n_branches // 100,
                        replace=False)
    rows = "".join(f"{net.branch_names[k]},{float(net.value[k]) * 1.5!r}\n" for k in picked)
    (tmp_path / "c.csv").write_text("name,value\n" + rows)
    for argv in (["-o", tmp_path / "a.h5"],
                 ["--changes", tmp_path / "c.csv", "-o", tmp_path / "cold.h5"],
                 ["--changes", tmp_path / "c.csv", "--start-from", tmp_path / "a.h5",
                  "-o", tmp_path / "warm.h5", "--method", "amg-cg"]):
        code, text = run(capsys, "solve", tmp_path / "m.csv", *argv)
        assert code == 0, text
    with h5py.File(tmp_path / "cold.h5") as cold, h5py.File(tmp_path / "warm.h5") as warm:
        np.testing.assert_allclose(warm["nodes/voltage"][...], cold["nodes/voltage"][...],
                                   atol=1e-9)
        assert warm.attrs["relative_residual"] <= 1e-10
    code, text = run(capsys, "diff", tmp_path / "a.h5", tmp_path / "warm.h5", "--top", "3")
    assert code == 0 and "largest voltage changes" in text and "worst drop" in text


def test_cli_value_changes_keep_the_stored_check_and_match_a_fresh_run(tmp_path, capsys):
    from ohmgraph.io.branch_table import write_branch_table

    net = grid2d(40, 40, 1.0, pads=4, loads=160, load_amps=1e-4, seed=3)
    write_branch_table(tmp_path / "m.csv", net)
    picked = np.flatnonzero(net.kind == RESISTOR)[::97]
    values = net.value[picked] * 1.7
    values[0] = 2e12                                   # spread over 1e12: a warning appears
    rows = "".join(f"{net.branch_names[k]},{float(v)!r}\n" for k, v in zip(picked, values))
    (tmp_path / "c.csv").write_text("name,value\n" + rows)
    changed = apply_changes(net, BranchChanges(picked, values))
    write_branch_table(tmp_path / "changed.csv", changed)
    assert run(capsys, "solve", tmp_path / "m.csv", "-o", tmp_path / "a.h5")[0] == 0
    code, text = run(capsys, "solve", tmp_path / "m.csv", "--changes", tmp_path / "c.csv",
                     "--start-from", tmp_path / "a.h5", "-o", tmp_path / "v.h5")
    assert code == 0, text
    assert "check of" in text and "kept" in text
    assert run(capsys, "solve", tmp_path / "changed.csv", "-o", tmp_path / "f.h5")[0] == 0
    with h5py.File(tmp_path / "v.h5") as v, h5py.File(tmp_path / "f.h5") as f:
        np.testing.assert_allclose(v["nodes/voltage"][...], f["nodes/voltage"][...], atol=1e-8)
        assert v["checks/code"].asstr()[...].tolist() == f["checks/code"].asstr()[...].tolist()
        assert "ill-conditioned" in v["checks/code"].asstr()[...].tolist()
        assert dict(v["checks"].attrs) == dict(f["checks"].attrs)


def test_cli_change_that_cuts_a_node_off_is_refused(tmp_path, capsys):
    (tmp_path / "d.csv").write_text(DIVIDER + "R3,R,mid,end,1\n")
    (tmp_path / "c.csv").write_text("name,value\nR3,inf\n")    # 'end' hangs on R3 alone
    assert run(capsys, "solve", tmp_path / "d.csv", "-o", tmp_path / "a.h5")[0] == 0
    code, text = run(capsys, "solve", tmp_path / "d.csv", "--changes", tmp_path / "c.csv",
                     "--start-from", tmp_path / "a.h5", "-o", tmp_path / "b.h5")
    assert code == 1 and "floating" in text and not (tmp_path / "b.h5").exists()


def test_cli_variant_of_an_hdf5_network_file_reads_it_and_keeps_the_check(tmp_path, capsys):
    (tmp_path / "d.csv").write_text(DIVIDER)
    (tmp_path / "c.csv").write_text("name,value\nR1,1\n")     # 5 V over 1 + 3 ohm: 3.75 V
    assert run(capsys, "convert", tmp_path / "d.csv", "-o", tmp_path / "d.h5")[0] == 0
    assert run(capsys, "solve", tmp_path / "d.h5", "-o", tmp_path / "a.h5")[0] == 0
    code, text = run(capsys, "solve", tmp_path / "d.h5", "--changes", tmp_path / "c.csv",
                     "--start-from", tmp_path / "a.h5", "-o", tmp_path / "b.h5")
    assert code == 0, text
    assert "network taken from" not in text and "check of" in text and "kept" in text
    with h5py.File(tmp_path / "b.h5") as h5:
        labels = h5["nodes/label"].asstr()[...].tolist()
        assert h5["nodes/voltage"][labels.index("mid")] == pytest.approx(3.75)


def test_few_changes_on_a_factorised_base_take_few_iterations():
    """CG preconditioned by the exact inverse of A0 solves A1 = A0 + (k changed conductances)
    in at most k + 1 steps in exact arithmetic, A0^-1 A1 having at most k + 1 distinct
    eigenvalues (Hestenes & Stiefel 1952, J. Res. NBS 49, 409; common practice)."""
    net, base = _mesh_and_base("direct")
    rng = np.random.default_rng(5)
    index = np.sort(rng.choice(np.flatnonzero(net.kind == RESISTOR), 4, replace=False))
    changes = BranchChanges(index, net.value[index] * np.array([0.5, 2.0, 3.0, 0.25]))
    variant = resolve(base, changes)
    assert "base set-up" in variant.notes[0]
    assert variant.iterations <= 4 + 1 + 1                     # one more for rounding
    np.testing.assert_allclose(variant.node_voltage,
                               solve(apply_changes(net, changes)).node_voltage, atol=1e-9)


def test_warm_start_read_matches_the_whole_read_and_refuses_other_files(tmp_path, capsys):
    from ohmgraph.io.errors import InputError
    from ohmgraph.io.store import read_solution, read_warm_start

    (tmp_path / "d.csv").write_text(DIVIDER)
    (tmp_path / "n.csv").write_text("label,x,y\nin,0,0\nmid,1,0\n0,2,0\n")
    assert run(capsys, "solve", tmp_path / "d.csv", "--nodes", tmp_path / "n.csv",
               "-o", tmp_path / "a.h5")[0] == 0
    whole, lean = read_solution(tmp_path / "a.h5"), read_warm_start(tmp_path / "a.h5")
    np.testing.assert_array_equal(lean.node_labels, whole.node_labels)
    np.testing.assert_array_equal(lean.node_voltage, whole.node_voltage)
    np.testing.assert_array_equal(lean.extra["nodes/x"], whole.extra["nodes/x"])
    assert lean.check_summary == whole.check_summary and lean.attrs == whole.attrs
    assert run(capsys, "convert", tmp_path / "d.csv", "-o", tmp_path / "d.h5")[0] == 0
    with pytest.raises(InputError, match="not an ohmgraph solution file"):
        read_warm_start(tmp_path / "d.h5")                      # a network file, not a solution
    with h5py.File(tmp_path / "a.h5", "a") as h5:
        del h5["nodes/voltage"]
    code, text = run(capsys, "solve", tmp_path / "d.h5", "--start-from", tmp_path / "a.h5",
                     "-o", tmp_path / "b.h5")
    assert code == 2 and "missing dataset /nodes/voltage" in text
    assert not (tmp_path / "b.h5").exists()


def test_change_file_finds_branches_by_name_in_any_script(tmp_path):
    """Names are matched as UTF-8 bytes: non-ASCII names and names that share a prefix."""
    from ohmgraph.io.changes import read_changes

    net = Network.from_arrays(["a", "a", "b", "a"], ["0", "b", "0", "0"], [1.0, 2.0, 3.0, 1.0],
                              kinds=["R", "R", "R", "V"], names=["Rø1", "R1", "R10", "V1"])
    (tmp_path / "c.csv").write_text("name,value\nR10,4\nRø1,5\n", encoding="utf-8")
    changes = read_changes(tmp_path / "c.csv", net).changes
    assert dict(zip(net.branch_names[changes.index].tolist(), changes.value.tolist())) == {
        "R10": 4.0, "Rø1": 5.0}
