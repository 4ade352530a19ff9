"""Presentation of a well-posedness report: terminal text and a JSON-ready dictionary.

Both name nodes by label and branches by name (with their line in the network file when the
file is given), show only the first few of each and say how many more there are.
"""

from __future__ import annotations

import numpy as np

from ohmgraph.engine.checks import CheckReport, Finding
from ohmgraph.engine.network import Network
from ohmgraph.io.formats import network_format
from ohmgraph.io.numbers import significant
from ohmgraph.io.reader import locate_lines

SHOWN_IN_TEXT = 5
SHOWN_IN_JSON = 20


def _branch_lines(report: CheckReport, source, shown: int) -> dict:
    """Map from branch index to file line for the branches each finding shows (one file pass)."""
    if source is None:
        return {}
    rows = np.unique(np.concatenate(
        [f.branches[:shown] for f in report.findings] + [np.empty(0, np.int64)])).astype(np.int64)
    return dict(zip(rows.tolist(), locate_lines(source, rows).tolist()))


def _listing(items: list, total: int) -> str:
    more = f" (+{total - len(items)} more)" if total > len(items) else ""
    return ", ".join(items) + more


def _place_word(source) -> str:
    """``line`` for text files, ``row`` for files without lines (Parquet)."""
    return "line" if source is None or network_format(source).format.lines else "row"


def _finding_text(finding: Finding, net: Network, lines: dict, word: str = "line") -> list:
    text = [f"{finding.severity} {finding.code}: {finding.message}"]
    if finding.nodes.size:
        labels = [repr(str(label)) for label in net.node_labels[finding.nodes[:SHOWN_IN_TEXT]]]
        text.append(f"    nodes: {_listing(labels, finding.nodes.size)}")
    if finding.branches.size:
        shown = finding.branches[:SHOWN_IN_TEXT].tolist()
        names = [repr(str(net.branch_names[k])) + (f" ({word} {lines[k]})" if k in lines else "")
                 for k in shown]
        text.append(f"    branches: {_listing(names, finding.branches.size)}")
    return text


def _summary_text(summary: dict) -> list:
    kinds = summary["branches_by_kind"]
    spread = summary["conductance_spread"]
    return [
        f"nodes {summary['nodes']}, branches {summary['branches']} "
        f"(R {kinds['R']}, V {kinds['V']}, I {kinds['I']}), reference node "
        f"{summary['reference']!r}",
        f"ideal connections {summary['ideal_connections']}, components {summary['components']}, "
        f"supernodes {summary['supernodes']}, unknowns {summary['unknowns']}, "
        f"rank {summary['rank']}",
        "conductance spread " + ("n/a (no positive resistance)" if spread is None
                                 else significant(spread, 3)),
    ]


def verdict(report: CheckReport) -> str:
    """One line: ``well-posed: solvable`` or ``NOT solvable: N errors`` (warnings counted)."""
    errors, warnings = report.summary["errors"], report.summary["warnings"]
    warned = f" ({warnings} warning{'s' * (warnings != 1)})" if warnings else ""
    if report.solvable:
        return f"well-posed: solvable{warned}"
    return f"NOT solvable: {errors} error{'s' * (errors != 1)}{warned}"


def format_report(report: CheckReport, net: Network, source=None) -> str:
    """Readable terminal report of a check.

    Parameters
    ----------
    report : CheckReport
        From :func:`ohmgraph.engine.check` on ``net``.
    net : Network
    source : str or Path, optional
        The file ``net`` was read from; branches are then shown with their line numbers.

    Returns
    -------
    str
        The summary, each finding (``severity code: message`` and the first nodes and branches
        involved) and a verdict line.
    """
    lines = _branch_lines(report, source, SHOWN_IN_TEXT)
    text = ([f"network {source}"] if source is not None else []) + _summary_text(report.summary)
    word = _place_word(source)
    for finding in report.findings:
        text += _finding_text(finding, net, lines, word)
    text.append(verdict(report))
    return "\n".join(text)


def report_to_dict(report: CheckReport, net: Network, source=None) -> dict:
    """JSON-ready dictionary of a check.

    Parameters
    ----------
    report, net, source
        As for :func:`format_report`.

    Returns
    -------
    dict
        ``solvable``, ``summary``, ``pinned_nodes`` (labels) and ``findings``: each with
        ``severity``, ``code``, ``message``, ``nodes`` (first 20 labels), ``n_nodes``,
        ``branches`` (first 20 names), ``n_branches`` and ``lines`` (file lines of those
        branches; empty without ``source``).
    """
    lines = _branch_lines(report, source, SHOWN_IN_JSON)
    findings = []
    for finding in report.findings:
        shown = finding.branches[:SHOWN_IN_JSON].tolist()
        findings.append({
            "severity": finding.severity,
            "code": finding.code,
            "message": finding.message,
            "nodes": net.node_labels[finding.nodes[:SHOWN_IN_JSON]].tolist(),
            "n_nodes": int(finding.nodes.size),
            "branches": net.branch_names[shown].tolist(),
            "n_branches": int(finding.branches.size),
            "lines": [lines[k] for k in shown] if lines else [],
        })
    return {
        "source": None if source is None else str(source),
        "solvable": report.solvable,
        "summary": dict(report.summary),
        "pinned_nodes": net.node_labels[report.pinned_nodes].tolist(),
        "findings": findings,
    }


__all__ = ["format_report", "report_to_dict", "verdict"]
