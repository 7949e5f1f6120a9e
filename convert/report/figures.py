"""Figures of a report, drawn with matplotlib's Agg canvas (no GUI, no pyplot state).

Each function takes plain data from :class:`convert.compare.evaluate.CaseResults` and returns
PNG bytes. Frequencies on the axes in Hz, gains in dB, phases in degrees, times in seconds.
"""

from __future__ import annotations

import io

import numpy as np
from convert.compare.frequency import response_seen_from_loop, unwrapped_phase_error_deg
from convert.compare.evaluate import firmware_output_limits
from convert.circuit.schematic import Schematic
from convert.report.schematic import schematic_png
from convert import sidework

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
    """Frequencies (Hz) for the Bode figure: the band with a factor of 3 either side, widened to
    take in the source loop's sensitivity peak, and stopped below the lowest Nyquist frequency
    of the digital forms (their response above it is not defined)."""
    lo, hi = results.case.criteria.band_hz
    f_lo, f_hi = lo / 3, hi * 3
    m = results.source_margins
    if m is not None and m.sensitivity_peak_hz:
        f_hi = max(f_hi, 2 * m.sensitivity_peak_hz)
    nyquist = [
        0.5 * c.fs_hz for c in [results.reference] + [r.controller for r in results.realizations] if c.is_digital
    ]
    if nyquist:
        f_hi = min(f_hi, 0.98 * min(nyquist))
    f_hi = max(f_hi, hi)
    return np.logspace(np.log10(f_lo), np.log10(f_hi), 300)


def bode(results) -> bytes:
    """Bode overlay of the source and every realization as the loop sees them, plus the error
    of each against the source (gain error dB, phase error deg); the band is shaded."""
    f = display_grid(results)

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
        ax[1].semilogx(
            f,
            np.degrees(np.unwrap(np.angle(np.nan_to_num(resp, nan=1.0)))) * np.where(np.isnan(resp), np.nan, 1),
            style,
            color=color,
            lw=2 if i == 0 else 1.3,
        )
        if i:
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio = resp / ref
            ax[2].semilogx(f, 20 * np.log10(np.abs(ratio)), color=color, lw=1.3, label=name)
            ax[3].semilogx(f, unwrapped_phase_error_deg(ratio), color=color, lw=1.3)
    crit = results.case.criteria
    for i, (name, resp, r) in enumerate(curves):  # noqa: B007
        if r is None or r.band is None:
            continue
        _error_envelope(ax[2], ax[3], r.band, results.reference, COLORS[i % len(COLORS)], (lo, hi), (f[0], f[-1]))
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
    ax[2].legend(fontsize=8, loc="best")
    for a in ax:
        a.set_xlim(f[0], f[-1])
    ax[0].set_title(bode_title(results))
    return _png(fig)


def _error_envelope(gain_ax, phase_ax, band: dict, reference, color: str, band_hz, f_range) -> None:
    """A circuit's Monte Carlo envelope on the error panels (within ``f_range``, Hz): the
    0.5–99.5 % band of its error against the source, and over the band the figure the verdict
    uses (p99 of each draw's largest |error|, dash-dot)."""
    keep = (band["f_hz"] >= f_range[0] / 1.05) & (band["f_hz"] <= f_range[1] * 1.05)
    band = {
        **band,
        "f_hz": band["f_hz"][keep],
        "gain_db": band["gain_db"][:, keep],
        "phase_deg": band["phase_deg"][:, keep],
        "nominal_phase_deg": band["nominal_phase_deg"][keep],
    }
    f = band["f_hz"]
    if f.size < 2:
        return
    ref = response_seen_from_loop(reference, f, via="zpk")
    ref_db = 20 * np.log10(np.abs(ref))
    ref_deg = np.degrees(np.unwrap(np.angle(ref)))
    ref_deg += 360 * np.round((band["nominal_phase_deg"][0] - ref_deg[0]) / 360)
    lo_q, hi_q = band["percentiles"]
    total = band.get("total")
    gain_ax.fill_between(
        f,
        band["gain_db"][0] - ref_db,
        band["gain_db"][1] - ref_db,
        color=color,
        alpha=0.18,
        lw=0,
        label=f"Monte Carlo {lo_q:g}–{hi_q:g} %",
    )
    phase_ax.fill_between(
        f, band["phase_deg"][0] - ref_deg, band["phase_deg"][1] - ref_deg, color=color, alpha=0.18, lw=0
    )
    if total is not None:
        for a, v in ((gain_ax, total.max_gain_error_db), (phase_ax, total.max_phase_error_deg)):
            if v is not None and np.isfinite(v):
                a.hlines(
                    [v, -v],
                    band_hz[0],
                    band_hz[1],
                    color=color,
                    lw=1.2,
                    ls="-.",
                    label="p99 of per-draw max (the verdict's figure)" if a is gain_ax else None,
                )


