"""``ohmgraph diff A.h5 B.h5``: how a variant's solution differs from its base."""

from __future__ import annotations

from dataclasses import asdict

import numpy as np
import pandas as pd

from ohmgraph.engine.diff import change_statistics, largest_changes
from ohmgraph.io.atomic import refuse_existing, refuse_input
from ohmgraph.io.commands.argtypes import whole_number
from ohmgraph.io.drop_view import stored_drop, volts_text
from ohmgraph.io.errors import EXIT_OK, InputError
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.picture_data import node_points, require_coordinates
from ohmgraph.io.pictures import check_picture_path, map_figure, save_figure
from ohmgraph.io.store import read_solution


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "diff", help="compare two stored solutions (a base and a variant)",
        description="Match the nodes of A.h5 and B.h5 by label and their branches by name, and "
                    "print statistics of the change B - A of node voltage and supply drop, the "
                    "worst drop and the counts over thresholds of both, the nodes and branches "
                    "that changed most, and the nodes and branches only one of them has. With "
                    "--map, draw the change of node voltage over B's node coordinates.")
    parser.add_argument("base", metavar="A.h5", help="the base solution")
    parser.add_argument("variant", metavar="B.h5", help="the variant's solution")
    parser.add_argument("--top", type=whole_number(0), default=10, metavar="N",
                        help="changed nodes and branches to list (default 10)")
    parser.add_argument("--map", metavar="FILE", help="draw the voltage change (.png or .svg)")
    parser.add_argument("--force", action="store_true", help="overwrite the map if it exists")
    parser.add_argument("--json", action="store_true", help="print the result as JSON")
    parser.set_defaults(run=run)


def _match(labels_a, labels_b) -> np.ndarray:
    """Positions in A of B's labels (-1 where A has none); a label A repeats never matches."""
    index = pd.Index(labels_a)
    if index.is_unique:
        return index.get_indexer(labels_b)
    unique = index[~index.duplicated(keep=False)]
    where = unique.get_indexer(labels_b)
    positions = np.flatnonzero(~index.duplicated(keep=False))
    return np.where(where >= 0, positions[where], -1)


def compare(a, b, top: int) -> tuple[dict, np.ndarray]:
    """Plain-data comparison and the voltage change per node of B (NaN where unmatched)."""
    na, nb = a.network, b.network
    where = _match(na.node_labels, nb.node_labels)
    matched = where >= 0
    va = np.full(nb.n_nodes, np.nan)
    va[matched] = a.node_voltage[where[matched]]
    drop_a, drop_b = stored_drop(a), stored_drop(b)
    da = np.full(nb.n_nodes, np.nan)
    da[matched] = np.where(drop_a.counted, drop_a.drop, np.nan)[where[matched]]
    db = np.where(drop_b.counted, drop_b.drop, np.nan)
    branch_where = _match(na.branch_names, nb.branch_names)
    bm = branch_where >= 0
    ia = np.full(nb.n_branches, np.nan)
    ia[bm] = a.branch_current[branch_where[bm]]

    def node_rows(order, before, after):
        return [{"node": str(nb.node_labels[i]), "A": float(before[i]), "B": float(after[i]),
                 "change": float(after[i] - before[i])} for i in order]

    def over(drop):
        return {t.text(): int(c) for t, c in zip(drop.thresholds, drop.over.clip(0).sum(axis=0))}

    only_b_branches = int(np.count_nonzero(~bm))
    result = {
        "nodes": {"matched": int(matched.sum()), "only_in_A": na.n_nodes - int(matched.sum()),
                  "only_in_B": int(np.count_nonzero(~matched))},
        "branches": {"matched": int(bm.sum()), "only_in_A": na.n_branches - int(bm.sum()),
                     "only_in_B": only_b_branches,
                     "added": [str(n) for n in nb.branch_names[~bm][:top]]},
        "voltage_change_V": asdict(change_statistics(va, b.node_voltage)),
        "drop_change_V": asdict(change_statistics(da, db)),
        "worst_drop_V": {"A": float(np.nanmax(drop_a.worst_drop, initial=np.nan))
                         if drop_a.n_nets else None,
                         "B": float(np.nanmax(drop_b.worst_drop, initial=np.nan))
                         if drop_b.n_nets else None},
        "nodes_over": {"A": over(drop_a), "B": over(drop_b)},
        "top_nodes": node_rows(largest_changes(va, b.node_voltage, top), va, b.node_voltage),
        "top_branches": [{"branch": str(nb.branch_names[k]), "A": float(ia[k]),
                          "B": float(b.branch_current[k]),
                          "change": float(b.branch_current[k] - ia[k])}
                         for k in largest_changes(ia, b.branch_current, top)],
    }
    return result, b.node_voltage - va


