"""Well-posedness findings at the engine level, each on a tiny circuit worked out by hand."""

from __future__ import annotations

import numpy as np
import pytest

from ohmgraph.engine import Network, NetworkNotSolvable, check, solve


def network(rows, reference="0", node_labels=None) -> Network:
    """Build from ``(name, kind, from, to, value)`` rows."""
    names, kinds, frm, to, values = zip(*rows)
    return Network.from_arrays(frm, to, values, kinds, names, reference=reference,
                               node_labels=node_labels)


def codes(report) -> list:
    return [f.code for f in report.findings]


def only(report, code):
    found = [f for f in report.findings if f.code == code]
    assert len(found) == 1, codes(report)
    return found[0]


def branch_names(net, finding) -> set:
    return set(net.branch_names[finding.branches].tolist())


def node_names(net, finding) -> set:
    return set(net.node_labels[finding.nodes].tolist())


def test_kvl_violation_names_its_loop():
    # Around 0 -> a -> b -> 0: V(a) = 5 V (V1) and V(b) = V(a) + 1 V = 6 V (V2), but V3 says
    # V(b) = 3 V: KVL is off by 6 V - 3 V = 3 V. R1 is not part of the loop.
    net = network([("V1", "V", "a", "0", 5.0), ("V2", "V", "b", "a", 1.0),
                   ("V3", "V", "b", "0", 3.0), ("R1", "R", "b", "0", 10.0)])
    report = check(net)
    finding = only(report, "kvl-violation")
    assert finding.severity == "error" and not report.solvable
    assert branch_names(net, finding) == {"V1", "V2", "V3"}
    assert node_names(net, finding) == {"0", "a", "b"}
    assert "off by 3 V" in finding.message
    with pytest.raises(NetworkNotSolvable, match="kvl-violation"):
        solve(net)


def test_consistent_source_loop_warns_and_flags_loop_currents_undetermined():
    # Same loop with V3 = 6 V: KVL holds (5 + 1 - 6 = 0), but the current circulating around
    # the loop is free. V4 (c to b) hangs off the loop: its current is fixed by R2 alone,
    # (V(c) - 0) / R2 = (6 + 2) V / 4 ohm = 2 A flowing c -> 0 through R2, so 2 A from b to c
    # through V4, i.e. -2 A from its `from` (c) to its `to` (b).
    net = network([("V1", "V", "a", "0", 5.0), ("V2", "V", "b", "a", 1.0),
                   ("V3", "V", "b", "0", 6.0), ("R1", "R", "b", "0", 10.0),
                   ("V4", "V", "c", "b", 2.0), ("R2", "R", "c", "0", 4.0)])
    report = check(net)
    finding = only(report, "source-loop")
    assert finding.severity == "warning" and report.solvable
    assert finding.branches.size == 1          # one loop, named by its closing branch
    solution = solve(net, report=report)
    undetermined = set(net.branch_names[~solution.current_determined].tolist())
    assert undetermined == {"V1", "V2", "V3"}
    np.testing.assert_allclose(solution.node_voltage[net.node_index(["a", "b", "c"])],
                               [5.0, 6.0, 8.0], atol=1e-12)
    assert solution.branch_current[4] == pytest.approx(-2.0, abs=1e-12)


def test_kcl_violation_names_the_cut_set():
    # Nodes x, y (joined by R2) reach the rest only through I1, which pushes 1 A into x and
    # nothing takes it out: KCL around {x, y} fails by 1 A.
    net = network([("R1", "R", "g", "0", 1.0), ("R2", "R", "x", "y", 1.0),
                   ("I1", "I", "g", "x", 1.0)])
    report = check(net)
    finding = only(report, "kcl-violation")
    assert finding.severity == "error" and not report.solvable
    assert node_names(net, finding) == {"x", "y"}
    assert branch_names(net, finding) == {"I1"}
    assert "floating" not in codes(report)


def test_balanced_island_is_floating_not_kcl_violation():
    # I1 pushes 1 A into x and I2 takes 1 A out of y: KCL holds around {x, y}, but nothing fixes
    # their potential relative to the reference.
    net = network([("R1", "R", "g", "0", 1.0), ("R2", "R", "x", "y", 1.0),
                   ("I1", "I", "g", "x", 1.0), ("I2", "I", "y", "g", 1.0)])
    report = check(net)
    finding = only(report, "floating")
    assert node_names(net, finding) == {"x", "y"} and not report.solvable
    assert "kcl-violation" not in codes(report)


