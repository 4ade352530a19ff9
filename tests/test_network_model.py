"""The Network model: construction from labels, invariants, networkx round trip."""

import networkx as nx
import numpy as np
import pytest

from ohmgraph.engine import Network, solve


def test_from_arrays_numbers_nodes_in_order_of_first_appearance():
    net = Network.from_arrays(["b", "a", "b"], ["0", "b", "c"], [1.0, 2.0, 3.0], ["V", "R", "i"])
    assert net.node_labels.tolist() == ["b", "a", "0", "c"]
    assert net.from_node.tolist() == [0, 1, 0]
    assert net.to_node.tolist() == [2, 0, 3]
    assert net.kind.tolist() == [1, 0, 2]
    assert net.branch_names.tolist() == ["1", "2", "3"]
    assert net.reference_label == "0"


@pytest.mark.parametrize("change, message", [
    (dict(kinds=["R", "X"]), "unknown branch kind"),
    (dict(reference="ground"), "reference node 'ground'"),
    (dict(values=[1.0]), "same length"),
])
def test_from_arrays_rejects_bad_input(change, message):
    args = dict(from_labels=["a", "b"], to_labels=["b", "0"], values=[1.0, 2.0])
    args.update(change)
    with pytest.raises(ValueError, match=message):
        Network.from_arrays(**args)


def test_constructor_enforces_structural_invariants():
    with pytest.raises(ValueError, match="out of range"):
        Network(["a", "0"], ["r"], [0], [0], [2], [1.0], 1)
    with pytest.raises(ValueError, match="kind code"):
        Network(["a", "0"], ["r"], [7], [0], [1], [1.0], 1)


def test_networkx_round_trip_keeps_branches_and_solution():
    net = Network.from_arrays(["top", "top", "mid", "0"], ["0", "mid", "0", "mid"],
                              [9.0, 1000.0, 2000.0, 1e-3], ["V", "R", "R", "I"],
                              ["supply", "r1", "r2", "load"])
    graph = net.to_networkx()
    assert isinstance(graph, nx.MultiDiGraph)
    assert graph.number_of_edges() == 4
    assert graph["top"]["mid"][0]["ohms"] == 1000.0
    back = Network.from_networkx(graph)
    assert back.branch_names.tolist() == net.branch_names.tolist()
    # Same circuit, same answer; the divider by hand: V(mid) = (9/1000 + 1e-3) / (1/1000 + 1/2000)
    # = 6.6667 V (common practice: KCL at the middle node).
    v = solve(back).node_voltage[back.node_index("mid")[0]]
    assert v == pytest.approx((9 / 1000 + 1e-3) / (1 / 1000 + 1 / 2000), rel=1e-12)


def test_passive_zeroes_sources():
    net = Network.from_arrays(["a", "a", "b"], ["0", "b", "0"], [5.0, 10.0, 2.0], ["V", "R", "I"])
    passive = net.passive()
    assert passive.n_branches == 2
    assert passive.kind.tolist() == [0, 0]
    assert passive.value.tolist() == [0.0, 10.0]
    assert np.array_equal(passive.node_labels, net.node_labels)


def test_kind_codes_of_one_character_arrays_agree_with_the_string_path():
    from ohmgraph.engine.network import kind_codes

    letters = np.random.default_rng(2).choice(list("RVIrvi"), 1000)
    general = kind_codes(letters.tolist())                    # a list: the string functions
    for array in (letters.astype("U1"), letters.astype("S1")):   # the table lookup
        np.testing.assert_array_equal(kind_codes(array), general)
    with pytest.raises(ValueError, match="unknown branch kind .*X"):
        kind_codes(np.array(["R", "X"], dtype="S1"))
