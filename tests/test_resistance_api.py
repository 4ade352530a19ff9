"""The Python API cannot be misread: labels are str, indices have their own functions, and
from_networkx is told which edge attribute holds the value."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from ohmgraph.engine import Network, Readings
from ohmgraph.engine.resistance import ResistanceSolver


@pytest.fixture
def path_3012():
    """The path 3-0-1-2 of 1-ohm resistors: node indices follow first appearance (3, 0, 1, 2)."""
    return Network.from_arrays(["3", "0", "1"], ["0", "1", "2"], [1.0, 1.0, 1.0])


def test_labels_are_labels_and_indices_are_indices(path_3012):
    solver = ResistanceSolver(path_3012)
    # Series resistors add (common practice): 3 ohm end to end, 2 ohm from 3 to 1.
    assert path_3012.node_labels.tolist() == ["3", "0", "1", "2"]
    assert solver.pair("3", "2")[0] == pytest.approx(3.0, rel=1e-14)
    assert solver.pair_by_index(0, 3)[0] == pytest.approx(3.0, rel=1e-14)
    assert solver.pair_by_index(3, 2)[0] == pytest.approx(1.0, rel=1e-14)   # labels '2', '1'
    np.testing.assert_allclose(solver.pairs(["3", "0"], ["1", "2"]).ohms, [2.0, 2.0])
    np.testing.assert_allclose(solver.pairs_by_index([0, 1], [2, 3]).ohms, [2.0, 2.0])
    # the reference is node '0' (index 1)
    np.testing.assert_allclose(solver.to_reference(["3", "2"]).ohms, [1.0, 2.0])
    np.testing.assert_allclose(solver.to_reference_by_index([0, 3]).ohms, [1.0, 2.0])
    supers, reduced = solver.kron_reduction(["3", "2"])
    # Kron reduction of a series path onto its ends: one 3-ohm resistor (Dörfler & Bullo 2013).
    np.testing.assert_allclose(reduced, [[1 / 3, -1 / 3], [-1 / 3, 1 / 3]], rtol=1e-12)
    supers_i, reduced_i = solver.kron_reduction_by_index([0, 3])
    assert supers.tolist() == supers_i.tolist()
    np.testing.assert_allclose(reduced, reduced_i)


@pytest.mark.parametrize("call, error, message", [
    (lambda s: s.pair(3, 2), TypeError, "must be a str, not int"),
    (lambda s: s.pair("3", np.int64(2)), TypeError, "must be a str"),
    (lambda s: s.pairs([3], [2]), TypeError, "must be a str"),
    (lambda s: s.to_reference([1]), TypeError, "must be a str"),
    (lambda s: s.kron_reduction([0, 3]), TypeError, "must be a str"),
    (lambda s: s.pair_by_index("3", "2"), TypeError, "must be integers"),
    (lambda s: s.pairs_by_index(["3"], ["2"]), TypeError, "must be integers"),
    (lambda s: s.pairs_by_index([0.0], [1.0]), TypeError, "must be integers"),
    (lambda s: s.pair("9", "2"), KeyError, "unknown node '9'"),
    (lambda s: s.to_reference(["ghost"]), KeyError, "unknown node 'ghost'"),
    (lambda s: s.pair_by_index(7, 0), IndexError, "node index 7 is out of range"),
    (lambda s: s.pairs_by_index([0], [-1]), IndexError, "node index -1"),
])
def test_misuse_is_refused_with_a_clear_message(path_3012, call, error, message):
    with pytest.raises(error, match=message):
        call(ResistanceSolver(path_3012))


def test_network_lookups_take_only_str(path_3012):
    assert path_3012.node_index(["2", "3"]).tolist() == [3, 0]
    with pytest.raises(TypeError, match="not int"):
        path_3012.node_index(2)
    with pytest.raises(TypeError, match="not int"):
        path_3012.with_reference(0)
    with pytest.raises(TypeError, match="must be a str"):
        Network.from_arrays(["a"], ["b"], [1.0], reference=0)
    with pytest.raises(TypeError, match="must be a str"):
        Readings.from_labels(path_3012, ["V"], [3], [""])
    # None: any node will do (queries that need no reference)
    assert Network.from_arrays(["a"], ["b"], [1.0], reference=None).reference_label == "a"


def weighted_path():
    graph = nx.path_graph(4)
    for (u, v), w in zip(graph.edges, [4.0, 5.0, 3.0]):
        graph.edges[u, v]["weight"] = w
    return graph


def test_from_networkx_refuses_an_unexplained_weight():
    with pytest.raises(ValueError, match="ohms='weight'.*siemens='weight'"):
        Network.from_networkx(weighted_path())


def test_from_networkx_reads_the_named_attribute():
    graph = weighted_path()
    # Series resistors add; series conductances combine as 1/sum(1/g) (common practice).
    as_ohms = ResistanceSolver(Network.from_networkx(graph, ohms="weight"))
    assert as_ohms.pair("0", "3")[0] == pytest.approx(12.0, rel=1e-14)
    as_siemens = ResistanceSolver(Network.from_networkx(graph, siemens="weight"))
    assert as_siemens.pair("0", "3")[0] == pytest.approx(1 / 4 + 1 / 5 + 1 / 3, rel=1e-14)
    unit = ResistanceSolver(Network.from_networkx(nx.path_graph(4), ohms=1.0))
    assert unit.pair("0", "3")[0] == pytest.approx(3.0, rel=1e-14)


@pytest.mark.parametrize("kwargs, error, message", [
    (dict(), ValueError, "no 'value' attribute; pass ohms="),
    (dict(ohms="resistance"), ValueError, "has no 'resistance' attribute"),
    (dict(ohms="weight", siemens="weight"), ValueError, "either ohms= or siemens="),
    (dict(siemens=2.0), TypeError, "siemens must name an edge attribute"),
    (dict(ohms=True), TypeError, "ohms must name"),
])
def test_from_networkx_refusals(kwargs, error, message):
    with pytest.raises(error, match=message):
        Network.from_networkx(nx.path_graph(3), **kwargs)


def test_from_networkx_zero_conductance_and_sources():
    graph = nx.Graph()
    graph.add_edge("0", "a", weight=0.0)
    with pytest.raises(ValueError, match="not positive"):
        Network.from_networkx(graph, siemens="weight")
    graph = nx.DiGraph()
    graph.add_edge("a", "0", kind="V", value=5.0)
    graph.add_edge("a", "b", resistance=2.0)
    net = Network.from_networkx(graph, ohms="resistance")
    assert net.value.tolist() == [5.0, 2.0]
