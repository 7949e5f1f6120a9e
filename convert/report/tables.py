"""The report's tables as plain rows of text, shared by the HTML, Markdown and terminal writers.

A table is ``(title, header, rows)`` with every cell already formatted as text.
:func:`all_tables` holds the result tables (verdict, budgets, loop checks, rate advice) that the
terminal summary repeats; :func:`input_tables` the echo of the case's inputs (source, targets,
plant, signals, criteria) that the report files print first. :func:`table_note` gives the
sentence printed under a table to say how to read it.
"""

from __future__ import annotations

import math
from convert.values import format_value
from convert.report.evidence import evidence_tables
from convert.case import parsed_transfer_functions
from convert.compare.evaluate import firmware_output_limits
from convert.circuit.clamps import limits_text
from convert.given import describe
from convert.compare.verdict import CRITERIA
from convert.digital.quantized import ASSUMED_SCALING


Table = tuple[str, list[str], list[list[str]]]

#: Below this magnitude an error or change (dB or degrees) is written as "< 0.001".
FLOOR = 1e-3
#: What a table shows for a figure that came out NaN: never the NaN itself (issue 9).
NOT_COMPUTED = "not computed"


def num(x, digits: int = 3, unit: str = "") -> str:
    """``x`` to ``digits`` significant digits with ``unit``; "—" for None."""
    if x is None:
        return "—"
    if isinstance(x, float) and math.isnan(x):
        return NOT_COMPUTED
    if isinstance(x, float) and not math.isfinite(x):
        return "∞" if x > 0 else "−∞"
    text = f"{x:.{digits}g}"
    return f"{text} {unit}".strip()


def fixed(x, unit: str = "", digits: int = 3, floor: float = FLOOR) -> str:
    """A figure for a reader: ``digits`` significant digits without exponent notation, and
    "< floor" (with the sign kept) where it is smaller than ``floor`` in magnitude."""
    if x is None:
        return "—"
    x = float(x)
    if math.isnan(x):
        return NOT_COMPUTED
    if not math.isfinite(x):
        return "∞" if x > 0 else "−∞"
    if x == 0:
        return f"0 {unit}".strip()
    if abs(x) < floor:  # magnitude below the floor; the sign says nothing
        return f"< {floor:.{max(0, -math.floor(math.log10(floor)))}f} {unit}".strip()
    exp = math.floor(math.log10(abs(x)))
    decimals = max(0, digits - 1 - exp)
    text = f"{x:.{decimals}f}"
    if x < 0:
        text = "−" + text[1:]
    return f"{text} {unit}".strip()


def hz(x) -> str:
    if x is None:
        return "—"

    return format_value(x, "hz")


def seconds(x) -> str:
    """A time: plain seconds from 1 s up (no "ks"), SI prefixes below."""
    if x is None:
        return "—"
    if abs(x) >= 1:
        return f"{x:.4g} s"

    return format_value(x, "second")


def _measured(value, unit: str, limit=None) -> str:
    """A judged figure in the criterion's unit; fractions of a step or peak as percentages. A
    figure judged against a limit smaller than :data:`FLOOR` (an input resolution, say) is written
    to a tenth of that limit, so the two can be told apart."""
    scale = 100.0 if unit in ("of step", "of peak", "of range", "of full scale") else 1.0
    floor = FLOOR
    if limit is not None and math.isfinite(limit) and 0 < abs(scale * limit) < 10 * FLOOR:
        floor = 10.0 ** math.floor(math.log10(abs(scale * limit) / 100))
    shown = None if value is None else scale * value
    return fixed(shown, f"% {unit}" if scale != 1.0 else unit, floor=floor)


def _against_limit(value, limit, status: str) -> str:
    """How the figure stands against its limit: the excess for a failure, the share used for a pass."""
    if value is None or limit is None or status not in ("pass", "fail"):
        return ""
    if limit == 0 or value == math.inf:  # +∞: a root on the jω axis inside the band (the note says where)
        return "over the limit" if value > 0 else ("below the limit" if value < 0 else "at the limit")
    ratio = value / limit
    if status == "fail":
        return f"over by {ratio - 1:.0%} ({ratio:.2g}× the limit)"
    return f"{ratio:.0%} of the limit used" if ratio >= 0.005 else "< 1 % of the limit used"


def failing_criteria(results) -> list[str]:
    """One line per failed criterion (form, criterion, measured against limit), for the lines
    printed beside a FAIL banner; empty when nothing failed."""
    out = []
    for j in results.verdict.failures:
        if j.limit is None:  # a check without a limit (closed-loop stability): its first words say it
            out.append(f"{j.realization}: {j.label}: {j.note.split(': ')[0]}")
            continue
        out.append(f"{figure_against_limit(j)}" + (f" ({j.note})" if j.note else ""))
    return out


