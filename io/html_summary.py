"""A one-page HTML summary of a comparison or diagnosis, with the cautions for live readings.

The page is self-contained (inline style, no script, no external resource) so that it can be
mailed or archived with the readings. It opens with the safety cautions, then the provenance
(tool, time, input files with SHA-256), then the sections the command provides: the band rule,
the readings against their bands (failures highlighted) and, for a diagnosis, the flagged
readings and the ranking. Written through :func:`ohmgraph.io.atomic.atomic_output`.
"""

from __future__ import annotations

import html
import math

from ohmgraph.io.atomic import atomic_output, refuse_existing, refuse_input

CAUTIONS = (
    "Taking readings on an energised fixture carries electrical risk. De-energise and "
    "discharge the network before resistance readings (common practice), never probe above "
    "the voltages your instruments and training allow, and follow local safety rules and "
    "licensed practice.",
    "Instrument accuracy must come from the instrument's calibration data, and part "
    "tolerances from the parts' data; verdicts and rankings are only as good as those bands. "
    "Lead and contact resistance add to two-point readings unless compensated.",
    "A diagnosis ranks hypotheses from a model: confirm the suspect on the hardware before "
    "replacing anything.",
)

STYLE = """
body { font-family: sans-serif; margin: 2em; color: #222; max-width: 75em; }
h1 { font-size: 1.5em; } h2 { font-size: 1.15em; margin-top: 1.5em; }
.caution { border: 2px solid #b45309; background: #fff7ed; padding: 0.6em 1em; }
.caution li { margin: 0.3em 0; }
table { border-collapse: collapse; font-size: 0.9em; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.5em; text-align: right; }
th { background: #f3f4f6; } td.text { text-align: left; }
tr.fail td { background: #fee2e2; } tr.flag td { background: #fef3c7; }
p.small { font-size: 0.85em; color: #555; } pre { white-space: pre-wrap; }
"""


def add_html_argument(parser) -> None:
    parser.add_argument("--html", metavar="FILE.html",
                        help="also write a one-page HTML summary (with the safety cautions)")


def check_html(args, inputs) -> None:
    """Refuse an HTML name that is an input, exists without ``--force`` or cannot be written."""
    if args.html:
        refuse_input(args.html, inputs)
        refuse_existing(args.html, args.force)


def _cell(value) -> str:
    if isinstance(value, float):
        if not math.isfinite(value):
            return html.escape(str(value))
        return f"{value:.6g}"
    return html.escape(str(value))


def table_html(columns: dict, row_class=None) -> str:
    """An HTML table of equal-length columns; ``row_class(row)`` may name a CSS class."""
    names = list(columns)
    count = len(next(iter(columns.values()))) if columns else 0
    head = "".join(f"<th>{html.escape(name)}</th>" for name in names)
    rows = []
    for row in range(count):
        cells = []
        for name in names:
            value = columns[name][row]
            value = value.item() if hasattr(value, "item") else value
            kind = "" if isinstance(value, (int, float)) and not isinstance(value, bool) \
                else ' class="text"'
            cells.append(f"<td{kind}>{_cell(value)}</td>")
        css = row_class(row) if row_class else ""
        rows.append(f"<tr{f' class={css!r}' if css else ''}>{''.join(cells)}</tr>")
    return f"<table><tr>{head}</tr>{''.join(rows)}</table>"


def page(title: str, record: dict, sections: list) -> str:
    """The whole page: ``sections`` is a list of ``(heading, html body)``."""
    inputs = "".join(
        f"<li>{html.escape(role)}: {html.escape(entry['file'])} "
        f"<span class='small'>(SHA-256 {html.escape(entry['sha256'])})</span></li>"
        for role, entry in record.get("inputs", {}).items())
    cautions = "".join(f"<li>{html.escape(text)}</li>" for text in CAUTIONS)
    body = "".join(f"<h2>{html.escape(heading)}</h2>{content}" for heading, content in sections)
    return (f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
            f"<title>{html.escape(title)}</title><style>{STYLE}</style></head><body>"
            f"<h1>{html.escape(title)}</h1>"
            f"<div class='caution'><strong>Cautions</strong><ul>{cautions}</ul></div>"
            f"<h2>Provenance</h2><p>Written {html.escape(record['created'])} by ohmgraph "
            f"{html.escape(record['tool_version'])} from:</p><ul>{inputs}</ul>"
            f"{body}</body></html>\n")


def write_page(path, force: bool, text: str) -> None:
    with atomic_output(path, force) as temporary:
        temporary.write_text(text, encoding="utf-8")




def reading_table_html(columns: dict, flagged=()) -> str:
    """The readings as an HTML table, failures (and flagged readings) highlighted."""
    def css(row):
        if columns["line"][row] in flagged:
            return "flag"
        return "" if columns["status"][row] == "pass" else "fail"
    return table_html(columns, css)


__all__ = ["add_html_argument", "check_html", "table_html", "reading_table_html", "page",
           "write_page", "CAUTIONS"]