def format_diff(result: dict, names: tuple) -> str:
    """Text of :func:`compare`."""
    r = result
    v, d = r["voltage_change_V"], r["drop_change_V"]
    lines = [f"{names[1]} - {names[0]}",
             f"nodes     {r['nodes']['matched']:,} matched, {r['nodes']['only_in_A']:,} only in "
             f"A, {r['nodes']['only_in_B']:,} only in B",
             f"branches  {r['branches']['matched']:,} matched, "
             f"{r['branches']['only_in_A']:,} only in A, {r['branches']['only_in_B']:,} only "
             "in B" + (f" ({', '.join(r['branches']['added'])})" if r["branches"]["added"]
                       else ""),
             f"voltage change  mean {volts_text(v['mean'])}, rms {volts_text(v['rms'])}, "
             f"largest rise {volts_text(v['largest_increase'])}, largest fall "
             f"{volts_text(v['largest_decrease'])}, median |change| "
             f"{volts_text(v['median_magnitude'])}, 99th percentile "
             f"{volts_text(v['p99_magnitude'])}",
             f"drop change     mean {volts_text(d['mean'])}, largest rise "
             f"{volts_text(d['largest_increase'])}, largest fall "
             f"{volts_text(d['largest_decrease'])}",
             f"worst drop      {volts_text(r['worst_drop_V']['A'] or np.nan)} -> "
             f"{volts_text(r['worst_drop_V']['B'] or np.nan)}"]
    for name in r["nodes_over"]["A"]:
        lines.append(f"nodes over {name:<5} {r['nodes_over']['A'][name]:,} -> "
                     f"{r['nodes_over']['B'].get(name, 0):,}")
    if r["top_nodes"]:
        lines += ["", "largest voltage changes"]
        lines += [f"  {row['node']}  {volts_text(row['A'])} -> {volts_text(row['B'])}  "
                  f"({volts_text(row['change'])})" for row in r["top_nodes"]]
    if r["top_branches"]:
        lines += ["", "largest current changes"]
        lines += [f"  {row['branch']}  {row['A']:.6g} A -> {row['B']:.6g} A  "
                  f"({row['change']:+.6g} A)" for row in r["top_branches"]]
    return "\n".join(lines)


def run(args) -> int:
    """Run ``diff``; return the exit code."""
    if args.map:
        check_picture_path(args.map)
        refuse_input(args.map, [args.base, args.variant])
        refuse_existing(args.map, args.force)
    a, b = read_solution(args.base), read_solution(args.variant)
    result, change = compare(a, b, args.top)
    if result["nodes"]["matched"] == 0:
        raise InputError(f"{args.variant}: shares no node label with {args.base}")
    if args.map:
        require_coordinates(b, args.variant)
        figure = map_figure(node_points(b, change), title=f"{args.variant} - {args.base}",
                            label="node voltage change B - A, mean per cell", unit="V",
                            kind="change", reduce="mean")
        save_figure(figure, args.map, args.force)
    print(dumps(result) if args.json else format_diff(result, (args.base, args.variant)))
    return EXIT_OK
