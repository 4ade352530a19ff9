"""Effective resistance of many pairs on two MPI processes (``mpiexec -n 2 ohmgraph resistance
NET.h5 --pairs``) against the single-process engine and networkx, and launches that must fail
cleanly. Skipped, saying why, without the MPI stack (``make mpi``), like ``test_mpi.py``."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from ohmgraph.engine.network import RESISTOR, Network
from ohmgraph.engine.resistance import ResistanceSolver
from ohmgraph.io.errors import EXIT_BAD_INPUT, EXIT_OUTPUT_REFUSED
from ohmgraph.io.result_store import read_results
from test_mpi import STACK, _refused, converted, mpirun

pytestmark = pytest.mark.skipif(not STACK, reason="MPI stack not installed (mpiexec, mpi4py, "
                                                  "petsc4py): run 'make mpi'; MPI tests skipped")
RTOL = 1e-12


def pairs_file(path, net: Network, seed: int, count: int = 30):
    """Random pairs, with a repeated pair, a reversed one, a node with itself and the
    reference; returns the label arrays."""
    rng = np.random.default_rng(seed)
    ends = rng.integers(0, net.n_nodes, (count, 2))
    ends[1] = ends[0]
    ends[2] = ends[0][::-1]
    ends[3, 1] = ends[3, 0]
    ends[4, 1] = net.reference
    labels = net.node_labels[ends]
    pd.DataFrame({"a": labels[:, 0], "b": labels[:, 1]}).to_csv(path, index=False)
    return labels[:, 0], labels[:, 1]


@pytest.mark.parametrize("seed", [4])
def test_two_ranks_match_the_single_process_engine(tmp_path, make_network, seed, capsys):
    h5, net = converted(tmp_path, make_network(seed, n_nodes=300, extra_resistors=400,
                                               voltage_sources=10, ideal_connections=8,
                                               current_sources=20))
    a, b = pairs_file(tmp_path / "pairs.csv", net, seed)
    done = mpirun(2, "resistance", h5, "--pairs", "pairs.csv", "-o", "out.h5", "--rtol", RTOL,
                  cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    columns, attrs, _ = read_results(tmp_path / "out.h5", "resistance")
    assert (attrs["back_end"], attrs["ranks"], attrs["method"]) == ("petsc", 2, "pair solves")
    np.testing.assert_array_equal(columns["a"], a)
    np.testing.assert_array_equal(columns["b"], b)
    single = ResistanceSolver(net, method="direct", rtol=RTOL).pairs(a, b)
    ohms, accuracy = columns["ohms"], columns["accuracy"]
    assert ohms[3] == 0 and accuracy[3] == 0                  # a node with itself
    assert ohms[0] == ohms[1] == ohms[2] > 0                  # repeated and reversed
    assert np.all(accuracy < 1e-12)
    # Both values are within their stated bounds of the same true resistance.
    assert np.all(np.abs(ohms - single.ohms) <= (accuracy + single.accuracy) * single.ohms)


def test_two_ranks_match_networkx_on_resistors(tmp_path, make_network, capsys):
    """A network of resistors only, against networkx's ``resistance_distance`` (an independent
    computation from the pseudo-inverse of the Laplacian)."""
    import networkx as nx

    full = make_network(6, n_nodes=150)
    keep = (full.kind == RESISTOR) & (full.value > 0)    # the random spanning tree stays
    net = Network(full.node_labels, full.branch_names[keep], full.kind[keep],
                  full.from_node[keep], full.to_node[keep], full.value[keep], full.reference)
    h5, net = converted(tmp_path, net)
    a, b = pairs_file(tmp_path / "pairs.csv", net, 1, count=12)
    done = mpirun(2, "resistance", h5, "--pairs", "pairs.csv", "-o", "out.csv", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    table = pd.read_csv(tmp_path / "out.csv", dtype={"a": str, "b": str})
    assert (tmp_path / "out.csv.provenance.json").exists()
    graph = nx.Graph()
    for f, t, ohms in zip(net.from_node, net.to_node, net.value):
        if f != t:
            old = graph.get_edge_data(f, t, {"g": 0.0})["g"]
            graph.add_edge(f, t, g=old + 1.0 / ohms)
    index = net.label_index
    for row in table.itertuples():
        i, j = index[row.a], index[row.b]
        expected = 0.0 if i == j else nx.resistance_distance(graph, i, j, weight="g",
                                                             invert_weight=False)
        assert row.ohms == pytest.approx(expected, rel=1e-9, abs=1e-12)


@pytest.fixture
def small(tmp_path, make_network, capsys):
    _, net = converted(tmp_path, make_network(2))
    pairs_file(tmp_path / "pairs.csv", net, 0, count=8)
    (tmp_path / "unknown.csv").write_text(f"a,b\n{net.node_labels[1]},{net.node_labels[2]}\n"
                                          f"{net.node_labels[3]},nowhere\n")
    (tmp_path / "taken.csv").write_bytes(b"")
    return tmp_path, sorted(p.name for p in tmp_path.iterdir())


@pytest.mark.parametrize("argv, code, message", [
    (["net.csv", "--pairs", "pairs.csv", "-o", "out.h5"], EXIT_BAD_INPUT,
     "reads an HDF5 network file"),
    (["net.h5", "--between", "1", "2"], EXIT_BAD_INPUT, "answers --pairs"),
    (["net.h5", "--pairs", "unknown.csv", "-o", "out.h5"], EXIT_BAD_INPUT,
     "unknown.csv:3: column 'b': unknown node 'nowhere'"),
    (["net.h5", "--pairs", "pairs.csv", "-o", "taken.csv"], EXIT_OUTPUT_REFUSED,
     "already exists"),
])
def test_bad_launches_fail_on_every_rank_with_one_message(small, argv, code, message):
    tmp_path, before = small
    _refused(mpirun(2, "resistance", *argv, cwd=tmp_path), tmp_path, before, code, message)
