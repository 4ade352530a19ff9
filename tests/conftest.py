"""Shared fixtures: a seeded random-network builder for the engine tests."""

from __future__ import annotations

import numpy as np
import pytest

from ohmgraph.engine.network import Network
from ohmgraph.engine.solvers import SOLVERS, UNAVAILABLE

# Every registered back end, and every known optional one that is not installed here (skipped,
# with the reason): capability tests run over this list, never over a hard-coded one.
BACK_ENDS = ([pytest.param(name, id=name) for name in SOLVERS]
             + [pytest.param(name, id=name, marks=pytest.mark.skip(
                 reason=f"back end {name!r} is not available here: {why}"))
                for name, why in UNAVAILABLE.items()])


def random_tree_edges(rng: np.random.Generator, n_nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Edges of a random spanning tree on ``0 .. n_nodes - 1``; node 0 is joined by the first."""
    order = np.concatenate([[0], 1 + rng.permutation(n_nodes - 1)])
    parent = order[(rng.random(n_nodes - 1) * np.arange(1, n_nodes)).astype(np.int64)]
    return parent, order[1:]


def random_network(seed: int, n_nodes: int = 120, extra_resistors: int = 150,
                   voltage_sources: int = 8, ideal_connections: int = 6,
                   current_sources: int = 10) -> Network:
    """A connected, well-posed random network (reference ``"0"``).

    Resistors (0.1–10 ohm, log-uniform) span a random tree plus ``extra_resistors`` random
    branches (parallel branches allowed). Voltage sources (−5 to 5 V) and ideal connections
    (0-ohm resistors) are drawn from the edges of a second random tree, so they never close a
    loop of their own; its first edge touches the reference, so at least one source or ideal
    connection is grounded and the others usually float. Current sources (−1 to 1 A) join random
    node pairs. Branch order and orientation are shuffled.
    """
    rng = np.random.default_rng(seed)
    res_a, res_b = random_tree_edges(rng, n_nodes)
    extra_a = rng.integers(0, n_nodes, extra_resistors)
    extra_b = (extra_a + rng.integers(1, n_nodes, extra_resistors)) % n_nodes
    src_a, src_b = random_tree_edges(rng, n_nodes)
    constrained = voltage_sources + ideal_connections
    picked = np.concatenate([[0], 1 + rng.choice(n_nodes - 2, constrained - 1, replace=False)])
    cur_a = rng.integers(0, n_nodes, current_sources)
    cur_b = (cur_a + rng.integers(1, n_nodes, current_sources)) % n_nodes

    frm = np.concatenate([res_a, extra_a, src_a[picked], cur_a])
    to = np.concatenate([res_b, extra_b, src_b[picked], cur_b])
    n_res = n_nodes - 1 + extra_resistors
    kinds = (["R"] * n_res + ["V"] * voltage_sources + ["R"] * ideal_connections
             + ["I"] * current_sources)
    values = np.concatenate([
        10.0 ** rng.uniform(-1, 1, n_res),
        rng.uniform(-5, 5, voltage_sources),
        np.zeros(ideal_connections),
        rng.uniform(-1, 1, current_sources)])
    flip = rng.random(frm.size) < 0.5
    frm, to = np.where(flip, to, frm), np.where(flip, frm, to)
    order = rng.permutation(frm.size)
    names = [f"b{k}" for k in range(frm.size)]
    return Network.from_arrays(frm[order], to[order], values[order], np.array(kinds)[order],
                               names, reference="0", node_labels=np.arange(n_nodes))


@pytest.fixture(scope="session")
def make_network():
    """The :func:`random_network` builder (session-scoped, so hypothesis tests may use it)."""
    return random_network