def test_allow_floating_pins_one_node_per_island():
    # Two islands, {b, c} and {d, e}, with no path to the reference: one error, or with
    # floating allowed, one pinned node (the first of each island) and a solvable network.
    net = network([("R1", "R", "a", "0", 1.0), ("V1", "V", "a", "0", 2.0),
                   ("R2", "R", "b", "c", 1.0), ("V2", "V", "c", "b", 3.0),
                   ("R3", "R", "d", "e", 2.0), ("I1", "I", "d", "e", 0.5)])
    strict = check(net)
    assert node_names(net, only(strict, "floating")) == {"b", "c", "d", "e"}
    relaxed = check(net, allow_floating=True)
    assert relaxed.solvable and "floating" not in codes(relaxed)
    assert set(net.node_labels[relaxed.pinned_nodes].tolist()) == {"b", "d"}
    assert only(relaxed, "pinned-island").severity == "info"
    solution = solve(net, allow_floating=True)
    # b pinned at 0 V, so c = 3 V; d pinned, and 0.5 A through R3 from e to d gives e = 1 V.
    np.testing.assert_allclose(solution.node_voltage[net.node_index(["b", "c", "d", "e"])],
                               [0.0, 3.0, 0.0, 1.0], atol=1e-12)
    assert any("pinned" in note for note in solution.notes)


@pytest.mark.parametrize("value, code", [(-5.0, "negative-resistance"),
                                          (np.nan, "non-finite-value"),
                                          (np.inf, "non-finite-value")])
def test_bad_values_are_errors_naming_the_branch(value, code):
    net = network([("R1", "R", "a", "0", 1.0), ("Rbad", "R", "a", "0", value)])
    report = check(net)
    finding = only(report, code)
    assert finding.severity == "error" and not report.solvable
    assert branch_names(net, finding) == {"Rbad"}


def test_non_finite_source_value_is_an_error():
    net = network([("R1", "R", "a", "0", 1.0), ("V1", "V", "a", "0", np.inf)])
    assert branch_names(net, only(check(net), "non-finite-value")) == {"V1"}


def test_self_loop_is_a_warning_and_harmless():
    # R2 starts and ends on a: it carries no current and changes nothing.
    net = network([("R1", "R", "a", "0", 2.0), ("R2", "R", "a", "a", 5.0),
                   ("I1", "I", "0", "a", 1.0)])
    report = check(net)
    finding = only(report, "self-loop")
    assert finding.severity == "warning" and report.solvable
    assert branch_names(net, finding) == {"R2"} and node_names(net, finding) == {"a"}
    # 1 A into a through R1 = 2 ohm: V(a) = 2 V (Ohm's law).
    assert solve(net).node_voltage[net.node_index("a")[0]] == pytest.approx(2.0)


def test_duplicate_names_are_a_warning():
    net = network([("R1", "R", "a", "0", 1.0), ("R1", "R", "a", "b", 1.0),
                   ("R2", "R", "b", "0", 1.0)])
    finding = only(check(net), "duplicate-name")
    assert finding.severity == "warning"
    np.testing.assert_array_equal(np.sort(finding.branches), [0, 1])


def test_ideal_connection_is_information_and_merges_nodes():
    # R2 = 0 ohm joins a and b: both sit at the 3 V that V1 imposes on a.
    net = network([("V1", "V", "a", "0", 3.0), ("R2", "R", "a", "b", 0.0),
                   ("R3", "R", "b", "0", 6.0)])
    report = check(net)
    finding = only(report, "ideal-connection")
    assert finding.severity == "info" and branch_names(net, finding) == {"R2"}
    assert report.summary["supernodes"] == 1
    solution = solve(net, report=report)
    np.testing.assert_allclose(solution.node_voltage[net.node_index(["a", "b", "0"])],
                               [3.0, 3.0, 0.0])
    # 3 V / 6 ohm = 0.5 A down R3 from b to 0, fed through R2 from a to b.
    assert solution.branch_current[1] == pytest.approx(0.5)


def test_wide_resistance_spread_is_ill_conditioned():
    # 1e6 ohm / 1e-7 ohm = 1e13, over the 1e12 limit; the finding names both extremes.
    net = network([("Rlow", "R", "a", "0", 1e-7), ("Rhigh", "R", "a", "b", 1e6),
                   ("Rmid", "R", "b", "0", 1.0)])
    finding = only(check(net), "ill-conditioned")
    assert finding.severity == "warning"
    assert branch_names(net, finding) == {"Rlow", "Rhigh"}
    assert "ill-conditioned" not in codes(check(net.with_values([1e-5, 1e6, 1.0])))