def monte_carlo(results, realization) -> bytes:
    """Percentile band (0.5 / 99.5 %) of a circuit's gain and phase across the draws, with the
    source and the nominal circuit (top two panels), and the same band as error against the
    source with the case's limits and the figure the verdict uses (bottom two panels)."""
    band = realization.band
    f = band["f_hz"]
    fig, ax = _figure(8.0, 9.0, 4, 1, sharex=True)
    ax = ax[:, 0]

    ref = response_seen_from_loop(results.reference, f, via="zpk")
    ref_db = 20 * np.log10(np.abs(ref))
    ref_deg = np.degrees(np.unwrap(np.angle(ref)))
    lo_q, hi_q = band["percentiles"]
    label = f"{lo_q:g}–{hi_q:g} % of draws"
    # the phase band sits on the nominal's unwrapped branch; put the source on the same branch
    ref_deg += 360 * np.round((band["nominal_phase_deg"][0] - ref_deg[0]) / 360)
    ax[0].fill_between(f, band["gain_db"][0], band["gain_db"][1], color="#f5b7b1", label=label)
    ax[0].semilogx(f, ref_db, color=COLORS[0], lw=2, label="source")
    ax[0].semilogx(f, band["nominal_gain_db"], "--", color="#333", lw=1, label="rounded parts")
    ax[1].fill_between(f, band["phase_deg"][0], band["phase_deg"][1], color="#f5b7b1")
    ax[1].semilogx(f, ref_deg, color=COLORS[0], lw=2)
    ax[1].semilogx(f, band["nominal_phase_deg"], "--", color="#333", lw=1)
    crit = results.case.criteria
    total = band.get("total")
    for row, (lo_e, hi_e, nom_e, limit, unit, fig_value) in enumerate(
        (
            (
                band["gain_db"][0] - ref_db,
                band["gain_db"][1] - ref_db,
                band["nominal_gain_db"] - ref_db,
                crit.max_gain_error_db,
                "dB",
                None if total is None else total.max_gain_error_db,
            ),
            (
                band["phase_deg"][0] - ref_deg,
                band["phase_deg"][1] - ref_deg,
                band["nominal_phase_deg"] - ref_deg,
                crit.max_phase_error_deg,
                "deg",
                None if total is None else total.max_phase_error_deg,
            ),
        )
    ):
        a = ax[2 + row]
        a.fill_between(f, lo_e, hi_e, color="#f5b7b1", label=label)
        a.semilogx(f, nom_e, "--", color="#333", lw=1, label="rounded parts")
        _limits_and_figure(a, crit.band_hz, limit, fig_value, unit)
    for a in ax:
        a.axvspan(*crit.band_hz, color="#d6eaf8", alpha=0.5, lw=0)
        a.grid(True, which="both", alpha=0.3)
        a.set_xlim(f[0], f[-1])
    ax[0].set_ylabel("gain (dB)")
    ax[1].set_ylabel("phase (deg)")
    ax[2].set_ylabel("gain error (dB)")
    ax[3].set_ylabel("phase error (deg)")
    ax[3].set_xlabel("frequency (Hz)  —  shaded: the band of the criteria; dotted: limits")
    ax[0].legend(fontsize=8)
    ax[2].legend(fontsize=7, loc="lower left")
    ax[0].set_title(
        f"Monte Carlo: {band['draws']} draws ({band.get('distribution', 'uniform')}), seed {band['seed']}"
        "; errors against the source"
    )
    return _png(fig)