def figure_against_limit(j) -> str:
    """ "form: criterion measured > limit limit", in the criterion's unit (fractions as percentages)."""
    return (
        f"{j.realization}: {j.label} {_measured(j.value, j.unit, j.limit)} > limit "
        f"{_measured(j.limit, j.unit, j.limit)}"
    )


def verdict_table(results) -> Table:
    rows = []
    for j in results.verdict.judgements:
        if j.status == "not set":
            continue
        unit = j.unit
        if j.criterion == "closed_loop_stable":  # a check without a number: say what was found
            found = {"pass": "stable", "skipped": "—"}.get(
                j.status, "sign inverted" if "negative low-frequency" in j.note else "unstable"
            )
            rows.append(
                [
                    j.realization,
                    j.label,
                    found,
                    "stable, right sign",
                    j.status.upper() if j.status == "fail" else j.status,
                    "",
                    j.note,
                ]
            )
            continue
        limit = _measured(j.limit, unit, j.limit)
        rows.append(
            [
                j.realization,
                j.label,
                _measured(j.value, unit, j.limit),
                limit,
                j.status.upper() if j.status == "fail" else j.status,
                _against_limit(j.value, j.limit, j.status),
                j.note,
            ]
        )
    return (
        "Verdict per criterion",
        ["form", "criterion", "measured", "limit", "result", "against the limit", "note"],
        rows,
    )


def budget_table(realization, loops_stable: bool = True, unstable: str = "total loop unstable") -> Table:
    """The budget of one realization. Rows that cannot arise in this kind of target are left
    out (:func:`table_note` says which); rows that could arise but were not switched on stay.
    ``loops_stable`` False (the source's or this realization's loop is unstable): the margin
    changes are left out, since margins of an unstable loop say nothing of robustness, and each
    row says which loop was unstable (``unstable``): not the row's own effect, which alone may
    leave the loop stable."""
    rows = []
    for row in realization.budget:
        if not row.applicable:
            if "does not arise" in row.note:
                continue
            rows.append([row.label, "not applicable", "", "", "", "", row.note.replace("not applicable: ", "")])
            continue
        pct = f" (p{row.percentile:g} of draws)" if row.percentile else ""

        loop = (
            [
                _change(row.delta_phase_margin_deg, "°", row.percentile),
                _change(row.delta_gain_margin_db, "dB", row.percentile),
                _change(row.delta_sensitivity_peak_db, "dB", row.percentile),
            ]
            if loops_stable
            else [unstable, "—", "—"]
        )
        rows.append(
            [row.label + pct, fixed(row.max_gain_error_db, "dB"), fixed(row.max_phase_error_deg, "°"), *loop, row.note]
        )
    return (
        f"Error budget — {realization.name}",
        [
            "source of error",
            "max gain error",
            "max phase error",
            "Δ phase margin",
            "Δ gain margin",
            "Δ sensitivity peak",
            "what was switched on",
        ],
        rows,
    )


def _change(v, unit: str, percentile) -> str:
    """A loop figure's change; over draws (``percentile``) a percentile of |change|: its size, not a
    direction (draws move both ways; the sign of the one draw nearest the level says little)."""
    if not percentile or v is None or not math.isfinite(v):
        return fixed(v, unit)
    return f"±{fixed(abs(v), unit)}"


def margins_table(results) -> Table | None:
    if results.source_margins is None:
        return None
    items = [("source", results.source_margins)] + [(r.name, r.margins) for r in results.realizations]
    rows = []
    for name, m in items:
        if m is None:
            rows.append([name, "—", "—", "—", "—", "—", "—"])
            continue
        if results.loop_is_stable(name) is False:  # margins of an unstable loop are no robustness
            rows.append([name, "unstable loop", "—", "unstable loop", "—", "—", "—"])
            continue
        peak = fixed(m.sensitivity_peak_db, "dB", floor=0.01)
        note = getattr(m, "sensitivity_peak_note", "")
        if note:  # no interior peak: say where |S| is largest instead of quoting a grid's end
            where = (
                "at zero frequency"
                if "zero frequency" in note
                else "at the Nyquist frequency"
                if "Nyquist" in note
                else "as f → ∞"
            )
            peak = f"{peak} ({where}; no interior peak)"
        rows.append(
            [
                name,
                fixed(m.gain_margin_db, "dB", floor=0.01),
                hz(m.phase_crossover_hz),
                fixed(m.phase_margin_deg, "°", floor=0.01),
                hz(m.crossover_hz),
                peak,
                f"{m.ms:.2f}",
            ]
        )
    return (
        "Loop checks (margins with the plant, dead time exact)",
        [
            "form",
            "gain margin",
            "at (phase −180°)",
            "phase margin",
            "crossover (|L| = 1)",
            "sensitivity peak",
            "Ms = max |S|",
        ],
        rows,
    )