def test_empty_network_is_an_error():
    net = Network.from_arrays([], [], [], [], [], reference="0", node_labels=["0"])
    report = check(net)
    assert codes(report) == ["empty"] and not report.solvable


def test_summary_counts_on_a_small_circuit():
    # Nodes 0, a, b, c, d. V1 merges {0, a}; the 0-ohm R2 merges {b, c}; d stands alone:
    # 3 supernodes, the one holding the reference is known, so 2 unknowns, rank 2. Every node
    # is reached by some branch: 1 component. Resistances 2, 4, 8 ohm (R2 is ideal, excluded):
    # spread 8 / 2 = 4.
    rows = [("V1", "V", "a", "0", 5.0), ("R1", "R", "a", "b", 2.0),
            ("R2", "R", "b", "c", 0.0), ("R3", "R", "c", "0", 4.0),
            ("I1", "I", "0", "d", 1.0), ("R4", "R", "d", "0", 8.0)]
    summary = check(network(rows)).summary
    assert summary["nodes"] == 5 and summary["branches"] == 6
    assert summary["branches_by_kind"] == {"R": 4, "V": 1, "I": 1}
    assert summary["ideal_connections"] == 1
    assert summary["components"] == 1
    assert summary["supernodes"] == 3
    assert summary["unknowns"] == 2 and summary["rank"] == 2
    assert summary["conductance_spread"] == pytest.approx(4.0)
    assert summary["errors"] == 0 and summary["warnings"] == 0

    # Add an island e - f (R5): 2 components, 5 supernodes. Strictly, 4 unknowns of which one
    # (the island's common potential) is undetermined: rank 3. Allowing floating pins e, leaving
    # 3 unknowns of rank 3.
    island = rows + [("R5", "R", "e", "f", 1.0)]
    strict = check(network(island)).summary
    assert strict["components"] == 2 and strict["supernodes"] == 5
    assert strict["unknowns"] == 4 and strict["rank"] == 3 and strict["errors"] == 1
    relaxed = check(network(island), allow_floating=True).summary
    assert relaxed["unknowns"] == 3 and relaxed["rank"] == 3 and relaxed["errors"] == 0


def test_repeated_strings_agree_with_sorting_the_text():
    # hashes find the candidates; np.unique on the text itself is the reference
    from ohmgraph.engine.checks import repeated_strings, repeated_strings_reference

    rng = np.random.default_rng(3)
    for _ in range(200):
        texts = np.array([f"R{k}" for k in rng.integers(0, 40, rng.integers(0, 60))]
                         + ["", "Ω1", "Ω1"][:rng.integers(0, 4)], dtype=str)
        index, count = repeated_strings(texts)
        expected_index, expected_count = repeated_strings_reference(texts)
        np.testing.assert_array_equal(index, expected_index)
        assert count == expected_count
    index, count = repeated_strings(np.array(["a", "b", "a", "c", "b", "a"]))
    assert index.tolist() == [0, 1, 2, 4, 5] and count == 2


def test_largest_first_is_the_head_of_a_stable_sort():
    from ohmgraph.engine.solve import largest_first

    rng = np.random.default_rng(4)
    for trial in range(500):
        magnitude = rng.integers(0, 4, rng.integers(0, 40)).astype(float)
        if trial % 4 == 0 and magnitude.size:
            magnitude[rng.integers(0, magnitude.size)] = np.nan
        top = int(rng.integers(1, 8))
        np.testing.assert_array_equal(largest_first(magnitude, top),
                                      np.argsort(-magnitude, kind="stable")[:top])


def test_string_hash_kernel_agrees_with_numpy_columns():
    from ohmgraph.engine.checks import string_hashes

    rng = np.random.default_rng(6)
    texts = np.array([f"R{a}_{b}" for a, b in rng.integers(0, 3000, (500, 2))]
                     + ["", "Ωλ", "a" * 40], dtype=str)
    fast, plain = string_hashes(texts), string_hashes(texts, kernel=False)
    np.testing.assert_array_equal(fast, plain)
    assert fast.dtype == np.uint64 and np.unique(fast).size == np.unique(texts).size
