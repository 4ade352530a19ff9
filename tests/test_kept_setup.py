"""A solver set-up kept with a solution (``--keep-setup``) and rebuilt in a later run: the same
preconditioner, used only for a matrix of the same unknowns and pattern, and never trusted
without the residual check."""

from __future__ import annotations

import h5py
import numpy as np
import pytest

from ohmgraph.datasets.generators import grid2d, ladder
from ohmgraph.engine import solve
from ohmgraph.engine.network import RESISTOR
from ohmgraph.engine.session import SolveSession
from ohmgraph.engine.solvers.amg_cg import AmgCgSolver
from ohmgraph.engine.variant import BranchChanges, apply_changes
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.cli import main
from ohmgraph.io.setup_store import read_setup


def _lattice(side=60, seed=1):
    return grid2d(side, side, 1.0, pads=4, loads=side * side // 10, load_amps=1e-4, seed=seed)


def _changed(net, fraction=0.01, seed=2):
    """``net`` with ``fraction`` of its resistors each multiplied by U(0.5, 2)."""
    rng = np.random.default_rng(seed)
    index = np.sort(rng.choice(np.flatnonzero(net.kind == RESISTOR),
                               max(1, int(net.n_branches * fraction)), replace=False))
    return apply_changes(net, BranchChanges(index, net.value[index] * rng.uniform(0.5, 2, index.size)))


def test_rebuilt_hierarchy_gives_the_same_preconditioner():
    base = solve(_lattice(), method="amg-cg")
    kept = base.kept_setup()
    assert kept.arrays["sizes"].size >= 3          # 3,596 unknowns: several levels
    original = base.session.back_end
    matrix = base.system.matrix
    rebuilt = AmgCgSolver(matrix, kept=kept)
    r = np.random.default_rng(0).standard_normal((matrix.shape[0], 3))
    for column in r.T:
        expected = original.preconditioner() @ column
        np.testing.assert_allclose(rebuilt.preconditioner() @ column, expected,
                                   rtol=1e-13, atol=1e-13 * np.abs(expected).max())
    # with a changed matrix on the finest level: the cycle preconditioner(matrix) builds
    changed = solve(_changed(base.network), method="amg-cg").system.matrix
    with_changed = AmgCgSolver(changed, kept=kept)
    for column in r.T:
        expected = original.preconditioner(changed) @ column
        np.testing.assert_allclose(with_changed.preconditioner() @ column, expected,
                                   rtol=1e-13, atol=1e-13 * np.abs(expected).max())


@pytest.mark.parametrize("net", [_lattice(), ladder(40, 1.0, 2.0, source_volts=3.0)],
                         ids=["lattice", "ladder"])
def test_solve_with_a_kept_setup_matches_a_fresh_solve(net):
    """Both solves meet rtol 1e-10 on systems of about 1 V whose condition number is below
    1e4 (a 60 x 60 lattice, a 40-section ladder), so 1e-8 V is generous."""
    base = solve(net, method="amg-cg")
    changed = _changed(net, 0.05)
    variant = solve(changed, kept_setup=base.kept_setup())
    fresh = solve(changed, method="amg-cg")
    assert variant.method_reason.startswith("kept set-up rebuilt")
    assert "other values" in variant.method_reason
    assert variant.relative_residual <= 1e-10
    np.testing.assert_allclose(variant.node_voltage, fresh.node_voltage, atol=1e-8)
    again = solve(net, kept_setup=base.kept_setup())
    assert "this very matrix" in again.method_reason
    assert again.iterations == base.iterations


def test_a_setup_for_another_matrix_is_ignored_with_a_note():
    kept = solve(_lattice(60), method="amg-cg").kept_setup()
    other_size = solve(_lattice(50), kept_setup=kept)
    assert other_size.method_reason.startswith("kept set-up rebuilt") is False
    assert any("not used" in note and "3,596" in note and "2,496" in note
               for note in other_size.notes), other_size.notes
    # same size, other branches: one resistor opened, another added elsewhere
    net = _lattice(60)
    resistors = np.flatnonzero(net.kind == RESISTOR)
    moved = apply_changes(net, BranchChanges([resistors[10]], [np.inf],
                                             ["Rnew"], [RESISTOR], ["0_0"], ["30_30"], [1.0]))
    other_pattern = solve(moved, kept_setup=kept)
    assert any("not used" in note and "pattern" in note for note in other_pattern.notes)
    # asked for another back end
    direct = solve(net, method="direct", kept_setup=kept)
    assert direct.method == "direct" and any("direct was asked for" in note
                                             for note in direct.notes)


def test_a_kept_setup_that_misses_rtol_sets_up_afresh(monkeypatch):
    """A rebuilt set-up is proven like any other: when its solve misses rtol (here forced by
    allowing it one iteration) the session notes it and sets up afresh."""
    net = _lattice(60)
    kept = solve(net, method="amg-cg").kept_setup()
    changed = _changed(net, 0.05)
    monkeypatch.setattr(AmgCgSolver, "kept_max_iterations", 1)
    solution = solve(changed, kept_setup=kept)
    assert any("the kept set-up reached relative residual" in note and "set up afresh" in note
               for note in solution.notes), solution.notes
    assert not solution.method_reason.startswith("kept")
    assert solution.relative_residual <= 1e-10
    np.testing.assert_allclose(solution.node_voltage,
                               solve(changed, method="direct").node_voltage, atol=1e-8)
    # a session without the placement the set-up was stored with refuses it before solving
    session = SolveSession(solution.system.matrix, "auto", 1e-10, kept=kept)
    assert any("other nodes" in note for note in session.stats.notes)


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out + err


def _write(tmp_path, net, name):
    write_branch_table(tmp_path / name, net)
    return tmp_path / name


def test_cli_keeps_the_setup_and_the_variant_uses_it(tmp_path, capsys):
    net = _lattice(60)
    changed = _changed(net)
    index = np.flatnonzero(changed.value != net.value)
    (tmp_path / "c.csv").write_text("name,value\n" + "".join(
        f"{changed.branch_names[k]},{float(changed.value[k])!r}\n" for k in index))
    base_csv, changed_csv = _write(tmp_path, net, "m.csv"), _write(tmp_path, changed, "ch.csv")
    assert run(capsys, "solve", base_csv, "-o", tmp_path / "plain.h5", "--method", "amg-cg")[0] == 0
    with h5py.File(tmp_path / "plain.h5") as h5:
        assert "setup" not in h5                       # not without the option
    code, text = run(capsys, "solve", base_csv, "-o", tmp_path / "base.h5", "--method",
                     "amg-cg", "--keep-setup")
    assert code == 0, text
    with h5py.File(tmp_path / "base.h5") as h5:
        group = h5["setup"]
        assert group.attrs["method"] == "amg-cg"
        assert group.attrs["fingerprint.unknowns"] == h5.attrs["unknowns"]
        assert group["sizes"][0] == h5.attrs["unknowns"] and "P0/indptr" in group
    code, text = run(capsys, "solve", base_csv, "--changes", tmp_path / "c.csv",
                     "--start-from", tmp_path / "base.h5", "-o", tmp_path / "v.h5")
    assert code == 0, text
    assert run(capsys, "solve", changed_csv, "-o", tmp_path / "f.h5")[0] == 0
    with h5py.File(tmp_path / "v.h5") as v, h5py.File(tmp_path / "f.h5") as f:
        assert v.attrs["method_reason"].startswith("kept set-up rebuilt")
        assert v.attrs["relative_residual"] <= 1e-10
        # both meet rtol 1e-10 on a lattice of condition number below 1e4, about 1 V
        np.testing.assert_allclose(v["nodes/voltage"][...], f["nodes/voltage"][...], atol=1e-8)
        assert "read_setup" in v["timings"].attrs


def test_cli_divider_with_a_kept_setup(tmp_path, capsys):
    # 5 V over R1 = 2 ohm then R2 = 3 ohm; R1 set to 1 ohm: V(mid) = 5 * 3 / 4 = 3.75 V
    # (common practice: voltage divider)
    (tmp_path / "d.csv").write_text("name,kind,from,to,value\nV1,V,in,0,5\nR1,R,in,mid,2\n"
                                    "R2,R,mid,0,3\n")
    (tmp_path / "c.csv").write_text("name,value\nR1,1\n")
    assert run(capsys, "solve", tmp_path / "d.csv", "-o", tmp_path / "a.h5", "--method",
               "amg-cg", "--keep-setup")[0] == 0
    code, text = run(capsys, "solve", tmp_path / "d.csv", "--changes", tmp_path / "c.csv",
                     "--start-from", tmp_path / "a.h5", "-o", tmp_path / "b.h5")
    assert code == 0, text
    with h5py.File(tmp_path / "b.h5") as h5:
        labels = h5["nodes/label"].asstr()[...].tolist()
        assert h5["nodes/voltage"][labels.index("mid")] == pytest.approx(3.75, abs=1e-9)
        assert h5.attrs["method_reason"].startswith("kept set-up rebuilt")


def test_cli_direct_base_says_its_setup_is_not_kept(tmp_path, capsys):
    (tmp_path / "n.csv").write_text("name,kind,from,to,value\nV1,V,a,0,1\nR1,R,a,0,2\n")
    code, text = run(capsys, "solve", tmp_path / "n.csv", "-o", tmp_path / "a.h5",
                     "--method", "direct", "--keep-setup")
    assert code == 0 and "cannot be kept" in text and "--method amg-cg" in text
    with h5py.File(tmp_path / "a.h5") as h5:
        assert "setup" not in h5


def test_cli_setup_of_another_network_is_ignored_with_a_note(tmp_path, capsys):
    other = _write(tmp_path, _lattice(50), "other.csv")
    net = _write(tmp_path, _lattice(60), "m.csv")
    assert run(capsys, "solve", other, "-o", tmp_path / "o.h5", "--method", "amg-cg",
               "--keep-setup")[0] == 0
    code, text = run(capsys, "solve", net, "--start-from", tmp_path / "o.h5", "-o",
                     tmp_path / "m.h5")
    assert code == 0, text
    assert "kept amg-cg set-up not used" in text
    with h5py.File(tmp_path / "m.h5") as h5:
        assert not h5.attrs["method_reason"].startswith("kept")
        assert h5.attrs["relative_residual"] <= 1e-10


def _damage(path, how):
    with h5py.File(path, "r+") as h5:
        if how == "missing array":
            del h5["setup/P0/indices"]
        elif how == "changed attribute":
            h5["setup"].attrs["fingerprint.unknowns"] = 7
        elif how == "not a group":
            del h5["setup"]
            h5["setup"] = np.arange(3)


@pytest.mark.parametrize("how, read_note, solve_note", [
    ("missing array", None, "cannot be rebuilt"),          # read, then refused by the rebuild
    ("changed attribute", "do not match their SHA-256 digest", "/setup not used"),
    ("not a group", "it is not a group", "/setup not used")])
def test_cli_bad_setup_group_is_a_note_not_a_traceback(tmp_path, capsys, how, read_note,
                                                       solve_note):
    net = _write(tmp_path, _lattice(40), "m.csv")
    assert run(capsys, "solve", net, "-o", tmp_path / "a.h5", "--method", "amg-cg",
               "--keep-setup")[0] == 0
    _damage(tmp_path / "a.h5", how)
    kept, note = read_setup(tmp_path / "a.h5")
    if read_note is None:
        assert kept is not None and note is None
    else:
        assert kept is None and read_note in note
    code, text = run(capsys, "solve", net, "--start-from", tmp_path / "a.h5", "-o",
                     tmp_path / "b.h5")
    assert code == 0 and "Traceback" not in text
    assert solve_note in text
    with h5py.File(tmp_path / "b.h5") as h5:
        assert h5.attrs["relative_residual"] <= 1e-10
        assert not h5.attrs["method_reason"].startswith("kept")


def test_cli_base_without_a_setup_says_so(tmp_path, capsys):
    net = _write(tmp_path, _lattice(30), "m.csv")
    assert run(capsys, "solve", net, "-o", tmp_path / "a.h5")[0] == 0
    assert read_setup(tmp_path / "a.h5")[0] is None
    code, text = run(capsys, "solve", net, "--start-from", tmp_path / "a.h5", "-o",
                     tmp_path / "b.h5")
    assert code == 0 and "holds no kept solver set-up" in text
