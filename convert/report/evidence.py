"""The report's Evidence section: the measurement overlaid on every form, the fitted values, the
log replays. Figures are drawn from :class:`convert.evidence.casework.CaseEvidence` (computed in
``compare``/``evidence``; nothing is computed here but what a figure draws)."""

from __future__ import annotations

import numpy as np

from convert.report.figures import COLORS, _figure, _png
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


def evidence_figures(results) -> dict[str, bytes]:
    ev = getattr(results, "evidence", None)
    if ev is None:
        return {}
    out = {}
    if ev.sweep is not None:
        out[SWEEP_FIGURE] = _sweep_figure(results, ev)
    if ev.log is not None and ev.log.sketch["t"].size:
        out[LOG_FIGURE] = _log_figure(ev)
    return out


def _sweep_figure(results, ev) -> bytes:
    sw, chk = ev.sweep.sweep, ev.sweep.check
    f = sw.f_hz
    fig, ax = _figure(8.0, 9.0, 4, 1, sharex=True)
    ax = ax[:, 0]
    for i, (name, resp) in enumerate(ev.overlays.items()):
        color = COLORS[i % len(COLORS)]
        ax[0].semilogx(
            f, 20 * np.log10(np.abs(resp)), "-" if i == 0 else "--", color=color, lw=1.6 if i == 0 else 1.1, label=name
        )
        ax[1].semilogx(
            f,
            np.degrees(np.unwrap(np.angle(np.nan_to_num(resp, nan=1.0)))) * np.where(np.isnan(resp), np.nan, 1),
            "-" if i == 0 else "--",
            color=color,
            lw=1.6 if i == 0 else 1.1,
        )
    meas = sw.response
    trusted = chk.trusted
    for mask, color, label in ((trusted, "#000000", f"measured ({ev.sweep_of})"), (~trusted, "#aab7b8", "not trusted")):
        if mask.any():
            ax[0].plot(f[mask], 20 * np.log10(np.abs(meas[mask])), "o", ms=3.5, color=color, label=label)
            ax[1].plot(f[mask], np.degrees(np.unwrap(np.angle(meas)))[mask], "o", ms=3.5, color=color)
            ax[2].errorbar(
                f[mask], chk.gain_error_db[mask], yerr=2 * chk.noise_db[mask], fmt="o", ms=3, color=color, lw=0.8
            )
            ax[3].errorbar(
                f[mask], chk.phase_error_deg[mask], yerr=2 * chk.noise_deg[mask], fmt="o", ms=3, color=color, lw=0.8
            )
    crit = results.case.criteria
    lo, hi = crit.band_hz
    for a in ax:
        a.axvspan(lo, hi, color="#d6eaf8", alpha=0.5, lw=0)
        a.grid(True, which="both", alpha=0.3)
    for a, lim in ((ax[2], crit.max_gain_error_db), (ax[3], crit.max_phase_error_deg)):
        a.axhline(0, color="#555", lw=0.8)
        if lim is not None:
            for s in (-1, 1):
                a.axhline(s * lim, color="#555", ls=":", lw=1)
    ax[0].set_ylabel("gain (dB)")
    ax[1].set_ylabel("phase (deg)")
    ax[2].set_ylabel("measured − model\ngain (dB)")
    ax[3].set_ylabel("measured − model\nphase (deg)")
    ax[3].set_xlabel("frequency (Hz)")
    ax[0].legend(fontsize=7, loc="best")
    ax[0].set_title(f"bench sweep {sw.path.name} against the model of the {ev.sweep_of}")
    return _png(fig)


def _log_figure(ev) -> bytes:
    sk = ev.log.sketch
    t, out = sk["t"], sk["output"]
    fig, ax = _figure(8.0, 6.5, 2, 1, sharex=True)
    ax = ax[:, 0]
    ax[0].plot(t, out, "-", color="#000000", lw=1.4, label="logged output")
    offsets = {r.name: (r.figures.get("offset") or 0.0) for r in ev.log.replays}
    for i, (name, y) in enumerate(sk["replayed"].items()):
        color = COLORS[i % len(COLORS)]
        off = offsets.get(name, 0.0)
        ax[0].plot(t, y + off, "--", color=color, lw=1.0, label=f"replayed: {name} + its offset {off:.4g}")
        ax[1].plot(t, out - y - off, "-", color=color, lw=0.9, label=name)
    for a in ax:
        a.grid(True, alpha=0.3)
    ax[0].set_ylabel("controller output")
    ax[1].set_ylabel("logged − replayed\n− offset")
    ax[1].set_xlabel("time (s)")
    ax[0].legend(fontsize=7, loc="best")
    ax[0].set_title(f"plant log {ev.log.path.name} ({ev.log.rows:,} rows)")
    return _png(fig)


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
                f"{lg.saturated_rows:,} saturated, {lg.gap_count} gaps, {lg.missing_rows} with a missing cell)",
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