def rate_table(results) -> Table | None:
    if not results.rate_advice:
        return None
    rows = [
        [
            a.method,
            hz(a.checked_fs_hz) if a.checked_fs_hz else "none in scan" if a.checked else "— (unchecked)",
            hz(a.rule_fs_hz) if a.rule_fs_hz else "—",
            a.limiting,
            f"{hz(a.scanned_hz[0])} – {hz(a.scanned_hz[1])}",
        ]
        for a in results.rate_advice
    ]
    first = (
        "lowest rate that passes (checked, within 1 %)"
        if any(a.checked for a in results.rate_advice)
        else "lowest rate (nothing to check)"
    )
    return ("Sample-rate advice", ["method", first, "rule of thumb", "limiting criterion below it", "scanned"], rows)


def realization_table(results) -> Table:
    rows = []
    for r in results.realizations:
        d = r.details
        if r.form == "digital":
            fw = d.get("firmware") or {}
            if fw.get("sections") and len(fw["sections"]) > 1:
                coefs = "; ".join(
                    f"section {i + 1}: b = [{', '.join(f'{x:.10g}' for x in sec['b'])}], "
                    f"a = [{', '.join(f'{x:.10g}' for x in sec['a'])}]"
                    for i, sec in enumerate(fw["sections"])
                )
            else:
                coefs = (
                    f"b = [{', '.join(f'{x:.10g}' for x in d['b'])}]; a = [{', '.join(f'{x:.10g}' for x in d['a'])}]"
                )
            sig = d.get("signal_scaling")
            if sig and sig.get("b"):
                # the code holds the controller in firmware units: show those first, the card's beside
                coefs = (
                    f"in firmware units (as in the code) b = [{', '.join(f'{x:.10g}' for x in sig['b'])}], "
                    f"a = [{', '.join(f'{x:.10g}' for x in d['a'])}]; in card units {coefs}"
                )
            what = (
                f"structure {d.get('structure', 'direct1')} in {d['word_format']}; {coefs}; "
                f"delay {seconds(d['delay_s'])}"
            )
            if sig:
                what += (
                    f"; firmware units: {sig['text']}; {sig['gains']}; card {sig['card_action']} acting, "
                    f"firmware {sig['firmware_action']} acting"
                )
        else:
            what = "; ".join(f"{k} = {v}" for k, v in d.get("parts_text", {}).items()) or d.get("topology", "")
        rows.append([r.name, r.form, what, "; ".join(r.warnings)])
    return ("New forms", ["form", "kind", "realization", "warnings"], rows)


def all_notes(results) -> list[str]:
    """The case's notes, then each digital form's firmware notes (word-format analysis: e.g. how
    finely a fixed-point PID block's derivative word resolves), named by the form."""
    out = list(results.notes)
    for r in results.realizations:
        out += [f"{r.name}: {n}" for n in firmware_notes(r)]
    return out


def firmware_notes(realization, assumptions: bool = True) -> list[str]:
    """A digital form's notes: its discretization's, then its word-format analysis' (none for
    other forms). ``assumptions=False`` leaves out the notes that only state the assumed scaling
    (output level U, input range R), which the report keeps."""
    if realization.form != "digital":
        return []
    d = realization.details
    notes = list(d.get("notes") or ()) + list((d.get("firmware") or {}).get("notes") or ())
    return notes if assumptions else [n for n in notes if not n.startswith(ASSUMED_SCALING)]


def all_tables(results) -> list[Table]:
    out = [verdict_table(results), realization_table(results)]
    src_ok = results.loop_is_stable("source") is not False
    out += [
        budget_table(
            r,
            src_ok and results.loop_is_stable(r.name) is not False,
            "total loop unstable" if src_ok else "source loop unstable",
        )
        for r in results.realizations
    ]
    for t in (margins_table(results), rate_table(results)):
        if t is not None:
            out.append(t)

    out += evidence_tables(results)
    return out


