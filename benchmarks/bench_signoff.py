"""Sign-off: the map at a million nodes, and variants at a million branches.

* Map: ``ohmgraph map SOL.h5 -o drop.png`` in a fresh process (start-up, reading the file and
  drawing included) on the benchmark lattice (``OHMGRAPH_BENCH_SIZE``, default 1000: 10^6
  nodes) solved with its node table. Target (issue 9): under 10 s.
* Variants: a lattice with about 10^6 branches (side ``OHMGRAPH_VARIANT_SIZE``, default 708:
  1,000,992 resistors plus pads and loads) and a change file setting 1 % of its branches (random
  resistors, each times U(0.5, 2)). Compared at the same ``--rtol`` (1e-10):

  - CLI: ``ohmgraph solve NET --changes C.csv --start-from BASE.h5 -o NEW.h5`` against a fresh
    ``ohmgraph solve CHANGED.csv -o FRESH.h5`` of the changed network (target: 2x faster);
  - Python session: :func:`ohmgraph.engine.variant.resolve` from the base solution against
    :func:`ohmgraph.engine.solve` of the changed network in the same process (target: 10x
    faster), and against the fresh CLI run;
  - voltages: largest difference to the fresh solve.

Nothing is asserted about time; the numbers are printed and stored in ``extra_info``.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time

import h5py
import numpy as np
import pandas as pd
import pytest
from conftest import RTOL, supplied_lattice

from ohmgraph.datasets.generators import site_coordinates
from ohmgraph.engine import solve
from ohmgraph.engine.network import RESISTOR
from ohmgraph.engine.variant import BranchChanges, apply_changes, resolve
from ohmgraph.io.branch_table import write_branch_table

VARIANT_SIZE = int(os.environ.get("OHMGRAPH_VARIANT_SIZE", "708"))
CHANGED_FRACTION = 0.01


def cli(*argv) -> float:
    """Wall seconds of one ``ohmgraph`` run in a fresh process."""
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "ohmgraph.io.cli", *map(str, argv)], check=True,
                   stdout=subprocess.DEVNULL)
    return time.perf_counter() - start


def node_table(net, path) -> None:
    x, y, _ = site_coordinates(net.node_labels)
    known = np.isfinite(x)
    pd.DataFrame({"label": net.node_labels[known], "x": x[known], "y": y[known]}).to_csv(
        path, index=False)


def test_map_of_a_million_nodes(lattice, tmp_path, benchmark):
    write_branch_table(tmp_path / "net.csv", lattice)
    node_table(lattice, tmp_path / "nodes.csv")
    cli("solve", tmp_path / "net.csv", "--nodes", tmp_path / "nodes.csv", "-o", tmp_path / "s.h5")
    rounds = [cli("map", tmp_path / "s.h5", "-o", tmp_path / f"map{k}.png") for k in range(3)]
    benchmark.extra_info.update(nodes=lattice.n_nodes, map_seconds=min(rounds))
    print(f"\nmap of {lattice.n_nodes:,} nodes: best {min(rounds):.2f} s of {rounds}")
    benchmark.pedantic(lambda: None, rounds=1)


@pytest.fixture(scope="module")
def variant_case(tmp_path_factory):
    folder = tmp_path_factory.mktemp("variant")
    net = supplied_lattice(VARIANT_SIZE)
    rng = np.random.default_rng(11)
    index = np.sort(rng.choice(np.flatnonzero(net.kind == RESISTOR),
                               int(net.n_branches * CHANGED_FRACTION), replace=False))
    changes = BranchChanges(index, net.value[index] * rng.uniform(0.5, 2.0, index.size))
    write_branch_table(folder / "base.csv", net)
    write_branch_table(folder / "changed.csv", apply_changes(net, changes))
    pd.DataFrame({"name": net.branch_names[index], "value": changes.value}).to_csv(
        folder / "changes.csv", index=False, float_format="%.17g")
    return folder, net, changes


def test_variant_cli(variant_case, benchmark):
    folder, net, changes = variant_case
    cli("solve", folder / "base.csv", "-o", folder / "base.h5", "--rtol", RTOL)
    fresh = [cli("solve", folder / "changed.csv", "-o", folder / f"fresh{k}.h5", "--rtol", RTOL)
             for k in range(2)]
    variant = [cli("solve", folder / "base.csv", "--changes", folder / "changes.csv",
                   "--start-from", folder / "base.h5", "-o", folder / f"variant{k}.h5",
                   "--rtol", RTOL) for k in range(2)]
    with h5py.File(folder / "fresh0.h5") as a, h5py.File(folder / "variant0.h5") as b:
        difference = float(np.max(np.abs(a["nodes/voltage"][...] - b["nodes/voltage"][...])))
    ratio = min(fresh) / min(variant)
    benchmark.extra_info.update(branches=net.n_branches, changed=changes.index.size,
                                fresh_cli_seconds=min(fresh), variant_cli_seconds=min(variant),
                                speedup=ratio, max_voltage_difference=difference)
    print(f"\n{net.n_branches:,} branches, {changes.index.size:,} changed: fresh CLI "
          f"{min(fresh):.2f} s, variant CLI {min(variant):.2f} s, {ratio:.2f}x; "
          f"max |dV| {difference:.2e} V")
    benchmark.pedantic(lambda: None, rounds=1)


def test_variant_python_session(variant_case, benchmark):
    folder, net, changes = variant_case
    base = solve(net, rtol=RTOL)
    changed = apply_changes(net, changes)
    fresh_seconds, variant_seconds = [], []
    for _ in range(3):
        start = time.perf_counter()
        fresh = solve(changed, rtol=RTOL)
        fresh_seconds.append(time.perf_counter() - start)
        start = time.perf_counter()
        variant = resolve(base, changes)
        variant_seconds.append(time.perf_counter() - start)
    difference = float(np.max(np.abs(fresh.node_voltage - variant.node_voltage)))
    ratio = min(fresh_seconds) / min(variant_seconds)
    benchmark.extra_info.update(fresh_seconds=min(fresh_seconds),
                                variant_seconds=min(variant_seconds), speedup=ratio,
                                iterations=variant.iterations, fresh_iterations=fresh.iterations,
                                relative_residual=variant.relative_residual,
                                max_voltage_difference=difference)
    print(f"\nPython session: fresh solve {min(fresh_seconds):.2f} s ({fresh.iterations} it), "
          f"variant {min(variant_seconds):.2f} s ({variant.iterations} it, residual "
          f"{variant.relative_residual:.1e}), {ratio:.2f}x; max |dV| {difference:.2e} V; "
          f"{variant.notes[0]}")
    benchmark.pedantic(lambda: None, rounds=1)
