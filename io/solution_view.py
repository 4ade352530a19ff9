"""Terminal view of a solution summary, from a fresh solve or read back from its HDF5 file.

Both paths go through the same dictionary: :func:`solution_summary` for a
:class:`~ohmgraph.engine.Solution`, :func:`summary_from_stored` for a
:class:`~ohmgraph.io.store.StoredSolution`; :func:`format_solution` renders either.
"""

from __future__ import annotations

import numpy as np

from ohmgraph.engine.drop import SupplyDrop
from ohmgraph.engine.solve import Solution
from ohmgraph.io.drop_view import drop_summary, format_drop, stored_drop
from ohmgraph.io.numbers import digits_for, quantity, significant
from ohmgraph.io.store import StoredSolution

POWER_CAUTION = "caution: computed power is not a rating check; compare with each part's rating"
EVIDENCE_DIGITS = 3       # residuals and balances: sizes of errors, not values
TIME_DIGITS = 3


def _findings_digest(findings) -> list:
    return [{"severity": f.severity, "code": f.code, "message": f.message} for f in findings]


def solution_summary(solution: Solution, extra_timings: dict | None = None,
                     drop: SupplyDrop | None = None) -> dict:
    """:meth:`Solution.summary` plus the check findings, any extra stage timings (seconds) and
    the supply drop."""
    summary = solution.summary()
    if drop is not None:
        summary["supply_drop"] = drop_summary(drop, solution.network.node_labels)
    summary["timings_s"].update(extra_timings or {})
    summary["findings"] = _findings_digest(solution.report.findings if solution.report else [])
    return summary


def summary_from_stored(stored: StoredSolution) -> dict:
    """The summary :func:`solution_summary` gave when the file was written, rebuilt from it."""
    attrs, net = stored.attrs, stored.network
    worst = np.flatnonzero(net.node_labels == attrs["kcl_worst_node"])
    rebuilt = Solution(
        network=net, node_voltage=stored.node_voltage, branch_current=stored.branch_current,
        branch_voltage=stored.branch_voltage, branch_power=stored.branch_power,
        current_determined=stored.current_determined, method=attrs["method"],
        rtol=attrs["rtol"], iterations=attrs["iterations"],
        relative_residual=attrs["relative_residual"], kcl_max_residual=attrs["kcl_max_residual"],
        kcl_worst_node=int(worst[0]) if worst.size else 0,
        power_balance=attrs["power_balance"], power_dissipated=attrs["power_dissipated"],
        timings=dict(stored.timings), notes=list(attrs.get("notes", [])),
        method_reason=str(attrs.get("method_reason", "")))
    summary = rebuilt.summary()
    summary["unknowns"] = attrs.get("unknowns")
    summary["findings"] = _findings_digest(stored.findings)
    summary["supply_drop"] = drop_summary(stored_drop(stored), net.node_labels)
    return summary


def _table(rows: list, unit: str, digits: int) -> list:
    """Aligned lines for a list of ``{"branch", "kind", "from", "to", "value"}`` rows."""
    if not rows:
        return ["  (none)"]
    cells = [(r["branch"], r["kind"], f'{r["from"]} -> {r["to"]}',
              quantity(r["value"], unit, digits)) for r in rows]
    widths = [max(len(c[i]) for c in cells) for i in range(4)]
    return ["  " + "  ".join(c[i].ljust(widths[i]) if i < 3 else c[i].rjust(widths[i])
                             for i in range(4)) for c in cells]


def format_solution(summary: dict) -> str:
    """Render a solution summary (from :func:`solution_summary` or :func:`summary_from_stored`).

    Shows the size of the network, the solver and its evidence (relative residual of the
    reduced system, largest KCL residual and where, power balance), the voltage range, the
    largest branch currents, resistor powers and source powers, check findings other than
    errors, notes and the time spent per stage. Solved values are shown to the digits the
    solver's ``rtol`` supports (:func:`ohmgraph.io.numbers.digits_for`), residuals to three.
    """
    s = summary
    digits = digits_for(s["rtol"])

    def value(number, unit):
        return quantity(number, unit, digits)

    def evidence(number):
        return significant(number, EVIDENCE_DIGITS)

    unknowns = "" if s.get("unknowns") is None else f", {s['unknowns']:,} unknown(s)"
    low, high = s["voltage_min"], s["voltage_max"]
    lines = [
        f"network   {s['nodes']:,} nodes, {s['branches']:,} branches, reference node "
        f"{s['reference']}",
        f"solver    {s['method']}, {s['iterations']} iteration(s), rtol {s['rtol']:.1e}{unknowns}",
        *([f"          chosen: {s['method_reason']}"] if s.get("method_reason") else []),
        f"evidence  relative residual {evidence(s['relative_residual'])}",
        f"          KCL max residual {evidence(s['kcl_max_residual_A'])} A "
        f"(node {s['kcl_worst_node']})",
        f"          power balance {evidence(s['power_balance_W'])} W (sources deliver "
        f"{value(s['power_delivered_W'], 'W')}; resistors dissipate "
        f"{value(s['power_dissipated_W'], 'W')}, sources absorb "
        f"{value(s['power_absorbed_by_sources_W'], 'W')})",
        f"voltages  min {value(low['volts'], 'V')} (node {low['node']}), "
        f"max {value(high['volts'], 'V')} (node {high['node']})",
    ]
    if s.get("undetermined_currents"):
        lines.append(f"          {s['undetermined_currents']} branch current(s) left undetermined "
                     "by source loops (stored as 0 A)")
    if s.get("supply_drop"):
        lines += ["", *format_drop(s["supply_drop"])]
    lines += ["", "largest branch currents", *_table(s["largest_currents_A"], "A", digits)]
    lines += ["", "largest resistor powers", *_table(s["largest_resistor_powers_W"], "W", digits),
              f"  {POWER_CAUTION}"]
    lines += ["", "source powers (negative = delivering)", *_table(s["source_powers_W"], "W", digits)]
    shown = [f for f in s.get("findings", []) if f["severity"] != "error"]
    if shown:
        lines += ["", "check findings"]
        lines += [f"  {f['severity']:<8} {f['code']}: {f['message']}" for f in shown]
    if s.get("notes"):
        lines += ["", "notes", *(f"  {note}" for note in s["notes"])]
    timings = s.get("timings_s", {})
    if timings:
        stages = "  ".join(f"{stage} {significant(seconds, TIME_DIGITS)}"
                           for stage, seconds in timings.items())
        lines += ["", f"time (s)  {stages}  total "
                      f"{significant(sum(timings.values()), TIME_DIGITS)}"]
    return "\n".join(lines)
