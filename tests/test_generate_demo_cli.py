"""The ``generate`` and ``demo`` commands: files readable back, exit codes, nothing partial."""

from __future__ import annotations

import pytest

from ohmgraph.datasets import grid2d, knn_network, layered_mesh
from ohmgraph.engine import VOLTAGE_SOURCE
from ohmgraph.io.cli import main
from ohmgraph.io.reader import read_network
from ohmgraph.io.store import read_solution


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def same_network(a, b) -> bool:
    """Same branches (names, kinds, endpoint labels, values) and reference."""
    def rows(net):
        labels = net.node_labels
        return sorted(zip(net.branch_names.tolist(), net.kind.tolist(),
                          labels[net.from_node].tolist(), labels[net.to_node].tolist(),
                          net.value.tolist()))
    return rows(a) == rows(b) and a.reference_label == b.reference_label


@pytest.mark.parametrize("argv, expected", [
    (["grid2d", 8, 6, "--pads", 2, "--loads", 5, "--seed", 3],
     lambda: grid2d(8, 6, pads=2, loads=5, seed=3)),
    (["layered-mesh", 16, 12, "--layers", 2, "--sheet-ohms", 0.01, 0.05, "--load-clusters", 2,
      "--loads", 30], lambda: layered_mesh(16, 12, sheet_ohms=(0.01, 0.05), load_clusters=2,
                                          loads=30)),
    (["knn", 120, "-k", 3, "--seed", 8], lambda: knn_network(120, 3, 8)),
])
def test_generate_writes_the_generators_network(tmp_path, capsys, argv, expected):
    out = tmp_path / "net.csv.gz"
    code, text, err = run(capsys, "generate", *argv, "-o", out)
    assert code == 0, err
    assert text.count("\n") == 1 and "nodes" in text and "branches" in text
    net = expected()
    assert same_network(read_network(out, ground=net.reference_label), net)


def test_generate_every_kind_is_readable_and_checkable(tmp_path, capsys):
    for argv in (["grid3d", 3, 4, 2], ["ladder", 5, "--source-volts", 2.5],
                 ["grid2d", 4, 4, "--reference", "2_2"]):
        out = tmp_path / f"{argv[0]}.tsv"
        code, _, err = run(capsys, "generate", *argv, "-o", out)
        assert code == 0, err
        ground = "2_2" if "--reference" in argv else ("0_0_0" if argv[0] == "grid3d" else "0")
        code, _, err = run(capsys, "check", out, "--ground", ground)
        assert code == 0, err


def test_generate_refuses_to_overwrite(tmp_path, capsys):
    out = tmp_path / "net.csv"
    out.write_text("precious")
    code, _, err = run(capsys, "generate", "ladder", 3, "-o", out)
    assert code == 3 and "already exists" in err and "Traceback" not in err
    assert out.read_text() == "precious"
    code, _, err = run(capsys, "generate", "ladder", 3, "-o", out, "--force")
    assert code == 0, err
    assert read_network(out).n_branches == 6


@pytest.mark.parametrize("argv, words", [
    (["grid2d", 4, 4, "--loads", 3], "need at least one pad"),
    (["grid2d", 2, 2, "--pads", 9], "only 4 nodes"),
    (["layered-mesh", 8, 8, "--pitch", 2, 1, 1], "1 or 2 values"),
])
def test_generate_impossible_request_is_exit_2_without_file(tmp_path, capsys, argv, words):
    out = tmp_path / "net.csv"
    code, _, err = run(capsys, "generate", *argv, "-o", out)
    assert code == 2 and words in err and "Traceback" not in err
    assert not out.exists()


def test_generate_unknown_extension_is_exit_2(tmp_path, capsys):
    code, _, err = run(capsys, "generate", "ladder", 3, "-o", tmp_path / "net.xlsx")
    assert code == 2 and ".csv" in err
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("argv", [
    ["grid2d", 0, 4], ["grid2d", 4], ["grid2d", 4, 4, "--ohms", "-1"],
    ["grid2d", 4, 4, "--ohms", "nan"], ["knn", 10, "-k", "two"], ["torus", 4],
])
def test_generate_bad_arguments_exit_2(tmp_path, capsys, argv):
    with pytest.raises(SystemExit) as stop:            # argparse's documented exit status
        main(["generate", *map(str, argv), "-o", str(tmp_path / "net.csv")])
    assert stop.value.code == 2
    assert "error:" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_demo_small_runs_and_stores_a_solution(tmp_path, capsys):
    folder = tmp_path / "demo"
    code, text, err = run(capsys, "demo", "--output-dir", folder, "--size", 16)
    assert code == 0, err
    assert "invented" in text and "well-posed" in text and f"ohmgraph show {folder}" in text
    stored = read_solution(folder / "sensor_board.h5")
    net = read_network(folder / "sensor_board.csv")
    assert stored.network.n_branches == net.n_branches
    pads = net.kind == VOLTAGE_SOURCE
    pad_labels = set(net.node_labels[net.from_node[pads]].tolist())
    voltage = dict(zip(stored.network.node_labels.tolist(), stored.node_voltage.tolist()))
    # every pad sits at the supply (KVL across an ideal source: common practice); the loads
    # pull every other mesh node below it
    assert all(voltage[label] == pytest.approx(1.2, abs=1e-12) for label in pad_labels)
    mesh = [v for label, v in voltage.items() if label != "0"]
    assert max(mesh) == pytest.approx(1.2, abs=1e-12) and min(mesh) < 1.2
    # the sign-off part: node table, drop and coordinates stored, map and report written
    assert "nodes/drop" in stored.extra and "nodes/x" in stored.extra
    assert "limits exceeded" in text or "no limit exceeded" in text
    assert (folder / "sensor_board_drop.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    page = (folder / "sensor_board_report.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>") and page.count("data:image/png;base64,") == 2
    # running again replaces the demo's own files
    code, _, err = run(capsys, "demo", "--output-dir", folder, "--size", 16)
    assert code == 0, err


def test_demo_output_dir_that_is_a_file_is_exit_3(tmp_path, capsys):
    blocker = tmp_path / "taken"
    blocker.write_text("x")
    code, _, err = run(capsys, "demo", "--output-dir", blocker, "--size", 8)
    assert code == 3 and "taken" in err and "Traceback" not in err


def test_demo_rejects_a_tiny_board(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["demo", "--size", "3"])
    assert stop.value.code == 2
    assert "must be at least 8" in capsys.readouterr().err