# ----------------------------------------------------------------------------- the case's inputs
def _pid_text(pid) -> str:
    """PID settings in the ideal (standard) form, plant-neutral SI units."""
    try:
        ideal = pid.table()["ideal"]
    except Exception:  # a settings object without the ideal form: say nothing rather than guess
        return ""
    if "unavailable" in ideal:
        return ""
    parts = [f"Kc = {ideal['kc']:.4g}"]
    parts.append(f"Ti = {seconds(ideal['ti_s'])}" if ideal.get("ti_s") else "no integral")
    if ideal.get("td_s"):
        parts.append(f"Td = {seconds(ideal['td_s'])}")
        if ideal.get("n"):
            parts.append(f"N = {ideal['n']:.4g} (filter Td/N = {seconds(ideal['tf_s'])})")
    action = pid.table().get("action")
    if action:
        parts.append(f"{action} action")
    return ", ".join(parts)


def _source_as_given(case) -> str:
    src = case.source
    d = src.data
    if src.form == "expression":
        return f"expression {d['expression']}"
    if src.form == "pid":
        return "PID settings " + ", ".join(f"{k} = {v}" for k, v in d["settings"].items())
    if src.form == "digital":
        return (
            f"firmware coefficients b = {list(d['b'])}, a = {list(d['a'])} at {hz(d['fs_hz'])} "
            f"(inverse for the analog equivalent: {d['method']})"
        )
    if src.form == "card":
        parts = ", ".join(
            f"{k} = {format_value(v, 'ohm' if k[:1].upper() == 'R' else 'farad')}" for k, v in d["parts"].items()
        )
        return f"card topology {d['topology']}: {parts}"
    rel = d["file"]
    try:
        rel = d["file"].relative_to(case.base_dir)
    except ValueError:
        pass
    how = f"setpoint {d['setpoint']}, measurement {d['measurement']}" if d.get("setpoint") else f"input {d['input']}"
    return f"netlist {rel} ({how}, output {d['output']})"


def parsed_table(results) -> Table | None:
    """Each transfer function the case gave, beside its canonical form (monic denominator,
    descending powers): how the text was read, so a misreading is seen before the verdict."""
    rows = []
    for what, given, ctrl in parsed_transfer_functions(results.case):
        if what == "source":  # as the source was read (e.g. printed poles at z = 1 taken as integrators)
            ctrl = results.source.controller
        read = ctrl.expression(digits=6) + (f" at {hz(ctrl.fs_hz)}" if ctrl.is_digital else "")
        count = ctrl.integrator_count()
        if count:
            read += f" ({count} integrator{'s' if count > 1 else ''})"
        rows.append([what, given, read])
    if not rows:
        return None
    return ("Transfer functions as read", ["what", "as given", "as read (canonical form)"], rows)