def _limits_and_figure(a, band_hz, limit, value, unit) -> None:
    """Dotted ±limit lines and, over the band, the Monte Carlo figure the verdict uses (the p99 of
    each draw's largest |error|) as a solid line."""
    if limit is not None:
        for s in (-1, 1):
            a.axhline(s * limit, color="#555", ls=":", lw=1)
    if value is not None and np.isfinite(value):
        a.hlines(
            [value, -value],
            band_hz[0],
            band_hz[1],
            color=COLORS[1],
            lw=1.4,
            label=f"p99 of per-draw max: ±{value:.3g} {unit}",
        )


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
    sig = results.case.signals
    ax[0, 0].axhline(sig.setpoint_step, color="#555", ls=":", lw=1, label="setpoint")
    ax[0, 1].axhline(0.0, color="#555", ls=":", lw=1)

    limits = [
        firmware_output_limits(results.case, results.source.extra.get("output_limits"))
        if results.case.digital
        else None,
        sig.output_range,
    ]
    for lim in limits:
        if lim:
            for a in ax[1]:
                for v in lim:
                    if np.isfinite(v):
                        a.axhline(v, color="#a04000", ls=":", lw=1)
    ax[0, 0].set_title(f"setpoint step of {sig.setpoint_step:g}")
    ax[0, 1].set_title(f"load step of {sig.disturbance_step:g} at the plant input")
    ax[0, 0].set_ylabel("measurement (plant output units)")
    ax[0, 1].set_ylabel("measurement deviation")
    ax[1, 0].set_ylabel("controller output (deviation)")
    for a in ax[1]:
        a.set_xlabel("time (s)")
    for a in ax.ravel():
        a.grid(True, alpha=0.3)
    ax[0, 0].legend(fontsize=8, loc="lower right")
    if any(limits):
        ax[1, 0].text(
            0.98,
            0.02,
            "dotted: output limits",
            transform=ax[1, 0].transAxes,
            ha="right",
            va="bottom",
            fontsize=7,
            color="#a04000",
        )
    return _png(fig)


def _zoom_near_one(points: np.ndarray) -> float | None:
    """Half-width of a window around z = 1 holding every point, when they all crowd there
    (a slow controller at a fast rate); None when the whole unit circle reads well."""
    pts = points[np.isfinite(points)]
    if pts.size == 0:
        return None
    reach = float(np.max(np.abs(pts - 1.0)))
    return None if reach > 0.2 else max(reach * 1.3, 1e-6)


def pole_zero(results) -> bytes:
    """The pole-zero figure (:func:`pole_zero_figure`) as PNG bytes."""
    return _png(pole_zero_figure(results))


def pole_zero_figure(results):
    """Pole-zero maps: analog forms in the s-plane (rad/s, symmetric-log real axis when the
    corners span decades), digital forms in the z-plane (zoomed near z = 1 when they crowd there).
    A plane that no form lives in gets no panel (a circuit-only case has no z-plane)."""
    from matplotlib.ticker import MaxNLocator

    forms = [("source", results.reference)] + [(r.name, r.controller) for r in results.realizations]
    planes = [p for p in ("s", "z") if any(c.is_digital == (p == "z") for _, c in forms)]
    fig, ax = _figure(9.5 if len(planes) == 2 else 5.6, 4.4, 1, len(planes))
    fig.subplots_adjust(bottom=0.14, top=0.9, left=0.1 if len(planes) == 2 else 0.16)
    axes = dict(zip(planes, ax[0]))
    s_ax, z_ax = axes.get("s"), axes.get("z")
    s_points, z_points = [], []
    for i, (name, c) in enumerate(forms):
        color = COLORS[i % len(COLORS)]
        target = z_ax if c.is_digital else s_ax
        z, p = c.zeros(), c.poles()
        (z_points if c.is_digital else s_points).extend(list(z) + list(p))
        target.plot(z.real, z.imag, "o", mfc="none", color=color, ms=8, label=f"{name} zeros")
        target.plot(p.real, p.imag, "x", color=color, ms=8, label=f"{name} poles")
    if z_ax is not None:
        theta = np.linspace(0, 2 * np.pi, 2000)
        z_ax.plot(np.cos(theta), np.sin(theta), color="#999", lw=0.8)
        z_ax.axhline(0, color="#999", lw=0.8)
        zoom = _zoom_near_one(np.asarray(z_points, dtype=complex))
        if zoom is not None:
            z_ax.set_xlim(1 - zoom, 1 + 0.3 * zoom)
            z_ax.set_ylim(-0.65 * zoom, 0.65 * zoom)
            z_ax.set_title("z-plane, zoomed near z = 1")
            z_ax.xaxis.set_major_locator(MaxNLocator(4))
            z_ax.text(
                0.98,
                0.02,
                f"window ±{zoom:.2g} around z = 1",
                transform=z_ax.transAxes,
                ha="right",
                va="bottom",
                fontsize=7,
                color="#555",
            )
        else:
            z_ax.set_aspect("equal", adjustable="datalim")
            z_ax.set_title("z-plane (circle: |z| = 1)")
        z_ax.set_xlabel("real")
        z_ax.set_ylabel("imaginary")
    if s_ax is not None:
        s_ax.axvline(0, color="#999", lw=0.8)
        s_ax.axhline(0, color="#999", lw=0.8)
        s_ax.set_title("s-plane (rad/s)")
        s_real = np.array([abs(v.real) for v in s_points if v.real != 0 and np.isfinite(v.real)])
        if s_real.size and s_real.max() / s_real.min() > 100:
            s_ax.set_xscale("symlog", linthresh=float(s_real.min()) / 2)
            s_ax.set_xlabel("real (rad/s, symmetric log scale)")
        else:
            s_ax.set_xlabel("real (rad/s)")
        s_ax.set_ylabel("imaginary (rad/s)")
    for a in axes.values():
        a.grid(True, alpha=0.3)
        handles, _ = a.get_legend_handles_labels()
        if handles:
            a.legend(fontsize=7, loc="upper left")
        else:  # a form with no finite roots (a pure gain) still owns its plane
            a.text(0.5, 0.5, "no finite poles or zeros", transform=a.transAxes, ha="center", color="#777")
    return fig


