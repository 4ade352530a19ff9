"""The engine against published closed-form values: the infinite square lattice, the resistor
cube and the infinite ladder."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from conftest import BACK_ENDS

from ohmgraph.engine import Network, solve

OHMS = 47.0   # any resistance: every result below is a multiple of R


def grid_network(side: int, source: int, sink: int) -> Network:
    """A ``side`` x ``side`` grid of equal resistors, 1 A driven from ``sink`` into ``source``
    (a current source from ``sink`` to ``source``), with ``sink`` as the reference."""
    grid = nx.convert_node_labels_to_integers(nx.grid_2d_graph(side, side), ordering="sorted")
    edges = np.array(grid.edges)
    frm = np.append(edges[:, 0], sink)
    to = np.append(edges[:, 1], source)
    values = np.append(np.full(len(edges), OHMS), 1.0)
    kinds = ["R"] * len(edges) + ["I"]
    return Network.from_arrays(frm, to, values, kinds, reference=str(sink),
                               node_labels=np.arange(side * side))


def centre_resistance(side: int, dx: int, dy: int) -> float:
    """Resistance between the centre node of the grid and the node ``(dx, dy)`` away from it."""
    centre = side // 2
    sink = centre * side + centre                   # sorted (row, column) labels: row * side + col
    source = (centre + dy) * side + centre + dx
    solution = solve(grid_network(side, source, sink))
    return float(solution.node_voltage[source])


# Infinite square lattice of equal resistors R (J. Cserti, "Application of the lattice Green's
# function for calculating the resistance of an infinite network of resistors", Am. J. Phys. 68,
# 896-906 (2000)): R/2 between neighbours, 2R/pi across a square's diagonal, and (2 - 4/pi) R two
# steps along a row (the last recalled from memory from the same paper's table).
LATTICE = [((1, 0), 0.5), ((1, 1), 2 / np.pi), ((2, 0), 2 - 4 / np.pi)]


@pytest.mark.parametrize("offset, per_ohm", LATTICE, ids=["neighbour", "diagonal", "two-steps"])
def test_square_lattice_centre_approaches_infinite_lattice(offset, per_ohm):
    # Tolerance: cutting the infinite lattice to a free-edged square of side L perturbs the
    # field of the 1 A current dipole (separation d) at the centre by its reflection in the
    # far edges, which is of order R (d / L)^2 (dipole potential ~ d / r evaluated at r ~ L, times
    # d for the difference across the pair; common practice for finite-size estimates). We allow
    # R d^2 / L^2 on a 201 x 201 grid; the observed error is about 0.55 R d^2 / L^2.
    side = 201
    d2 = offset[0] ** 2 + offset[1] ** 2
    error = centre_resistance(side, *offset) - per_ohm * OHMS
    assert abs(error) <= OHMS * d2 / side ** 2
    # ... and it is a finite-size error: halving the grid's side quadruples it (L^-2 scaling).
    coarse_error = centre_resistance(101, *offset) - per_ohm * OHMS
    assert 3.5 <= coarse_error / error <= 4.5


# Cube of 12 equal resistors R between its vertices (textbook; e.g. F. J. van Steenwijk,
# "Equivalent resistors of polyhedral resistive structures", Am. J. Phys. 66, 90-91 (1998),
# recalled from memory). By symmetry, across the body diagonal the current splits over 3, then 6,
# then 3 equal resistors: R/3 + R/6 + R/3 = 5R/6. Across one edge: 7R/12. Across a face
# diagonal: 3R/4.
CUBE = [((0, 0, 0), (1, 1, 1), 5 / 6), ((0, 0, 0), (1, 0, 0), 7 / 12),
        ((0, 0, 0), (1, 1, 0), 3 / 4)]


@pytest.mark.parametrize("a, b, per_ohm", CUBE, ids=["body-diagonal", "edge", "face-diagonal"])
@pytest.mark.parametrize("method", BACK_ENDS)
def test_resistor_cube(a, b, per_ohm, method):
    cube = nx.hypercube_graph(3)
    label = {node: "".join(map(str, node)) for node in cube}
    frm = [label[u] for u, _ in cube.edges] + [label[b]]
    to = [label[v] for _, v in cube.edges] + [label[a]]
    net = Network.from_arrays(frm, to, [OHMS] * 12 + [1.0], ["R"] * 12 + ["I"],
                              reference=label[b])
    voltage = solve(net, method=method).node_voltage[net.node_index(label[a])[0]]
    assert voltage == pytest.approx(per_ohm * OHMS, rel=1e-12)


def ladder_network(sections: int) -> Network:
    """``sections`` series/shunt pairs of equal resistors driven by a 1 V source at the input.

    Section k: series R from ``t{k-1}`` to ``t{k}``, shunt R from ``t{k}`` to the rail ``0``.
    """
    series_from = [f"t{k}" for k in range(sections)]
    series_to = [f"t{k}" for k in range(1, sections + 1)]
    frm = ["t0"] + series_from + series_to
    to = ["0"] + series_to + ["0"] * sections
    kinds = ["V"] + ["R"] * (2 * sections)
    return Network.from_arrays(frm, to, [1.0] + [OHMS] * (2 * sections), kinds, reference="0")


def input_resistance(sections: int) -> float:
    """``1 V / I``: the source drives ``I`` out of ``t0`` into the ladder, so its branch current
    (positive from ``t0`` through the source to ``0``) is ``-I``."""
    solution = solve(ladder_network(sections))
    return -1.0 / float(solution.branch_current[0])


def test_finite_ladder_is_a_ratio_of_fibonacci_numbers():
    # R_1 = 2R and R_{k+1} = R + R R_k / (R + R_k); with R_k = F_{2k+1} / F_{2k} R this gives
    # R_{k+1} = F_{2k+3} / F_{2k+2} R (Fibonacci identities; textbook, derived by hand here).
    fib = [0, 1]
    while len(fib) < 26:
        fib.append(fib[-1] + fib[-2])
    for sections in range(1, 13):
        expected = fib[2 * sections + 1] / fib[2 * sections] * OHMS
        assert input_resistance(sections) == pytest.approx(expected, rel=1e-13)


def test_long_ladder_converges_to_golden_ratio():
    # Infinite ladder: R_in = R + R R_in / (R + R_in), so R_in^2 - R R_in - R^2 = 0 and
    # R_in = R (1 + sqrt 5) / 2 (textbook). Forty sections are within 1e-16 relative of the limit
    # (the error shrinks by phi^-4 per section), so only rounding remains.
    assert input_resistance(40) == pytest.approx(OHMS * (1 + np.sqrt(5)) / 2, rel=1e-13)
