"""``ohmgraph demo``: generate, write, read back, check, solve and store an invented network.

The scenario is invented for illustration: the 1.2 V supply of a hypothetical sensor board,
drawn as a two-layer copper mesh. The top layer is a coarse, thick plane fed by eight supply
pads; the bottom layer is a finer mesh of narrow traces from which clusters of readout
circuits draw their current; vias join the layers wherever their nodes coincide. The values
are plausible round numbers chosen for the example, not data from any real board. Everything is
deterministic.
After the solve the demo goes on to sign-off: it writes the node table (site coordinates and
layer of every mesh node), stores it and the supply drop with the solution, checks the drop
against an invented budget of 1 % of the supply and the strips against an invented current
limit, draws the drop map and writes the HTML report.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd

from ohmgraph.datasets.generators import layered_mesh, site_coordinates
from ohmgraph.engine.checks import check
from ohmgraph.engine.drop import supply_drop
from ohmgraph.engine.solve import solve
from ohmgraph.engine.solvers import SolverFailed
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.check_view import format_report
from ohmgraph.io.drop_view import drop_datasets
from ohmgraph.io.export import write_table
from ohmgraph.io.node_table import read_node_table
from ohmgraph.io.commands.argtypes import whole_number
from ohmgraph.io.errors import EXIT_FAILED, EXIT_OK, OutputRefused, SolverError
from ohmgraph.io.reader import read_network
from ohmgraph.io.solution_view import format_solution, solution_summary
from ohmgraph.io.store import write_solution

DEFAULT_SIZE = 320          # sites per side: about 283,000 branches
SMALLEST_SIZE = 8           # the top layer must have room for the pads
SUPPLY_VOLTS = 1.2
SUPPLY_PADS = 8
TOTAL_LOAD_AMPS = 2.0
LOAD_CLUSTERS = 12
SHEET_OHMS = (0.0005, 0.005)    # ohms per square: top copper plane, bottom narrow traces
VIA_OHMS = 0.002
SEED = 2026
TABLE_NAME = "sensor_board.csv"
NODES_NAME = "sensor_board_nodes.csv"
SOLUTION_NAME = "sensor_board.h5"
MAP_NAME = "sensor_board_drop.png"
REPORT_NAME = "sensor_board_report.html"
DROP_BUDGET = "1%"              # invented sign-off budget: 12 mV below 1.2 V
STRIP_AMPS = "0.05"             # invented current limit of any mesh strip or via


def register(subparsers) -> None:
    """Add the ``demo`` command."""
    parser = subparsers.add_parser(
        "demo", help="run the whole pipeline on an invented sensor-board supply mesh",
        description="Generate the supply mesh of a hypothetical sensor board (an invented "
                    "example), write it as a branch table, read it back, check it, solve it "
                    "and store the solution in HDF5. Files in the output folder are replaced.")
    parser.add_argument("--output-dir", default="demo-output", metavar="DIR",
                        help="folder for the demo's files, created if needed "
                             "(default demo-output)")
    parser.add_argument("--size", type=whole_number(SMALLEST_SIZE), default=DEFAULT_SIZE, metavar="N",
                        help=f"sites per side of the board (default {DEFAULT_SIZE}; "
                             f"branches grow as about 2.75 N^2)")
    parser.set_defaults(run=run)


def sensor_board(size: int):
    """The demo network: an invented two-layer supply mesh of ``size`` x ``size`` sites."""
    loads = max(4, size * size // 40)
    return layered_mesh(size, size, layers=2, pitch=(2, 1), sheet_ohms=SHEET_OHMS,
                        via_ohms=VIA_OHMS, pads=SUPPLY_PADS, loads=loads,
                        load_amps=TOTAL_LOAD_AMPS / loads, load_clusters=LOAD_CLUSTERS,
                        supply_volts=SUPPLY_VOLTS, seed=SEED)


def node_table(net) -> pd.DataFrame:
    """The demo's node table: site coordinates and layer of every mesh node."""
    x, y, layer = site_coordinates(net.node_labels)
    known = np.isfinite(x)
    return pd.DataFrame({"label": net.node_labels[known], "x": x[known], "y": y[known],
                         "layer": layer[known]})


def run(args) -> int:
    """Run the demo; return the exit code."""
    folder = Path(args.output_dir)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise OutputRefused(f"{folder}: cannot create the folder ({error.strerror})") from None
    table, stored, nodes_file = folder / TABLE_NAME, folder / SOLUTION_NAME, folder / NODES_NAME
    print("ohmgraph demo: an invented example, the 1.2 V supply mesh of a hypothetical sensor "
          "board\n(top plane fed by 8 pads, bottom mesh loaded by 12 clusters of readout "
          "circuits, vias between them)\n")
    timings = {}

    start = time.perf_counter()
    net = sensor_board(args.size)
    timings["generate"] = time.perf_counter() - start
    start = time.perf_counter()
    write_branch_table(table, net, force=True)
    write_table(node_table(net), nodes_file, force=True)
    timings["write"] = time.perf_counter() - start
    print(f"1. generated {net.n_nodes:,} nodes and {net.n_branches:,} branches, wrote {table} "
          f"and the node table {nodes_file}")

    start = time.perf_counter()
    net = read_network(table)
    nodes = read_node_table(nodes_file, net)
    timings["read"] = time.perf_counter() - start
    start = time.perf_counter()
    report = check(net)
    timings["check"] = time.perf_counter() - start
    print(f"2. read it back and checked it\n\n{format_report(report, net, source=table)}\n")
    if not report.solvable:
        return EXIT_FAILED

    try:
        solution = solve(net, report=report)
    except SolverFailed as error:
        raise SolverError(f"{table}: {error}") from error
    solution.timings = {**timings, **solution.timings, "check": timings["check"]}
    drop = supply_drop(net, solution.node_voltage)
    store_seconds = write_solution(stored, solution, input_path=table, force=True,
                                   extra={**drop_datasets(drop), **nodes.datasets()})
    print(f"3. solved it and stored the solution, the supply drop and the node table in "
          f"{stored}\n")
    print(format_solution(solution_summary(solution, {"store": store_seconds}, drop)))
    return sign_off(folder, table, stored, nodes_file)


def sign_off(folder: Path, table: Path, stored: Path, nodes_file: Path) -> int:
    """Limits, drop map and report of the stored demo solution, through the commands."""
    from ohmgraph.io.cli import main

    limits = ["--max-drop", DROP_BUDGET, "--max-current", STRIP_AMPS]
    print(f"\n4. checked it against the invented budget (drop {DROP_BUDGET} of the supply, "
          f"{STRIP_AMPS} A in any strip or via):\n")
    exceeded = main(["limits", str(stored), *limits, "--top", "5"]) == EXIT_FAILED
    map_file, report = folder / MAP_NAME, folder / REPORT_NAME
    print("\n5. drew the drop map and wrote the report")
    for argv in (["map", str(stored), "-o", str(map_file)],
                 ["report", str(stored), "-o", str(report), *limits]):
        code = main([*argv, "--force"])
        if code != EXIT_OK:
            return code
    print(f"\nfiles:\n  {table}  the network, one branch per row (name,kind,from,to,value)"
          f"\n  {nodes_file}  the node table (label,x,y,layer)"
          f"\n  {stored}  voltages, currents, powers, supply drop, node table and the evidence"
          f"\n  {map_file}  the supply drop over the board, per layer"
          f"\n  {report}  the report: open it in a browser (it needs no network)"
          f"\n\nlook at the stored result again with: ohmgraph show {stored}"
          + ("\nthe invented budget is exceeded: see the limits above" if exceeded else ""))
    return EXIT_OK
