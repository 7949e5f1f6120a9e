"""The report's Evidence section: the measurement overlaid on every form, the fitted values, the
log replays. Figures are drawn from :class:`convert.evidence.casework.CaseEvidence` (computed in
``compare``/``evidence``; nothing is computed here but what a figure draws)."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from convert.report import canvas
from convert.values import format_value
from convert.evidence.fit import value_text

SWEEP_FIGURE = "evidence-sweep.png"
LOG_FIGURE = "evidence-log.png"
CAPTIONS = {
    SWEEP_FIGURE: "Evidence: the bench sweep (points, error bars ±2σ noise) over every form's model; below, the "
    "measured error against the measured form's model. Grey: points not trusted.",
    LOG_FIGURE: "Evidence: the logged controller output and its replay through every form, each drawn shifted by "
    "its reported offset (the mean of logged − replayed, listed in the table); below, the residual about "
    "that offset.",
}


def evidence_jobs(results) -> list[tuple[str, Callable, dict, float]]:
    """The Evidence section's figures as ``(name, draw function, data, weight)`` jobs (see
    :func:`convert.report.figures.figure_jobs`)."""
    ev = getattr(results, "evidence", None)
    if ev is None:
        return []
    out = []
    if ev.sweep is not None:
        out.append((SWEEP_FIGURE, canvas.draw_sweep, _sweep_data(results, ev), 2.2))
    if ev.log is not None and ev.log.sketch["t"].size:
        out.append((LOG_FIGURE, canvas.draw_log, _log_data(ev), 1.0))
    return out


def _sweep_data(results, ev) -> dict:
    sw, chk = ev.sweep.sweep, ev.sweep.check
    crit = results.case.criteria
    return {
        "f_hz": sw.f_hz,
        "overlays": list(ev.overlays.items()),
        "measured": sw.response,
        "measured_label": f"measured ({ev.sweep_of})",
        "trusted": chk.trusted,
        "gain_error_db": chk.gain_error_db,
        "noise_db": chk.noise_db,
        "phase_error_deg": chk.phase_error_deg,
        "noise_deg": chk.noise_deg,
        "band_hz": crit.band_hz,
        "max_gain_error_db": crit.max_gain_error_db,
        "max_phase_error_deg": crit.max_phase_error_deg,
        "title": f"bench sweep {sw.path.name} against the model of the {ev.sweep_of}",
    }


def _log_data(ev) -> dict:
    sk = ev.log.sketch
    offsets = {r.name: (r.figures.get("offset") or 0.0) for r in ev.log.replays}
    return {
        "t": sk["t"],
        "output": sk["output"],
        "replayed": [(name, y, offsets.get(name, 0.0)) for name, y in sk["replayed"].items()],
        "title": f"plant log {ev.log.path.name} ({ev.log.rows:,} rows)",
    }


def evidence_tables(results) -> list:
    """(title, header, rows) tables of the Evidence section."""
    ev = getattr(results, "evidence", None)
    if ev is None:
        return []
    out = []
    if ev.sweep is not None:
        s = ev.sweep
        chk = s.check
        trusted = (
            ", ".join(f"{format_value(a, 'hz')} – {format_value(b, 'hz')}" for a, b in chk.trusted_bands) or "none"
        )
        rows = [
            ["file", s.sweep.path.name],
            ["measured form", ev.sweep_of],
            [
                "points",
                f"{s.sweep.f_hz.size} from {format_value(s.sweep.f_hz[0], 'hz')} to "
                f"{format_value(s.sweep.f_hz[-1], 'hz')}",
            ],
            ["noise (1 σ)", chk.noise_source],
            ["trusted", trusted],
            ["covers the band", "yes" if chk.covers_band else "no"],
        ]
        for key, label, unit in (
            ("max_gain_error_db", "largest |error| + 2σ, gain", "dB"),
            ("max_phase_error_deg", "largest |error| + 2σ, phase", "deg"),
        ):
            v = chk.figures.get(key)
            if v is not None:
                rows.append([label, f"{v:.3g} {unit}" if np.isfinite(v) else "not shown (band not covered)"])
        out.append(("Evidence: bench sweep", ["item", "value"], rows))
        if s.fit is not None:
            fit = s.fit
            rows = []
            for v in fit.values:
                if v.determined:
                    rows.append(
                        [
                            v.name,
                            value_text(v.drawn, v.kind, 4),
                            f"{value_text(v.fitted, v.kind, 3)} ± {100 * v.ci95_fraction:.2g} %",
                            f"{100 * v.change:+.1f} %",
                            "changed" if v.significant else "as drawn",
                        ]
                    )
                else:
                    rows.append([v.name, value_text(v.drawn, v.kind, 4), "not determined alone", "—", "—"])
            out.append(
                (
                    f"Evidence: fitted values ({fit.model}, 95 % intervals, χ²/dof {fit.chi2_dof:.3g})",
                    ["value", "drawn", "measured", "change", "reading"],
                    rows,
                )
            )
            rows = [
                [
                    c.name,
                    value_text(c.drawn, c.kind, 4),
                    value_text(c.fitted, c.kind, 4),
                    f"{c.chi2_dof:.3g}",
                    "yes" if c.explains else "no",
                ]
                for c in fit.singles
            ]
            out.append(
                (
                    "Evidence: single changes that could explain the sweep",
                    ["value", "drawn", "fitted alone", "χ²/dof", "explains it"],
                    rows,
                )
            )
    if ev.log is not None:
        lg = ev.log
        rows = []
        for r in lg.replays:
            f = r.figures
            if not f["n"]:
                rows.append([r.name, "—", "—", "—", "0"])
                continue
            rows.append(
                [
                    r.name,
                    f"{f['offset']:.4g} ({100 * (f['offset_rel'] or 0):.3g} %)",
                    f"{f['rms']:.4g} ({100 * (f['rms_rel'] or 0):.3g} %)",
                    f"{f['peak']:.4g} ({100 * (f['peak_rel'] or 0):.3g} %)",
                    f"{f['n']:,}",
                ]
            )
        out.append(
            (
                f"Evidence: plant log {lg.path.name} replayed ({lg.rows:,} rows, input {lg.input_kind}, "
                f"{lg.saturated_rows:,} with the output at a limit (left out where the form is at it too), {lg.gap_count} gaps, {lg.missing_rows} with a missing cell)",
                ["form", "offset (of range)", "RMS about it", "peak about it", "rows used"],
                rows,
            )
        )
        if lg.fit is not None:
            rows = [[n, f"{lg.fit.values[n]:.6g}", f"± {lg.fit.ci95[n]:.3g}"] for n in lg.fit.names]
            out.append(
                (
                    f"Evidence: {lg.fit.form} parameters fitted from the log (95 % intervals)",
                    ["parameter", "value", "interval"],
                    rows,
                )
            )
    return out