def input_tables(results) -> list[Table]:
    """The case's inputs echoed for the reader: what was compared, with what, against what."""
    case = results.case
    ref = results.reference
    rows = [
        ["case file", str(case.path)],
        ["source as given", _source_as_given(case)],
        [
            "source controller" + (" C(z)" if ref.is_digital else " C(s)"),
            ref.expression(digits=5) + (f" at {hz(ref.fs_hz)}" if ref.is_digital else "") + " (error → output)",
        ],
    ]
    red = results.source.extra.get("reduction")
    if red is not None and red.changed:
        rows.append(
            [
                "controller handed on (card without its op-amp parasitics)",
                red.reduced.expression(digits=5) + f" (error → output); {red.rule}",
            ]
        )
    if results.source.pid is not None:
        text = _pid_text(results.source.pid)
        if text:
            rows.append(
                [
                    "source as PID (ideal form)"
                    if red is None or not red.changed
                    else "controller handed on, as PID (ideal form)",
                    text,
                ]
            )
    if case.digital:
        t = case.digital
        delay = f"{t.delay_samples:g} sample(s)" if t.delay_samples is not None else seconds(t.delay_s)

        card_lim = results.source.extra.get("output_limits")
        lim = firmware_output_limits(case, card_lim)
        how = (
            f"PID block ({t.pid_form}, anti-windup {t.anti_windup})"
            if getattr(t, "is_pid_block", False)
            else f"methods {', '.join(t.methods)}"
        )
        text = (
            f"sample rate {', '.join(hz(f) for f in t.fs_hz)}; {how}; "
            f"computation delay {delay}; coefficients {t.word_format}"
        )
        if t.prewarp_hz:
            text += f"; prewarp {hz(t.prewarp_hz)}"
        if t.derivative_filter:
            text += f"; derivative filter N = {t.derivative_filter:g}"
        text += f"; output limits {lim[0]:.3g} … {lim[1]:.3g}" if lim else "; no output limits"
        if lim and card_lim is not None and not t.output_limits:
            text += " (from the card's clamps)"
        rows.append(["target: firmware", text])
    if case.circuit:
        t = case.circuit
        tol = ", ".join(
            f"{k} {v:.3g}" if not isinstance(v, float) else f"{k} {100 * v:g} %" for k, v in t.tolerances.items()
        )
        gbw = f"op-amp gain-bandwidth {hz(t.opamp_gbw_hz)}" if t.opamp_gbw_hz else "ideal op-amps"
        rows.append(
            [
                "target: op-amp circuit",
                f"topology {t.topology}; resistors {t.resistors}, capacitors {t.capacitors}; tolerances {tol}; "
                f"{gbw}; Monte Carlo {results.draws or t.draws} draws ({t.distribution}), seed {t.seed}",
            ]
        )
    if results.source.extra.get("output_limits") is not None:
        rows.append(
            [
                "card clamps",
                f"output held to {limits_text(results.source.extra['output_limits'])} by the card's "
                "diodes (approximate knees)",
            ]
        )
    if getattr(case, "given", ()):
        rows += [[f"given: {g.name}", describe(g)] for g in case.given]
    if case.plant:
        rows.append(
            [
                "plant",
                f"{case.plant.expression}, dead time {seconds(case.plant.dead_time_s)} "
                "(controller output → measurement)",
            ]
        )
        s = case.signals
        text = (
            f"setpoint step {s.setpoint_step:g}; load step {s.disturbance_step:g} at the plant input; "
            f"simulated time {seconds(results.duration_s)}"
        )
        if s.output_range:
            text += f"; actuator range {s.output_range[0]:g} … {s.output_range[1]:g} (every form)"
        rows.append(["test signals", text])
    else:
        rows.append(["plant", "none given: the loop checks are skipped (listed below)"])
    rows.append(["band of comparison", f"{hz(case.criteria.band_hz[0])} – {hz(case.criteria.band_hz[1])}"])
    out = [("Case inputs", ["item", "as used"], rows)]

    crit = case.criteria.as_dict()

    crows = []
    for key, label, unit in CRITERIA:
        limit = crit.get(key)
        if limit is None:
            crows.append([label, "not set (not checked)"])
        elif unit in ("of step", "of peak", "of full scale"):
            crows.append([label, f"≤ {fixed(100 * limit, '%')} {unit}"])
        else:
            crows.append([label, f"≤ {fixed(limit, unit)}"])
    out.append(("Acceptance criteria", ["criterion", "limit"], crows))
    parsed = parsed_table(results)
    if parsed is not None:
        out.insert(1, parsed)
    return out


_NOTES = {
    "Verdict per criterion": (
        "Each figure is compared with its limit as an absolute value. Gain and phase errors are the largest over the "
        "band with every source of error on (the budget's total row); margin and sensitivity changes are new form "
        "minus source; step and disturbance deviations are the largest |y_new − y_source| after the step, as a "
        "percentage of the setpoint step or of the source loop's peak disturbance deviation."
    ),
    "Error budget": (
        "Each row switches on one source of error alone and compares with the controller it was made from; the "
        "total has everything on and compares with the source as the loop sees it. Errors are the largest over the "
        "band; the Δ columns are the change in the loop figure, new minus source (a negative Δ phase margin means "
        "less margin). The rows need not add up to the total. Rows that cannot arise in this kind of target are "
        "left out. For a digital form the Δ columns see the hold as a continuous response (its sinc and half-period "
        "delay), which can be a little optimistic near the Nyquist frequency; the loop checks below and the verdict "
        "use the sampled loop itself (aliasing included)."
    ),
    "Loop checks": (
        "Gain margin at the frequency where the loop's phase crosses −180°; phase margin at the crossover where "
        "|L| = 1; sensitivity peak Ms = max |1/(1 + L)| (6 dB, Ms = 2, is a common upper bound for a robust loop). "
        "A digital form's loop is the sampled loop as it runs: L(z) on the unit circle up to the Nyquist frequency, "
        "the plant sampled through the hold with its dead time and the computation delay."
    ),
    "Sample-rate advice": (
        "The checked rate is the lowest scanned rate from which every higher rate keeps the method, hold and "
        "computation delay within the gain and phase error limits over the band and the phase lag added at "
        "crossover within the phase-margin limit; the rule of thumb uses the lag estimate below. The scan uses "
        "float64 coefficients: a word format's own checks (stored poles, response, overflow, dead band, stall) "
        "are judged only at the case's rates, in the verdict."
    ),
}


def table_note(title: str) -> str | None:
    """How to read the table called ``title`` (None when it needs no note)."""
    for prefix, text in _NOTES.items():
        if title.startswith(prefix):
            return text
    return None
