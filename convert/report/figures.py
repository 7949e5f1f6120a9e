"""Figures of a report, drawn with matplotlib's Agg canvas (no GUI, no pyplot state).

Each function takes plain data from :class:`convert.compare.evaluate.CaseResults` and returns
PNG bytes. Frequencies on the axes in Hz, gains in dB, phases in degrees, times in seconds.
"""

from __future__ import annotations

import io

import numpy as np

COLORS = ("#1b4f72", "#c0392b", "#229954", "#b9770e", "#7d3c98", "#117a65", "#839192", "#a04000")


def _figure(width: float, height: float, rows: int = 1, cols: int = 1, **kw):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=90)
    axes = fig.subplots(rows, cols, squeeze=False, **kw)
    # fixed margins: an automatic layout engine costs more than everything else in a report
    fig.subplots_adjust(left=0.1, right=0.97, bottom=0.08, top=0.94, hspace=0.3, wspace=0.28)
    return fig, axes


def _png(fig) -> bytes:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def display_grid(results) -> np.ndarray:
    lo, hi = results.case.criteria.band_hz
    fmax = hi * 30
    for r in results.realizations:
        if r.form == "digital":
            fmax = max(fmax, 0.0)
    return np.logspace(np.log10(lo / 30), np.log10(fmax), 300)


def bode(results) -> bytes:
    """Bode overlay of the source and every realization as the loop sees them, plus the error
    of each against the source (gain error dB, phase error deg); the band is shaded."""
    f = display_grid(results)
    from convert.compare.frequency import response_seen_from_loop

    ref = response_seen_from_loop(results.reference, f, via="zpk")
    fig, ax = _figure(8.0, 9.0, 4, 1, sharex=True)
    ax = ax[:, 0]
    lo, hi = results.case.criteria.band_hz
    curves = [("source", ref, None)]
    for r in results.realizations:
        resp = r.seen(f)
        if r.form == "digital":
            resp = np.where(f < 0.5 * r.controller.fs_hz, resp, np.nan)
        curves.append((r.name, resp, r))
    for i, (name, resp, _) in enumerate(curves):
        color = COLORS[i % len(COLORS)]
        style = "-" if i == 0 else "--"
        ax[0].semilogx(f, 20 * np.log10(np.abs(resp)), style, color=color, label=name, lw=2 if i == 0 else 1.3)
        ax[1].semilogx(f, np.degrees(np.unwrap(np.angle(np.nan_to_num(resp, nan=1.0)))) * np.where(np.isnan(resp), np.nan, 1),
                       style, color=color, lw=2 if i == 0 else 1.3)
        if i:
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio = resp / ref
            ax[2].semilogx(f, 20 * np.log10(np.abs(ratio)), color=color, lw=1.3, label=name)
            ax[3].semilogx(f, np.degrees(np.angle(ratio)), color=color, lw=1.3)
    crit = results.case.criteria
    for a in ax:
        a.axvspan(lo, hi, color="#d6eaf8", alpha=0.5, lw=0)
        a.grid(True, which="both", alpha=0.3)
    if crit.max_gain_error_db is not None:
        for s in (-1, 1):
            ax[2].axhline(s * crit.max_gain_error_db, color="#555", ls=":", lw=1)
    if crit.max_phase_error_deg is not None:
        for s in (-1, 1):
            ax[3].axhline(s * crit.max_phase_error_deg, color="#555", ls=":", lw=1)
    ax[0].set_ylabel("gain (dB)")
    ax[1].set_ylabel("phase (deg)")
    ax[2].set_ylabel("gain error (dB)")
    ax[3].set_ylabel("phase error (deg)")
    ax[3].set_xlabel("frequency (Hz)  —  shaded: the band of the criteria")
    ax[0].legend(fontsize=8, loc="best")
    ax[0].set_title("Controller as the loop sees it: source and new forms")
    return _png(fig)


