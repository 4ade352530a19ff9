"""Sign-off: the map at a million nodes, and variants at a million branches.

* Map: ``ohmgraph map SOL.h5 -o drop.png`` in a fresh process (start-up, reading the file and
  drawing included) on the benchmark lattice (``OHMGRAPH_BENCH_SIZE``, default 1000: 10^6
  nodes) solved with its node table. Target (issue 9): under 10 s.
* Variants: a lattice with about 10^6 branches (side ``OHMGRAPH_VARIANT_SIZE``, default 708:
  1,000,992 resistors plus pads and loads) and a change file setting 1 % of its branches (random
  resistors, each times U(0.5, 2)). Compared at the same ``--rtol`` (1e-10):

  - CLI: ``ohmgraph solve NET --changes C.csv --start-from BASE.h5 -o NEW.h5`` against a fresh
    ``ohmgraph solve CHANGED -o FRESH.h5`` of the changed network (target: 2x faster), with NET
    and CHANGED in the same format: both CSV, or both HDF5 network files from ``convert``; from
    a BASE.h5 solved without and with ``--keep-setup`` (whose extra time and file size are
    printed too);
  - Python session: :func:`ohmgraph.engine.variant.resolve` from the base solution against
    :func:`ohmgraph.engine.solve` of the changed network in the same process (target: 10x
    faster);
  - voltages: largest difference to the fresh solve.

Fresh and variant runs alternate (A B A B ...; ``OHMGRAPH_VARIANT_ROUNDS`` rounds, default 3, at
least 5 in the session); medians are reported with the load average before and after, and for
the CLI also the CPU seconds of each child process (less disturbed by other work on the
machine than wall time) and the median seconds of every stage.

Nothing is asserted about time; the numbers are printed and stored in ``extra_info``.
"""

from __future__ import annotations

import json
import os
import resource
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
from ohmgraph.engine.variant import BranchChanges, _updated_system, apply_changes, resolve
from ohmgraph.io.branch_table import write_branch_table

VARIANT_SIZE = int(os.environ.get("OHMGRAPH_VARIANT_SIZE", "708"))
CHANGED_FRACTION = 0.01
ROUNDS = int(os.environ.get("OHMGRAPH_VARIANT_ROUNDS", "3"))


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
    for name in ("base", "changed"):
        cli("convert", folder / f"{name}.csv", "-o", folder / f"{name}_net.h5")
    return folder, net, changes


def load() -> str:
    """The 1-, 5- and 15-minute load averages, for the record beside every timing."""
    return "/".join(f"{value:.1f}" for value in os.getloadavg())


