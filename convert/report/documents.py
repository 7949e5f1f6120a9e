"""``report.html`` (self-contained: figures embedded as base64 PNG) and ``report.md`` (figures
as files beside it), both built from the same tables and figures."""

from __future__ import annotations

import base64
import html

from convert.compare.evaluate import CAUTIONS
from convert.report.tables import all_notes, all_tables, failing_criteria, input_tables, table_note
from convert.report.evidence import CAPTIONS

FIGURE_CAPTIONS = {
    "bode.png": "Bode overlay of all forms as the loop sees them, with the error of each against the source.",
    "loop.png": "Closed-loop setpoint step and load disturbance, every form overlaid.",
    "polezero.png": "Pole-zero maps: analog forms in s, digital forms in z.",
}


def _caption(name: str) -> str:
    if name in CAPTIONS:
        return CAPTIONS[name]
    if name.startswith("schematic-"):
        return "Schematic of the designed circuit (rounded parts)."
    if name.startswith("montecarlo-"):
        return "Monte Carlo band of the circuit's response across part tolerances."
    return FIGURE_CAPTIONS.get(name, name)


# ----------------------------------------------------------------------------- HTML
_CSS = """
body{font-family:system-ui,-apple-system,Segoe UI,sans-serif;margin:2em auto;max-width:1100px;color:#1c2833;padding:0 1em}
h1{font-size:1.5em}h2{font-size:1.2em;margin-top:1.6em;border-bottom:1px solid #d5d8dc}
table{border-collapse:collapse;margin:.6em 0;font-size:.88em}td,th{border:1px solid #d5d8dc;padding:.25em .5em;vertical-align:top}
th{background:#eaf2f8;text-align:left}.pass{color:#1e8449;font-weight:600}.fail{color:#c0392b;font-weight:700}
.verdict{font-size:1.3em;padding:.4em .8em;display:inline-block;border-radius:4px}
.verdict.pass{background:#d5f5e3}.verdict.fail{background:#fadbd8}.verdict.unchecked{background:#fdebd0}
ul.failed{color:#c0392b;margin:.3em 0 1em}
.alarm{background:#fadbd8;border-left:6px solid #c0392b;padding:.6em 1em;font-weight:600}
.caution{background:#fef9e7;border-left:4px solid #b7950b;padding:.5em 1em}
p.note{font-size:.85em;color:#444;max-width:60em}
figure{margin:1em 0}figcaption{font-size:.85em;color:#555}img{max-width:100%}
"""


