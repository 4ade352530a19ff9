"""One self-contained HTML report of a stored solution.

Everything is inline: the style sheet, and the pictures as ``data:`` URIs (base64 PNG), so the
file reads offline and can be mailed or archived alone. Text is escaped with :func:`html.escape`.
"""

from __future__ import annotations

import base64
import html

from ohmgraph.io.drop_view import volts_text
from ohmgraph.io.limits_view import CAUTION, quantity_text
from ohmgraph.io.solution_view import POWER_CAUTION

STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 70em; color: #222; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; border-bottom: 1px solid #ccc; margin-top: 2em; }
table { border-collapse: collapse; margin: 0.5em 0; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.6em; text-align: left; }
td.n { text-align: right; font-variant-numeric: tabular-nums; }
.caution { background: #fff4d6; border-left: 4px solid #e0a800; padding: 0.6em 1em; }
.fail { color: #b00020; font-weight: bold; } .pass { color: #1b7a2f; font-weight: bold; }
img { max-width: 100%; border: 1px solid #ddd; }
"""


def _e(value) -> str:
    return html.escape(str(value))


def _table(header: list, rows: list, numeric=()) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(
        f'<td class="n">{_e(c)}</td>' if j in numeric else f"<td>{_e(c)}</td>"
        for j, c in enumerate(row)) + "</tr>" for row in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _image(png: bytes, alt: str) -> str:
    return (f'<img alt="{_e(alt)}" src="data:image/png;base64,'
            f'{base64.b64encode(png).decode("ascii")}">')


def render_report(*, source: str, attrs: dict, summary: dict, violations: dict | None,
                  drop_map: bytes | None, map_note: str, histograms: bytes) -> str:
    """The report as HTML text.

    Parameters
    ----------
    source : str
        The solution file's name.
    attrs : dict
        Root attributes of the solution file (provenance).
    summary : dict
        From :func:`ohmgraph.io.solution_view.summary_from_stored`.
    violations : dict or None
        ``{"rows": [...], "counts": {...}, "total": int, "limits": str}`` from the limit check;
        None when no limit was given.
    drop_map, histograms : bytes
        PNG pictures; ``drop_map`` None when there are no coordinates (``map_note`` says why).
    """
    s = summary
    parts = [f"<h1>Solution report: {_e(attrs.get('input_file', source))}</h1>",
             f'<p class="caution">{_e(CAUTION)}</p>']
    provenance = [("solution file", source), ("network file", attrs.get("input_file", "?")),
                  ("network SHA-256", attrs.get("input_sha256", "?")),
                  ("written", attrs.get("created", "?")),
                  ("by", f"ohmgraph {attrs.get('tool_version', '?')}"),
                  ("network", f"{s['nodes']:,} nodes, {s['branches']:,} branches, reference "
                              f"node {s['reference']}")]
    parts += ["<h2>Provenance</h2>", _table(["item", "value"], provenance)]

    proven = s["relative_residual"] <= max(s["rtol"], 1e-8)
    verdict = ('<span class="pass">meets the tolerance</span>' if proven
               else '<span class="fail">misses the tolerance</span>')
    evidence = [
        ("solver", f"{s['method']}, {s['iterations']} iteration(s), rtol {s['rtol']:.1e}"),
        ("relative residual ||Ax-b||/||b||", f"{s['relative_residual']:.3e}"),
        ("largest KCL residual", f"{s['kcl_max_residual_A']:.3e} A at node {s['kcl_worst_node']}"),
        ("power balance (sum of all branch powers)", f"{s['power_balance_W']:.3e} W"),
        ("sources deliver", f"{s['power_delivered_W']:.6g} W"),
        ("resistors dissipate", f"{s['power_dissipated_W']:.6g} W"),
        ("sources absorb", f"{s['power_absorbed_by_sources_W']:.6g} W"),
    ]
    parts += ["<h2>Evidence</h2>", f"<p>The reduced system's residual {verdict}; the KCL "
              "residual and the power balance are recomputed from the stored currents.</p>",
              _table(["check", "value"], evidence)]

    drop = s.get("supply_drop") or {"nets": 0, "nets_shown": [], "worst_nodes": []}
    parts.append("<h2>Supply drop</h2>")
    parts.append(f"<p>{drop['nets']} net(s) after removing the voltage sources and the reference "
                 "node; the drop is measured below each net's nominal (|V| on a 0 V net); the "
                 "reference and source-held nodes are excluded.</p>")
    if drop["nets_shown"]:
        names = list(drop["nets_shown"][0]["over"])
        rows = [[r["net"], r["named_by"], volts_text(r["nominal_V"]), f"{r['nodes']:,}",
                 r["worst_node"] or "-", volts_text(r["worst_drop_V"]),
                 "-" if r["worst_drop_percent"] is None else f"{r['worst_drop_percent']:.3g}%",
                 *("n/a" if r["over"][n] is None else f"{r['over'][n]:,}" for n in names)]
                for r in drop["nets_shown"]]
        parts.append(_table(["net", "named by", "nominal", "nodes", "worst node", "worst drop",
                             "% of nominal", *(f"over {n}" for n in names)], rows,
                            numeric=set(range(2, 7 + len(names))) - {4}))
    if drop["worst_nodes"]:
        parts.append("<p>Largest drops:</p>")
        parts.append(_table(["node", "net", "drop", "% of nominal"],
                            [[r["node"], r["net"], volts_text(r["drop_V"]),
                              "-" if r["drop_percent"] is None else f"{r['drop_percent']:.3g}%"]
                             for r in drop["worst_nodes"]], numeric={1, 2, 3}))
    parts.append(_image(drop_map, "supply drop map") if drop_map else f"<p>{_e(map_note)}</p>")
    parts.append(_image(histograms, "histograms of supply drop and branch utilisation"))

    parts.append("<h2>Limits</h2>")
    if violations is None:
        parts.append("<p>No limit was given and the branch table has no ratings: nothing was "
                      "checked.</p>")
    else:
        c = violations["counts"]
        status = (f'<span class="fail">{violations["total"]:,} limit(s) exceeded</span>'
                  if violations["total"] else '<span class="pass">no limit exceeded</span>')
        parts.append(f"<p>Checked: {_e(violations['limits'])}. {status} (drop {c['drop']:,}, "
                     f"current {c['current']:,}, power {c['power']:,}); worst first.</p>")
        if violations["rows"]:
            rows = [[f"{r['utilisation'] * 100:.1f}%", r["quantity"],
                     r.get("node") or f"{r['branch']} ({r['kind']} {r['from']} -> {r['to']})",
                     quantity_text(r["value"], r["unit"]), quantity_text(r["limit"], r["unit"])]
                    for r in violations["rows"]]
            parts.append(_table(["utilisation", "quantity", "where", "value", "limit"], rows,
                                numeric={0, 3, 4}))
            if violations["total"] > len(rows):
                parts.append(f"<p>... and {violations['total'] - len(rows):,} more.</p>")

    findings = [f for f in s.get("findings", []) if f["severity"] != "error"]
    if findings or s.get("notes"):
        parts.append("<h2>Check findings and notes</h2><ul>")
        parts += [f"<li>{_e(f['severity'])} {_e(f['code'])}: {_e(f['message'])}</li>"
                  for f in findings]
        parts += [f"<li>{_e(note)}</li>" for note in s.get("notes", [])]
        parts.append("</ul>")
    parts += ["<h2>Cautions</h2><ul>", f"<li>{_e(CAUTION)}</li>", f"<li>{_e(POWER_CAUTION)}</li>",
              "<li>The model holds only what the network file describes: contact and via "
              "resistances, temperature and tolerances not in it are not in the results.</li>",
              "</ul>"]
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>ohmgraph report: {_e(attrs.get('input_file', source))}</title>"
            f"<style>{STYLE}</style></head><body>\n" + "\n".join(parts) + "\n</body></html>\n")