def timed_cli(*argv) -> tuple[float, float, dict]:
    """Wall and CPU seconds (the child's user + system) of one ``ohmgraph ... --json`` run,
    and its stage timings."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "ohmgraph.io.cli", *map(str, argv), "--json"],
                          check=True, capture_output=True, text=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu, json.loads(done.stdout)["timings_s"]


@pytest.mark.parametrize("suffix", ["csv", "h5"], ids=["csv", "hdf5-network-file"])
def test_variant_cli(variant_case, suffix, benchmark):
    """Fresh ``solve`` of the changed network, the variant from a base solved without and with
    ``--keep-setup``, and the two base solves alternate (A B C D E A B C D E ...), every run
    reading NET in the same format: the CSV files, or the HDF5 network files of ``convert``."""
    folder, net, changes = variant_case
    base_net = folder / ("base.csv" if suffix == "csv" else "base_net.h5")
    changed_net = folder / ("changed.csv" if suffix == "csv" else "changed_net.h5")
    bases = {"variant": folder / f"base_{suffix}.h5", "kept": folder / f"base_kept_{suffix}.h5"}
    commands = {
        "fresh": ("solve", changed_net, "-o", folder / "fresh.h5"),
        **{name: ("solve", base_net, "--changes", folder / "changes.csv", "--start-from", base,
                  "-o", folder / f"{name}.h5") for name, base in bases.items()},
        "base": ("solve", base_net, "-o", bases["variant"]),
        "base_kept": ("solve", base_net, "-o", bases["kept"], "--keep-setup"),
    }
    for name in ("base", "base_kept"):
        cli(*commands[name], "--rtol", RTOL, "--force")
    runs = {name: [] for name in commands}
    loads = [load()]
    for _ in range(ROUNDS):
        for name, argv in commands.items():
            runs[name].append(timed_cli(*argv, "--rtol", RTOL, "--force"))
    loads.append(load())
    with (h5py.File(folder / "fresh.h5") as a, h5py.File(folder / "variant.h5") as b,
          h5py.File(folder / "kept.h5") as c):
        difference = {name: float(np.max(np.abs(a["nodes/voltage"][...]
                                                - h5["nodes/voltage"][...])))
                      for name, h5 in (("variant", b), ("kept", c))}
        kept_reason = c.attrs["method_reason"]
    sizes = {name: os.path.getsize(path) for name, path in bases.items()}
    wall = {k: float(np.median([r[0] for r in v])) for k, v in runs.items()}
    cpu = {k: float(np.median([r[1] for r in v])) for k, v in runs.items()}
    stages = {k: {stage: float(np.median([r[2].get(stage, 0.0) for r in v]))
                  for stage in dict.fromkeys(st for r in v for st in r[2])}
              for k, v in runs.items()}
    pairs = {name: [f[0] / v[0] for f, v in zip(runs["fresh"], runs[name])]
             for name in ("variant", "kept")}
    benchmark.extra_info.update(
        format=suffix, branches=net.n_branches, changed=changes.index.size, rounds=ROUNDS,
        load_average=loads, wall_median=wall, cpu_median=cpu, stages=stages,
        speedup_pairs=pairs, max_voltage_difference=difference, base_file_bytes=sizes,
        kept_reason=kept_reason)
    print(f"\nCLI, NET as {suffix}, {net.n_branches:,} branches, {changes.index.size:,} "
          f"changed, medians of {ROUNDS} interleaved rounds, load {loads[0]} -> {loads[1]}:")
    for name in commands:
        print(f"  {name:>9} wall {wall[name]:.2f} s, cpu {cpu[name]:.2f} s")
    for name in ("variant", "kept"):
        print(f"  fresh/{name}: wall {wall['fresh'] / wall[name]:.2f}x (pairs "
              f"{', '.join(f'{p:.2f}' for p in pairs[name])}), cpu "
              f"{cpu['fresh'] / cpu[name]:.2f}x; max |dV| {difference[name]:.1e} V")
    print(f"  base file {sizes['variant'] / 1e6:.1f} MB, with the kept set-up "
          f"{sizes['kept'] / 1e6:.1f} MB; base run {wall['base']:.2f} s, with --keep-setup "
          f"{wall['base_kept']:.2f} s; the kept variant's set-up: {kept_reason}")
    for stage in dict.fromkeys(st for name in commands for st in stages[name]):
        print(f"  {stage:>10}: " + ", ".join(f"{name} {stages[name].get(stage, 0.0):.3f}"
                                             for name in commands))
    benchmark.pedantic(lambda: None, rounds=1)


def interleaved(base, changes, rounds: int):
    """``engine.solve`` of the changed network and ``resolve`` from ``base``, alternating for
    ``rounds`` rounds after one warm-up of each (compiled kernels): the last of each, their
    seconds, and the load averages before and after."""
    changed = apply_changes(base.network, changes)
    solve(changed, rtol=RTOL), resolve(base, changes)
    fresh_seconds, variant_seconds = [], []
    loads = [load()]
    for _ in range(rounds):
        start = time.perf_counter()
        fresh = solve(changed, rtol=RTOL)
        fresh_seconds.append(time.perf_counter() - start)
        start = time.perf_counter()
        variant = resolve(base, changes)
        variant_seconds.append(time.perf_counter() - start)
    loads.append(load())
    return fresh, variant, fresh_seconds, variant_seconds, loads


def test_variant_python_session(variant_case, benchmark):
    """``engine.solve`` of the changed network and ``engine.variant.resolve`` from the base
    solution alternate in one process (after one warm-up of each)."""
    folder, net, changes = variant_case
    base = solve(net, rtol=RTOL)
    fresh, variant, fresh_seconds, variant_seconds, loads = interleaved(
        base, changes, max(ROUNDS, 5))
    difference = float(np.max(np.abs(fresh.node_voltage - variant.node_voltage)))
    fresh_median, variant_median = np.median(fresh_seconds), np.median(variant_seconds)
    pairs = [f / v for f, v in zip(fresh_seconds, variant_seconds)]
    benchmark.extra_info.update(
        load_average=loads, fresh_median=fresh_median, variant_median=variant_median,
        speedup_pairs=pairs, iterations=variant.iterations, fresh_iterations=fresh.iterations,
        relative_residual=variant.relative_residual, max_voltage_difference=difference,
        fresh_stages=fresh.timings, variant_stages=variant.timings)
    print(f"\nPython session, medians of {len(pairs)} interleaved rounds, load {loads[0]} -> "
          f"{loads[1]}: fresh solve {fresh_median:.3f} s ({fresh.iterations} it), variant "
          f"{variant_median:.3f} s ({variant.iterations} it, residual "
          f"{variant.relative_residual:.1e}), {fresh_median / variant_median:.2f}x (pairs "
          f"{', '.join(f'{p:.2f}' for p in pairs)}); max |dV| {difference:.1e} V; "
          f"{variant.notes[0]}")
    print("  fresh stages:   " + ", ".join(f"{k} {v:.3f}" for k, v in fresh.timings.items()))
    print("  variant stages: " + ", ".join(f"{k} {v:.3f}" for k, v in variant.timings.items()))
    benchmark.pedantic(lambda: None, rounds=1)


@pytest.mark.parametrize("fraction", [1e-4, 1e-3, 1e-2])
def test_variant_python_session_by_fraction(variant_case, fraction, benchmark):
    """How the session variant's advantage depends on how many branches change (random
    resistors times U(0.5, 2), as above): fewer changes leave a smaller starting residual, so
    fewer CG iterations reach the same absolute target."""
    folder, net, _ = variant_case
    base = solve(net, rtol=RTOL)
    rng = np.random.default_rng(12)
    index = np.sort(rng.choice(np.flatnonzero(net.kind == RESISTOR),
                               int(net.n_branches * fraction), replace=False))
    changes = BranchChanges(index, net.value[index] * rng.uniform(0.5, 2.0, index.size))
    changed = apply_changes(net, changes)
    fresh, variant, fresh_seconds, variant_seconds, loads = interleaved(base, changes, 3)
    difference = float(np.max(np.abs(fresh.node_voltage - variant.node_voltage)))
    ratio = float(np.median(fresh_seconds) / np.median(variant_seconds))
    updated = _updated_system(base, changed, index)
    start_residual = float(np.linalg.norm(
        updated.rhs - updated.matrix @ updated.unknowns_from_voltages(base.node_voltage))
        / np.linalg.norm(updated.rhs))
    benchmark.extra_info.update(fraction=fraction, changed=index.size, load_average=loads,
                                fresh_median=float(np.median(fresh_seconds)),
                                variant_median=float(np.median(variant_seconds)),
                                speedup=ratio, iterations=variant.iterations,
                                start_relative_residual=start_residual,
                                max_voltage_difference=difference)
    print(f"\n{index.size:,} changed ({fraction:.2%}), load {loads[0]} -> {loads[1]}: fresh "
          f"{np.median(fresh_seconds):.3f} s, variant {np.median(variant_seconds):.3f} s "
          f"({variant.iterations} it from relative residual {start_residual:.1e}), {ratio:.2f}x; "
          f"max |dV| {difference:.1e} V")
    benchmark.pedantic(lambda: None, rounds=1)