def _html_table(title: str, header: list[str], rows: list[list[str]]) -> str:
    out = [f"<h2>{html.escape(title)}</h2>"]
    note = table_note(title)
    if note:
        out.append(f'<p class="note">{html.escape(note)}</p>')
    out += ["<table>", "<tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in header) + "</tr>"]
    for row in rows:
        cells = []
        for cell in row:
            cls = ""
            if cell in ("pass", "FAIL"):
                cls = f' class="{"pass" if cell == "pass" else "fail"}"'
            cells.append(f"<td{cls}>{html.escape(cell)}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def html_report(results, figures: dict[str, bytes]) -> str:
    """The whole report as one HTML document with every figure embedded (data: URIs)."""
    case = results.case
    v = results.verdict.overall
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>loopshift report — {html.escape(case.title)}</title>",
        f"<style>{_CSS}</style></head><body>",
        "<h1>Equivalence report</h1>",
    ]
    # the computed verdict, the alarms and the cautions first; the case file's own words after them
    for alarm in results.alarms:
        parts.append(f'<p class="alarm" role="alert">{html.escape(alarm)}</p>')
    parts.append(f'<p class="verdict {v}">Verdict: {v.upper()}</p>')
    failed = failing_criteria(results)
    if failed:
        parts.append('<ul class="failed">' + "".join(f"<li>{html.escape(t)}</li>" for t in failed) + "</ul>")
    if results.verdict.unchecked_reason:
        parts.append(f"<p>{html.escape(results.verdict.unchecked_reason)}</p>")
    parts.append(
        '<div class="caution"><strong>Cautions.</strong><ul>'
        + "".join(f"<li>{html.escape(c)}</li>" for c in CAUTIONS)
        + "</ul></div>"
    )
    parts.append(f"<h2>Case</h2><p><strong>Title (from the case file):</strong> {html.escape(case.title)}</p>")
    if case.description:
        parts.append(f"<p><strong>Description (from the case file):</strong> {html.escape(case.description)}</p>")
    for title, header, rows in input_tables(results):
        parts.append(_html_table(title, header, rows))
    tables = all_tables(results)
    for title, header, rows in tables:
        parts.append(_html_table(title, header, rows))
    if results.skipped:
        parts.append(
            "<h2>Checks skipped</h2><ul>" + "".join(f"<li>{html.escape(s)}</li>" for s in results.skipped) + "</ul>"
        )
    notes = all_notes(results)
    if notes:
        parts.append("<h2>Notes</h2><ul>" + "".join(f"<li>{html.escape(s)}</li>" for s in notes) + "</ul>")
    if results.rate_advice:
        parts.append(f"<p>Rule used: {html.escape(results.rate_advice[0].rule)}.</p>")
    parts.append("<h2>Figures</h2>")
    for name, data in figures.items():
        b64 = base64.b64encode(data).decode("ascii")
        parts.append(
            f'<figure><img alt="{html.escape(_caption(name))}" src="data:image/png;base64,{b64}">'
            f"<figcaption>{html.escape(_caption(name))}</figcaption></figure>"
        )
    files = sorted({f for r in results.realizations for f in r.files})
    if files:
        parts.append(
            "<h2>Files beside this report</h2><ul>" + "".join(f"<li>{html.escape(f)}</li>" for f in files) + "</ul>"
        )
    parts.append("<p><small>Written by loopshift. The tool computes; it does not certify.</small></p></body></html>")
    return "\n".join(parts)


# ----------------------------------------------------------------------------- Markdown
# Characters with a meaning inside a CommonMark paragraph or a table cell: each is written with a
# backslash, so it shows as itself (CommonMark 0.31, section 2.4: any ASCII punctuation may be
# backslash-escaped). "<", ">" and "&" become entities, so no raw HTML (a comment that hides the
# verdict, a <script>) can start from user text.
_MD_SPECIAL = set("\\`*_[]!|~")
_MD_ENTITIES = {"<": "&lt;", ">": "&gt;", "&": "&amp;"}


def md_text(text, *, starts_line: bool = True) -> str:
    """``text`` as one Markdown paragraph that renders as exactly what it says.

    Whitespace (newlines included) collapses to single spaces, so a title or description can
    neither start a new block (a heading, a list, a "Verdict" line of its own) nor end the
    paragraph; inline syntax and HTML are escaped; where the text ``starts_line`` (a paragraph,
    a list item; not a table cell) a leading block marker ("#", "-", "+", "=", "1.") is escaped
    too.
    """
    flat = " ".join(str(text).split())
    out = []
    for ch in flat:
        if ch in _MD_ENTITIES:
            out.append(_MD_ENTITIES[ch])
        elif ch in _MD_SPECIAL:
            out.append("\\" + ch)
        else:
            out.append(ch)
    escaped = "".join(out)
    if not starts_line:
        return escaped
    if escaped[:1] in ("-", "+", "=", "#"):
        escaped = "\\" + escaped
    digits = len(escaped) - len(escaped.lstrip("0123456789"))
    if digits and escaped[digits : digits + 1] in (".", ")"):
        escaped = escaped[:digits] + "\\" + escaped[digits:]
    return escaped


def markdown_report(results, figure_names=()) -> str:
    """The report as Markdown; figures are referenced as ``figures/<name>.png`` files.

    The computed verdict and the cautions come first; every text from the case file or the
    inputs (title, description, names, notes) follows, escaped by :func:`md_text`."""
    from urllib.parse import quote

    case = results.case
    verdict = results.verdict.overall.upper()
    lines = [f"# Equivalence report: {verdict}", ""]
    for alarm in results.alarms:
        lines += [f"> **Warning: {md_text(alarm, starts_line=False)}**", ""]
    lines += [f"**Verdict: {verdict}** (computed by loopshift from the criteria below)", ""]
    failed = failing_criteria(results)
    if failed:
        lines += [f"- failed: {md_text(t)}" for t in failed] + [""]
    if results.verdict.unchecked_reason:
        lines += [md_text(results.verdict.unchecked_reason), ""]
    lines += ["> **Cautions.**"]
    lines += [f"> - {md_text(c)}" for c in CAUTIONS]
    lines += ["", "## Case", "", f"**Title (from the case file):** {md_text(case.title)}", ""]
    if case.description:
        lines += [f"**Description (from the case file):** {md_text(case.description)}", ""]
    for title, header, rows in input_tables(results) + all_tables(results):
        lines += [f"## {md_text(title)}", ""]
        note = table_note(title)
        if note:
            lines += [md_text(note), ""]
        lines += ["| " + " | ".join(md_text(h, starts_line=False) for h in header) + " |", "|" + "---|" * len(header)]
        lines += ["| " + " | ".join(md_text(c, starts_line=False) for c in row) + " |" for row in rows]
        lines.append("")
    if results.skipped:
        lines += ["## Checks skipped", ""] + [f"- {md_text(s)}" for s in results.skipped] + [""]
    notes = all_notes(results)
    if notes:
        lines += ["## Notes", ""] + [f"- {md_text(s)}" for s in notes] + [""]
    if results.rate_advice:
        lines += [f"Rule used: {md_text(results.rate_advice[0].rule)}.", ""]
    if figure_names:
        lines.append(markdown_figures(figure_names))
    files = sorted({f for r in results.realizations for f in r.files})
    if files:
        lines += ["## Files beside this report", ""] + [f"- [{md_text(f)}](<{quote(f)}>)" for f in files] + [""]
    return "\n".join(lines)


def markdown_figures(names) -> str:
    lines = ["## Figures", ""]
    for name in names:
        lines += [f"![{md_text(_caption(name))}](figures/{name})", "", f"*{md_text(_caption(name))}*", ""]
    return "\n".join(lines)
