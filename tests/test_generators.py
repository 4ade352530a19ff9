"""Network generators (``ohmgraph.datasets``) and the branch-table writer (``ohmgraph.io``)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.spatial.distance import cdist

from ohmgraph.datasets import (grid2d, grid3d, knn_network, knn_points, ladder, layered_mesh,
                               scale_free, small_world)
from ohmgraph.engine import CURRENT_SOURCE, RESISTOR, Network, check, solve
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.errors import InputError, OutputRefused
from ohmgraph.io.reader import read_network

ARRAYS = ("node_labels", "branch_names", "kind", "from_node", "to_node", "value")


def effective_resistance(net: Network, a: str, b: str) -> float:
    """Two-point resistance from the grounded Laplacian, solved by scipy (independent of the
    engine): inject 1 A at ``a`` with ``b`` grounded; the voltage at ``a`` is the resistance."""
    resistors = net.kind == RESISTOR
    i, j = net.from_node[resistors], net.to_node[resistors]
    g = 1.0 / net.value[resistors]
    n = net.n_nodes
    laplacian = sp.coo_matrix((np.concatenate([g, g, -g, -g]),
                               (np.concatenate([i, j, i, j]), np.concatenate([i, j, j, i]))),
                              shape=(n, n)).tocsr()
    ia, ib = net.node_index([a, b])
    keep = np.flatnonzero(np.arange(n) != ib)
    rhs = np.zeros(n)
    rhs[ia] = 1.0
    x = spla.spsolve(laplacian[keep][:, keep].tocsc(), rhs[keep])
    return float(x[np.searchsorted(keep, ia)])


def endpoints(net: Network) -> set:
    """Branches as (name, kind, from label, to label, value) rows, independent of node order."""
    labels = net.node_labels
    return set(zip(net.branch_names.tolist(), net.kind.tolist(),
                   labels[net.from_node].tolist(), labels[net.to_node].tolist(),
                   net.value.tolist()))


# ---------------------------------------------------------------------------- sizes by formula
@pytest.mark.parametrize("nx, ny", [(1, 1), (1, 7), (5, 3), (40, 25)])
def test_grid2d_counts(nx, ny):
    net = grid2d(nx, ny)
    # a rectangular lattice has nx*ny nodes and nx(ny-1) + ny(nx-1) edges (common practice)
    assert net.n_nodes == nx * ny
    assert net.n_branches == nx * (ny - 1) + ny * (nx - 1)
    assert net.reference_label == "0_0"
    assert len(set(net.branch_names.tolist())) == net.n_branches


@pytest.mark.parametrize("n, k, p", [(5, 2, 0.0), (100, 4, 0.1), (1000, 6, 0.5)])
def test_small_world_counts(n, k, p):
    net = small_world(n, k, p, seed=2)
    # Watts & Strogatz (Nature 393, 440, 1998): rewiring keeps the ring's n k / 2 edges
    assert net.n_nodes == n and net.n_branches == n * k // 2
    assert net.reference_label == "p0"
    assert np.all(net.from_node < net.to_node)                  # no self-loop, R{i}_{j}, i < j
    assert len(set(net.branch_names.tolist())) == net.n_branches


@pytest.mark.parametrize("n, m", [(3, 2), (100, 1), (1000, 3)])
def test_scale_free_counts(n, m):
    net = scale_free(n, m, seed=2, pads=1, loads=2)
    # Barabási & Albert (Science 286, 509, 1999), as networkx builds it: a star of m + 1 nodes,
    # then m edges per node added: (n - m) m edges; plus one pad and two loads
    assert net.n_nodes == n + 1 and net.n_branches == (n - m) * m + 3
    assert net.reference_label == "0"
    assert len(set(net.branch_names.tolist())) == net.n_branches


def test_grid2d_with_supply_adds_reference_pads_and_loads():
    net = grid2d(12, 9, 2.5, pads=3, loads=20, load_amps=0.01, supply_volts=1.8, seed=5)
    assert net.n_nodes == 12 * 9 + 1 and net.reference_label == "0"
    assert net.counts_by_kind() == {"R": 12 * 8 + 9 * 11, "V": 3, "I": 20}
    pads, loads = net.branches_of_kind("V"), net.branches_of_kind("I")
    assert np.all(net.to_node[pads] == net.reference) and np.all(net.value[pads] == 1.8)
    assert np.all(net.to_node[loads] == net.reference) and np.all(net.value[loads] == 0.01)
    assert len(set(net.from_node[pads])) == 3 and len(set(net.from_node[loads])) == 20
    assert np.all(net.value[net.kind == RESISTOR] == 2.5)


@pytest.mark.parametrize("shape", [(2, 3, 4), (6, 6, 6)])
def test_grid3d_counts(shape):
    nx, ny, nz = shape
    net = grid3d(*shape)
    # simple cubic lattice edge count, one term per axis (common practice)
    assert net.n_nodes == nx * ny * nz
    assert net.n_branches == (nx - 1) * ny * nz + nx * (ny - 1) * nz + nx * ny * (nz - 1)
    assert net.reference_label == "0_0_0"


def test_ladder_counts_and_source():
    net = ladder(7, 2.0, 3.0, source_volts=5.0)
    assert net.n_nodes == 7 + 2 and net.reference_label == "0"
    assert net.counts_by_kind() == {"R": 14, "V": 1, "I": 0}
    source = net.branches_of_kind("V")[0]
    assert net.node_labels[net.from_node[source]] == "1" and net.value[source] == 5.0
    assert ladder(4).n_branches == 8


def test_layered_mesh_counts():
    nx, ny = 11, 8
    net = layered_mesh(nx, ny, layers=3, pitch=(4, 2, 1), pads=5, loads=30, seed=2)

    def layer(p):                                     # lattice of sites that are multiples of p
        a, b = (nx - 1) // p + 1, (ny - 1) // p + 1
        return a * b, a * (b - 1) + b * (a - 1)

    nodes = [layer(p)[0] for p in (4, 2, 1)]
    wires = sum(layer(p)[1] for p in (4, 2, 1))
    vias = layer(4)[0] + layer(2)[0]                  # lcm(4,2)=4, lcm(2,1)=2
    assert net.n_nodes == sum(nodes) + 1
    assert net.counts_by_kind() == {"R": wires + vias, "V": 5, "I": 30}


def test_layered_mesh_structure():
    net = layered_mesh(20, 14, sheet_ohms=(0.01, 0.04), via_ohms=0.3, pads=4, loads=50,
                       load_amps=0.002, load_clusters=3, seed=9)
    labels = net.node_labels
    via = np.char.startswith(net.branch_names, "Rvia_")
    upper, lower = labels[net.from_node[via]], labels[net.to_node[via]]
    # a via joins the same site on adjacent layers
    assert np.all(np.char.startswith(upper, "m0_")) and np.all(np.char.startswith(lower, "m1_"))
    assert [label[2:] for label in upper] == [label[2:] for label in lower]
    assert np.all(net.value[via] == 0.3)
    wires = (net.kind == RESISTOR) & ~via
    top = np.char.startswith(labels[net.from_node[wires]], "m0_")
    assert np.all(net.value[wires][top] == 0.01 * 2) and np.all(net.value[wires][~top] == 0.04)
    pads, loads = net.branches_of_kind("V"), net.branches_of_kind("I")
    assert np.all(np.char.startswith(labels[net.from_node[pads]], "m0_"))
    assert np.all(np.char.startswith(labels[net.from_node[loads]], "m1_"))
    assert loads.size == 50 and np.all((net.value[loads] >= 0.001) & (net.value[loads] <= 0.003))
    assert check(net).solvable


def test_knn_edges_are_the_k_nearest():
    n, k = 200, 3
    net = knn_network(n, k, seed=4, ohms_per_unit=2.0)
    points = knn_points(n, 4)                         # the points knn_network(n, k, 4) joins
    assert np.array_equal(net.node_index([f"p{i}" for i in range(n)]), np.arange(n))
    # brute force with scipy's cdist over all pairs (independent of the k-d tree): the pair set
    # is the union of every point's k nearest, each pair once, resistance 2 ohm per unit length
    distance = cdist(points, points)
    np.fill_diagonal(distance, np.inf)
    nearest = np.argsort(distance, axis=1)[:, :k]
    expected = {(min(i, j), max(i, j)) for i in range(n) for j in nearest[i].tolist()}
    got = list(zip(net.from_node.tolist(), net.to_node.tolist()))
    assert len(got) == len(set(got)) and set(got) == expected
    np.testing.assert_allclose(net.value, 2.0 * distance[net.from_node, net.to_node], rtol=1e-12)
    degree = np.bincount(np.concatenate([net.from_node, net.to_node]), minlength=n)
    assert degree.min() >= k


# ---------------------------------------------------------------------------- determinism
@pytest.mark.parametrize("make", [
    lambda seed: grid2d(9, 7, pads=2, loads=6, seed=seed),
    lambda seed: grid3d(4, 3, 5, pads=2, loads=6, seed=seed),
    lambda seed: layered_mesh(16, 12, pads=3, loads=20, load_clusters=2, seed=seed),
    lambda seed: knn_network(150, 5, seed, pads=2, loads=4),
    lambda seed: small_world(200, 4, 0.2, seed, pads=2, loads=4),
    lambda seed: scale_free(200, 2, seed, pads=2, loads=4),
])
def test_same_seed_gives_identical_arrays(make):
    first, again, other = make(3), make(3), make(4)
    for name in ARRAYS:
        assert np.array_equal(getattr(first, name), getattr(again, name)), name
    assert first.reference == again.reference
    assert any(not np.array_equal(getattr(first, name), getattr(other, name))
               for name in ("from_node", "value", "node_labels"))


# ---------------------------------------------------------------------------- electrical facts
def test_grid2d_adjacent_resistance_approaches_half_ohm():
    # J. Cserti, Am. J. Phys. 68, 896 (2000): on the infinite square lattice of resistors R
    # the resistance between adjacent nodes is R/2. A finite lattice comes closer as it grows.
    errors = []
    for size in (21, 41):
        net = grid2d(size, size, ohms=3.0)
        c = size // 2
        errors.append(abs(effective_resistance(net, f"{c}_{c}", f"{c + 1}_{c}") - 1.5))
    assert errors[1] < errors[0]
    assert errors[1] < 1e-3 * 1.5


def test_grid3d_adjacent_resistance_approaches_third_ohm():
    # J. Cserti, Am. J. Phys. 68, 896 (2000), d-dimensional hypercubic lattice: adjacent nodes
    # are R/d apart, R/3 on the simple cubic lattice (recalled from memory of that paper).
    net = grid3d(15, 15, 15)
    assert effective_resistance(net, "7_7_7", "8_7_7") == pytest.approx(1 / 3, rel=1e-3)


def test_ladder_input_resistance():
    # by hand: R_1 = Rs + Rp and R_n = Rs + Rp || R_(n-1); with 1-ohm parts that gives ratios of
    # Fibonacci numbers 2, 5/3, 13/8, 34/21, ...; the infinite ladder solves R = 1 + R/(1+R),
    # R = (1 + sqrt 5)/2 (common practice)
    for n, expected in [(1, 2.0), (2, 5 / 3), (3, 13 / 8), (4, 34 / 21)]:
        assert effective_resistance(ladder(n), "1", "0") == pytest.approx(expected, rel=1e-12)
    golden = (1 + math.sqrt(5)) / 2
    assert effective_resistance(ladder(40), "1", "0") == pytest.approx(golden, rel=1e-12)
    rs, rp = 2.0, 5.0                                 # general limit (Rs + sqrt(Rs^2+4RsRp))/2
    limit = (rs + math.sqrt(rs * rs + 4 * rs * rp)) / 2
    assert effective_resistance(ladder(60, rs, rp), "1", "0") == pytest.approx(limit, rel=1e-12)


def test_supply_pads_return_the_load_current():
    # KCL at the reference node (common practice): with one pad, the pad carries exactly the
    # sum of the load currents back to the network
    net = grid2d(10, 10, pads=1, loads=15, load_amps=0.004, supply_volts=1.0, seed=1)
    solution = solve(net)
    pad = net.branches_of_kind("V")[0]
    assert solution.branch_current[pad] == pytest.approx(-15 * 0.004, rel=1e-9)
    loads = net.kind == CURRENT_SOURCE
    assert np.all(solution.node_voltage[net.from_node[loads]] < 1.0)   # loads pull below supply


# ---------------------------------------------------------------------------- bad arguments
@pytest.mark.parametrize("make, words", [
    (lambda: grid2d(4, 4, loads=2), "need at least one pad"),
    (lambda: grid2d(3, 3, pads=10), "only 9 nodes"),
    (lambda: grid2d(3, 3, pads=1, reference="1_1"), "always node '0'"),
    (lambda: grid2d(3, 3, reference="9_9"), "not a node"),
    (lambda: grid2d(0, 3), "at least 1"),
    (lambda: grid2d(3, 3, ohms=-1.0), "positive"),
    (lambda: ladder(3, shunt_ohms=0.0), "positive"),
    (lambda: layered_mesh(8, 8, layers=2, pitch=(1, 2, 3)), "1 or 2 values"),
    (lambda: layered_mesh(8, 8, layers=2, pitch=(1.5, 1)), "integer"),
    (lambda: knn_network(4, 4), "at least 5"),
])
def test_bad_arguments_raise_value_error(make, words):
    with pytest.raises(ValueError, match=words):
        make()


# ---------------------------------------------------------------------------- writer
@pytest.mark.parametrize("name", ["net.csv", "net.tsv", "net.csv.gz", "net.TSV.gz"])
def test_writer_round_trip_through_reader(tmp_path, name):
    net = layered_mesh(12, 10, pads=3, loads=15, load_clusters=2, seed=7)
    path = write_branch_table(tmp_path / name, net)
    back = read_network(path)
    assert endpoints(back) == endpoints(net)          # every value bit-for-bit
    assert back.reference_label == net.reference_label
    assert [p.name for p in tmp_path.iterdir()] == [name]       # no temporary left behind


def test_writer_keeps_full_precision_and_awkward_labels(tmp_path):
    values = np.random.default_rng(1).random(50) * 10.0 ** np.arange(-25, 25)
    labels = [f"n,{i}" if i % 3 == 0 else f'q"{i}' if i % 3 == 1 else f"t\t{i}"
              for i in range(50)]
    net = Network.from_arrays(labels, ["0"] * 50, values, names=[f"b {i}" for i in range(50)])
    for name in ("awkward.csv", "awkward.tsv"):
        back = read_network(write_branch_table(tmp_path / name, net))
        assert endpoints(back) == endpoints(net)


def test_writer_refuses_to_overwrite_and_rejects_unknown_extension(tmp_path):
    path = tmp_path / "net.csv"
    path.write_text("keep me")
    with pytest.raises(OutputRefused, match="already exists"):
        write_branch_table(path, ladder(2))
    assert path.read_text() == "keep me"
    write_branch_table(path, ladder(2), force=True)
    assert path.read_text().startswith("name,kind,from,to,value\n")
    with pytest.raises(InputError, match=r"\.csv, \.tsv"):
        write_branch_table(tmp_path / "net.json", ladder(2))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["net.csv"]