def monte_carlo(results, realization) -> bytes:
    """Percentile band (0.5 / 50 / 99.5 %) of a circuit's gain and phase across the draws,
    with the source and the nominal circuit."""
    band = realization.band
    f = band["f_hz"]
    fig, ax = _figure(8.0, 6.0, 2, 1, sharex=True)
    ax = ax[:, 0]
    from convert.compare.frequency import response_seen_from_loop

    ref = response_seen_from_loop(results.reference, f, via="zpk")
    nominal = realization.seen(f)
    ax[0].fill_between(f, band["gain_db"][0], band["gain_db"][2], color="#f5b7b1", label="0.5–99.5 % of draws")
    ax[0].semilogx(f, band["gain_db"][1], color=COLORS[1], lw=1, label="median")
    ax[0].semilogx(f, 20 * np.log10(np.abs(ref)), color=COLORS[0], lw=2, label="source")
    ax[0].semilogx(f, 20 * np.log10(np.abs(nominal)), "--", color="#333", lw=1, label="nominal parts")
    ax[1].fill_between(f, band["phase_deg"][0], band["phase_deg"][2], color="#f5b7b1")
    ax[1].semilogx(f, band["phase_deg"][1], color=COLORS[1], lw=1)
    ax[1].semilogx(f, np.degrees(np.angle(ref)), color=COLORS[0], lw=2)
    ax[1].semilogx(f, np.degrees(np.angle(nominal)), "--", color="#333", lw=1)
    for a in ax:
        a.grid(True, which="both", alpha=0.3)
    ax[0].set_ylabel("gain (dB)")
    ax[1].set_ylabel("phase (deg)")
    ax[1].set_xlabel("frequency (Hz)")
    ax[0].legend(fontsize=8)
    ax[0].set_title(f"Monte Carlo: {band['draws']} draws, seed {band['seed']}")
    return _png(fig)


def loop_responses(results) -> bytes:
    """Closed-loop setpoint-step and load-disturbance responses of every form, overlaid."""
    fig, ax = _figure(8.0, 7.0, 2, 2, sharex="col")
    series = [("source", results.source_step, results.source_disturbance)]
    series += [(r.name, r.step, r.disturbance) for r in results.realizations]
    for i, (name, step, dist) in enumerate(series):
        color = COLORS[i % len(COLORS)]
        style = "-" if i == 0 else "--"
        for col, resp in enumerate((step, dist)):
            if resp is None:
                continue
            every = max(1, resp.t.size // 1500)  # enough points for the eye, far fewer to draw
            t, y, u = resp.t[::every], resp.y[::every], resp.u[::every]
            ax[0, col].plot(t, y, style, color=color, lw=2 if i == 0 else 1.2, label=name)
            ax[1, col].step(t, u, style, where="post", color=color, lw=2 if i == 0 else 1.2)
    ax[0, 0].set_title("setpoint step")
    ax[0, 1].set_title("load disturbance at the plant input")
    ax[0, 0].set_ylabel("measurement")
    ax[1, 0].set_ylabel("controller output")
    for a in ax[1]:
        a.set_xlabel("time (s)")
    for a in ax.ravel():
        a.grid(True, alpha=0.3)
    ax[0, 0].legend(fontsize=8)
    return _png(fig)


def pole_zero(results) -> bytes:
    """Pole-zero maps: analog forms in the s-plane (rad/s), digital forms in the z-plane."""
    fig, ax = _figure(9.0, 4.2, 1, 2)
    s_ax, z_ax = ax[0, 0], ax[0, 1]
    forms = [("source", results.reference)] + [(r.name, r.controller) for r in results.realizations]
    for i, (name, c) in enumerate(forms):
        color = COLORS[i % len(COLORS)]
        target = z_ax if c.is_digital else s_ax
        z, p = c.zeros(), c.poles()
        target.plot(z.real, z.imag, "o", mfc="none", color=color, ms=8, label=f"{name} zeros")
        target.plot(p.real, p.imag, "x", color=color, ms=8, label=f"{name} poles")
    theta = np.linspace(0, 2 * np.pi, 400)
    z_ax.plot(np.cos(theta), np.sin(theta), color="#999", lw=0.8)
    z_ax.set_aspect("equal", adjustable="datalim")
    s_ax.axvline(0, color="#999", lw=0.8)
    s_ax.axhline(0, color="#999", lw=0.8)
    z_ax.axhline(0, color="#999", lw=0.8)
    s_ax.set_title("s-plane (rad/s)")
    z_ax.set_title("z-plane")
    s_ax.set_xlabel("real")
    s_ax.set_ylabel("imaginary")
    z_ax.set_xlabel("real")
    for a in (s_ax, z_ax):
        a.grid(True, alpha=0.3)
        handles, labels = a.get_legend_handles_labels()
        if handles:
            a.legend(fontsize=7, loc="best")
        else:
            a.text(0.5, 0.5, "no forms in this plane", transform=a.transAxes, ha="center", color="#777")
    return _png(fig)


def all_figures(results) -> dict[str, bytes]:
    """name -> PNG bytes for every figure the results call for."""
    out = {"bode.png": bode(results)}
    for r in results.realizations:
        if r.band is not None:
            out[f"montecarlo-{_slug(r.name)}.png"] = monte_carlo(results, r)
    if results.source_step is not None:
        out["loop.png"] = loop_responses(results)
    out["polezero.png"] = pole_zero(results)
    for r in results.realizations:
        if "schematic.png" in r.files:
            out[f"schematic-{_slug(r.name)}.png"] = r.files["schematic.png"]
    return out


def _slug(text: str) -> str:
    import re

    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")
