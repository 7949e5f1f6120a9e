"""The report's tables as plain rows of text, shared by the HTML, Markdown and terminal writers.

A table is ``(title, header, rows)`` with every cell already formatted as text.
"""

from __future__ import annotations

import math

from convert.compare.evaluate import CAUTIONS  # noqa: F401  (re-exported for writers)

Table = tuple[str, list[str], list[list[str]]]


def num(x, digits: int = 3, unit: str = "") -> str:
    if x is None:
        return "—"
    if isinstance(x, float) and not math.isfinite(x):
        return "∞" if x > 0 else "−∞"
    text = f"{x:.{digits}g}"
    return f"{text} {unit}".strip()


def hz(x) -> str:
    if x is None:
        return "—"
    from convert.values import format_value

    return format_value(x, "hz")


def verdict_table(results) -> Table:
    rows = []
    for j in results.verdict.judgements:
        if j.status == "not set":
            continue
        rows.append([j.realization, j.label, num(j.value, 3, j.unit), num(j.limit, 3, j.unit), j.status.upper()
                     if j.status == "fail" else j.status, j.note])
    return ("Verdict per criterion", ["form", "criterion", "measured", "limit", "result", "note"], rows)


def budget_table(realization) -> Table:
    rows = []
    for row in realization.budget:
        if not row.applicable:
            rows.append([row.label, "not applicable", "", "", "", "", row.note.replace("not applicable: ", "")])
            continue
        pct = f" (p{row.percentile:g})" if row.percentile else ""
        rows.append([row.label + pct, num(row.max_gain_error_db, 3, "dB"), num(row.max_phase_error_deg, 3, "°"),
                     num(row.delta_phase_margin_deg, 3, "°"), num(row.delta_gain_margin_db, 3, "dB"),
                     num(row.delta_sensitivity_peak_db, 3, "dB"), row.note])
    return (f"Error budget — {realization.name}",
            ["source of error", "max gain error", "max phase error", "Δ phase margin", "Δ gain margin",
             "Δ sensitivity peak", "what was switched on"], rows)


def margins_table(results) -> Table | None:
    if results.source_margins is None:
        return None
    items = [("source", results.source_margins)] + [(r.name, r.margins) for r in results.realizations]
    rows = []
    for name, m in items:
        if m is None:
            rows.append([name, "—", "—", "—", "—", "—"])
            continue
        rows.append([name, num(m.gain_margin_db, 3, "dB"), hz(m.phase_crossover_hz), num(m.phase_margin_deg, 3, "°"),
                     hz(m.crossover_hz), num(m.sensitivity_peak_db, 3, "dB")])
    return ("Loop checks (margins with the plant, dead time exact)",
            ["form", "gain margin", "at", "phase margin", "crossover", "sensitivity peak"], rows)


def rate_table(results) -> Table | None:
    if not results.rate_advice:
        return None
    rows = [[a.method, hz(a.checked_fs_hz) if a.checked_fs_hz else "none in scan", hz(a.rule_fs_hz),
             a.limiting, f"{hz(a.scanned_hz[0])} – {hz(a.scanned_hz[1])}"] for a in results.rate_advice]
    return ("Sample-rate advice", ["method", "lowest rate within criteria (checked)", "rule of thumb",
                                   "limiting criterion below it", "scanned"], rows)


def realization_table(results) -> Table:
    rows = []
    for r in results.realizations:
        d = r.details
        if r.form == "digital":
            what = (f"b = [{', '.join(f'{x:.10g}' for x in d['b'])}]; a = [{', '.join(f'{x:.10g}' for x in d['a'])}]; "
                    f"delay {d['delay_s'] * 1e3:g} ms; {d['word_format']}")
        else:
            what = "; ".join(f"{k} = {v}" for k, v in d.get("parts_text", {}).items()) or d.get("topology", "")
        rows.append([r.name, r.form, what, "; ".join(r.warnings)])
    return ("New forms", ["form", "kind", "realization", "warnings"], rows)


def all_tables(results) -> list[Table]:
    out = [verdict_table(results), realization_table(results)]
    out += [budget_table(r) for r in results.realizations]
    for t in (margins_table(results), rate_table(results)):
        if t is not None:
            out.append(t)
    return out