def bode_title(results) -> str:
    """The Bode figure's title: it claims a hold and a delay only where a digital form has them."""
    digital = results.reference.is_digital or any(r.controller.is_digital for r in results.realizations)
    if digital:
        return "Controller as the loop sees it (hold and delay included): source and new forms"
    return "Controller frequency response (every form analog): source and new forms"


def all_figures(results) -> dict[str, bytes]:
    """name -> PNG bytes for every figure the results call for. The figures are drawn on two
    cores where a helper process is available (:mod:`convert.sidework`): the same drawing code on
    the same results, so the PNG files are byte for byte those drawn on one core."""
    jobs = [("bode.png", bode, (results,), 2.0 + 0.5 * len(results.realizations))]
    for r in results.realizations:
        if r.band is not None:
            jobs.append((f"montecarlo-{_slug(r.name)}.png", monte_carlo, (results, r), 3.0))
    if results.source_step is not None:
        jobs.append(("loop.png", loop_responses, (results,), 1.5 + 0.1 * len(results.realizations)))
    jobs.append(("polezero.png", pole_zero, (results,), 1.0))
    out = draw_figures(jobs)
    for r in results.realizations:
        if "schematic.png" in r.files:
            out[schematic_figure_name(r)] = _schematic_bytes(r.files["schematic.png"])
    return out


def schematic_figure_name(realization) -> str:
    """The figure name of a realization's schematic (``schematic-<name>.png``)."""
    return f"schematic-{_slug(realization.name)}.png"


def _schematic_bytes(content) -> bytes:
    """PNG bytes of a schematic: drawn here from the computation's description."""
    return schematic_png(content) if isinstance(content, Schematic) else content


def draw_figures(jobs) -> dict[str, bytes]:
    """Draw ``jobs`` = [(name, function, args, weight)] (each function returns PNG bytes) and
    return name -> bytes in the order of ``jobs``: the heaviest jobs, up to about half the total
    weight, in a helper process while this one draws the rest."""
    if len(jobs) < 2 or not sidework.helpers_usable():
        return {name: fn(*args) for name, fn, args, _ in jobs}
    import matplotlib.backends.backend_agg  # noqa: F401  (imported once, before the fork, for both)
    import matplotlib.figure  # noqa: F401

    total = sum(w for *_, w in jobs)
    aside, weight = [], 0.0
    for i in sorted(range(len(jobs)), key=lambda i: -jobs[i][3]):
        if weight + jobs[i][3] <= 0.5 * total or not aside:
            aside.append(i)
            weight += jobs[i][3]
    pending = sidework.start(_draw, [jobs[i] for i in aside])
    try:
        here = {i: jobs[i][1](*jobs[i][2]) for i in range(len(jobs)) if i not in aside}
    except BaseException:
        pending.discard()
        raise
    here.update(zip(aside, pending.result()))
    return {jobs[i][0]: here[i] for i in range(len(jobs))}


def _draw(jobs) -> list[bytes]:
    return [fn(*args) for _, fn, args, _ in jobs]


def _slug(text: str) -> str:
    import re

    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")
