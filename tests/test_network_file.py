"""The HDF5 network file (``ohmgraph convert``): round trip, slices, stored contraction."""

from __future__ import annotations

import numpy as np
import pytest

from ohmgraph.engine.checks import check
from ohmgraph.engine.formulation import assemble
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.cli import main
from ohmgraph.io.network_file import StoredNetwork, is_hdf5, write_network_file
from ohmgraph.io.reader import read_network
from ohmgraph.io.store import read_solution
from reference_mna import mna_solve


@pytest.fixture
def converted(tmp_path, make_network, capsys):
    """A random well-posed network as CSV and as the HDF5 network file ``convert`` writes."""
    net = make_network(7, n_nodes=300, extra_resistors=400)
    csv = tmp_path / "net.csv"
    write_branch_table(csv, net)
    assert main(["convert", str(csv), "-o", str(tmp_path / "net.h5")]) == 0
    capsys.readouterr()
    return csv, tmp_path / "net.h5"


def test_network_file_reads_back_the_same_network(converted):
    csv, h5 = converted
    assert is_hdf5(h5) and not is_hdf5(csv)
    a, b = read_network(csv), read_network(h5)
    for field in ("node_labels", "branch_names", "kind", "from_node", "to_node", "value"):
        np.testing.assert_array_equal(getattr(a, field), getattr(b, field))
    assert a.reference == b.reference


def test_slices_concatenate_to_the_whole_table(converted):
    _, h5 = converted
    with StoredNetwork(h5) as stored:
        whole = stored.network()
        cuts = [0, 1, 250, 600, stored.n_branches]
        parts = [stored.branches(lo, hi) for lo, hi in zip(cuts[:-1], cuts[1:])]
    np.testing.assert_array_equal(np.concatenate([p.from_node for p in parts]), whole.from_node)
    np.testing.assert_array_equal(np.concatenate([p.kind for p in parts]), whole.kind)
    np.testing.assert_array_equal(np.concatenate([p.value for p in parts]), whole.value)


def test_stored_numbering_gives_the_node_voltages(converted):
    """V = x[unknown] + offset (free) or held + offset, checked against the independent MNA
    reference (tests/reference_mna.py)."""
    _, h5 = converted
    net = read_network(h5)
    report = check(net)
    system = assemble(net, report.contraction)
    with StoredNetwork(h5) as stored:
        unknown, held, offset = (stored.column(f"nodes/{n}") for n in ("unknown", "held",
                                                                       "offset"))
    np.testing.assert_array_equal(np.unique(unknown[unknown >= 0]), np.arange(system.n_unknowns))
    # Map the MNA voltages of each supernode's root into the stored unknown order.
    expected = mna_solve(net).node_voltage
    u = np.zeros(system.n_unknowns)
    u[unknown[unknown >= 0]] = (expected - offset)[unknown >= 0]
    rebuilt = np.where(unknown >= 0, u[np.maximum(unknown, 0)], held) + offset
    np.testing.assert_allclose(rebuilt, expected, rtol=0, atol=1e-9 * np.abs(expected).max())


def test_solve_from_network_file_matches_solve_from_csv(converted, tmp_path, capsys):
    csv, h5 = converted
    assert main(["solve", str(csv), "-o", str(tmp_path / "a.h5")]) == 0
    assert main(["solve", str(h5), "-o", str(tmp_path / "b.h5")]) == 0
    capsys.readouterr()
    a, b = read_solution(tmp_path / "a.h5"), read_solution(tmp_path / "b.h5")
    np.testing.assert_array_equal(a.node_voltage, b.node_voltage)
    np.testing.assert_array_equal(a.branch_current, b.branch_current)


def test_findings_and_contraction_are_stored(converted, make_network):
    _, h5 = converted
    with StoredNetwork(h5) as stored:
        net = stored.network()
        findings, summary = stored.checks()
        source_branches = stored.column("contraction/source_branches")
    report = check(net)
    assert summary["unknowns"] == report.summary["unknowns"]
    assert [f.code for f in findings] == [f.code for f in report.findings]
    np.testing.assert_array_equal(source_branches, report.contraction.source_branches)


def test_write_network_file_refuses_existing_output(converted, make_network):
    from ohmgraph.io.errors import OutputRefused

    _, h5 = converted
    net = make_network(1)
    report = check(net)
    with pytest.raises(OutputRefused, match="already exists"):
        write_network_file(h5, net, report, assemble(net, report.contraction))
