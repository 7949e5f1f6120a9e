"""Drawing the report's figures with matplotlib's Agg canvas, from plain data only.

Every ``draw_*`` function takes a plain dict (numpy arrays, numbers, strings: what
:mod:`convert.report.figures` computes from the results) and returns PNG bytes. This module
imports numpy and matplotlib and nothing of the computation, so a drawing process can be
started before the results exist (:class:`Painter`) and sent the data by value. Frequencies on the axes in Hz, gains in dB, phases in degrees, times in seconds.
"""

from __future__ import annotations

import io

import numpy as np

from convert import sidework

COLORS = ("#1b4f72", "#c0392b", "#229954", "#b9770e", "#7d3c98", "#117a65", "#839192", "#a04000")


def warm_up() -> None:
    """Import what drawing needs (matplotlib's figure, Agg canvas and ticker), so that the first
    figure does not pay for it."""
    import matplotlib.backends.backend_agg  # noqa: F401
    import matplotlib.figure  # noqa: F401
    import matplotlib.ticker  # noqa: F401


_HELPER_COST = 0.3  # forking a helper and sending its PNGs back, in the weight unit of the jobs (~0.1 s)


def draw_figures(jobs) -> dict[str, bytes]:
    """Draw ``jobs`` = [(name, function, data, weight)] and return name -> PNG bytes in the order
    of ``jobs``, shared by weight between a helper process and this one (heaviest first, each onto
    the side with less to draw); all here where no helper can run."""
    if len(jobs) < 2 or not sidework.helpers_usable():
        return {name: fn(data) for name, fn, data, _ in jobs}
    warm_up()  # imported once, before the fork, for both
    aside, load_aside, load_here = [], _HELPER_COST, 0.0
    for i in sorted(range(len(jobs)), key=lambda i: -jobs[i][3]):  # heaviest first, onto the lighter side
        if load_aside <= load_here:
            aside.append(i)
            load_aside += jobs[i][3]
        else:
            load_here += jobs[i][3]
    if not aside:
        return {name: fn(data) for name, fn, data, _ in jobs}
    pending = sidework.start(_draw, [jobs[i] for i in aside])
    try:
        here = {i: jobs[i][1](jobs[i][2]) for i in range(len(jobs)) if i not in aside}
    except BaseException:
        pending.discard()
        raise
    here.update(zip(aside, pending.result()))
    return {jobs[i][0]: here[i] for i in range(len(jobs))}


def _draw(jobs) -> list[bytes]:
    return [fn(data) for _, fn, data, _ in jobs]


class Painter:
    """A drawing process started before the results exist.

    ``Painter()`` forks a helper (:func:`convert.sidework.standby`) that imports matplotlib while
    this process computes; :meth:`start` then sends it the figures' plain data and it draws them,
    sharing them with a helper of its own (:func:`draw_figures`). Where no helper can run, the
    figures are drawn here when their result is asked for. Use it as a context manager, or call :meth:`close`, so the helper
    never outlives the command.
    """

    def __init__(self) -> None:
        self._standby = sidework.standby(warm_up_and_prime)

    def start(self, jobs) -> sidework.Pending:
        """Start drawing ``jobs`` (see :func:`draw_figures`); ``.result()`` gives name -> PNG bytes."""
        return self._standby.start(draw_figures, jobs)

    def close(self) -> None:
        self._standby.close()

    def __enter__(self) -> Painter:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def warm_up_and_prime() -> None:
    """:func:`warm_up`, then draw a small figure once, so that what matplotlib does only for its
    first figure (loading the font, building caches) is done before the report's figures come."""
    warm_up()
    fig, ax = _figure(2.0, 2.0)
    ax[0, 0].semilogx([1.0, 10.0], [1.0, 2.0], label="warm")
    ax[0, 0].legend(fontsize=8)
    ax[0, 0].set_title("warm")
    ax[0, 0].grid(True, which="both")
    png_of(fig)


def _figure(width: float, height: float, rows: int = 1, cols: int = 1, **kw):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=90)
    axes = fig.subplots(rows, cols, squeeze=False, **kw)
    # fixed margins: an automatic layout engine costs more than everything else in a report
    fig.subplots_adjust(left=0.1, right=0.97, bottom=0.08, top=0.94, hspace=0.3, wspace=0.28)
    return fig, axes


def png_of(fig) -> bytes:
    """``fig`` rendered to PNG bytes by the Agg canvas."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def unwrapped_deg(resp: np.ndarray) -> np.ndarray:
    """Phase (deg) of ``resp`` unwrapped along the array; NaN where ``resp`` is NaN."""
    return np.degrees(np.unwrap(np.angle(np.nan_to_num(resp, nan=1.0)))) * np.where(np.isnan(resp), np.nan, 1)


def _limit_lines(a, limit) -> None:
    if limit is not None:
        for s in (-1, 1):
            a.axhline(s * limit, color="#555", ls=":", lw=1)


def draw_bode(d: dict) -> bytes:
    """Bode overlay: ``d["curves"]`` = [(name, complex response, error ratio to the source or
    None)], gain/phase/error panels, the band shaded, ``d["envelopes"]`` the Monte Carlo error
    bands of circuit forms (see :func:`_error_envelope`)."""
    f = d["f_hz"]
    fig, ax = _figure(8.0, 9.0, 4, 1, sharex=True)
    ax = ax[:, 0]
    lo, hi = d["band_hz"]
    for i, (name, resp, ratio, phase_error) in enumerate(d["curves"]):
        color = COLORS[i % len(COLORS)]
        style = "-" if i == 0 else "--"
        ax[0].semilogx(f, 20 * np.log10(np.abs(resp)), style, color=color, label=name, lw=2 if i == 0 else 1.3)
        ax[1].semilogx(f, unwrapped_deg(resp), style, color=color, lw=2 if i == 0 else 1.3)
        if i:
            ax[2].semilogx(f, 20 * np.log10(np.abs(ratio)), color=color, lw=1.3, label=name)
            ax[3].semilogx(f, phase_error, color=color, lw=1.3)
    for env in d["envelopes"]:
        _error_envelope(ax[2], ax[3], env, (lo, hi))
    for a in ax:
        a.axvspan(lo, hi, color="#d6eaf8", alpha=0.5, lw=0)
        a.grid(True, which="both", alpha=0.3)
    _limit_lines(ax[2], d["max_gain_error_db"])
    _limit_lines(ax[3], d["max_phase_error_deg"])
    ax[0].set_ylabel("gain (dB)")
    ax[1].set_ylabel("phase (deg)")
    ax[2].set_ylabel("gain error (dB)")
    ax[3].set_ylabel("phase error (deg)")
    ax[3].set_xlabel("frequency (Hz)  —  shaded: the band of the criteria")
    ax[0].legend(fontsize=8, loc="best")
    ax[2].legend(fontsize=8, loc="best")
    for a in ax:
        a.set_xlim(f[0], f[-1])
    ax[0].set_title(d["title"])
    return png_of(fig)


def _error_envelope(gain_ax, phase_ax, env: dict, band_hz) -> None:
    """A circuit's Monte Carlo envelope on the error panels: the percentile band of its error
    against the source (``env["gain_db"]``/``["phase_deg"]`` rows low, high; already relative to
    the source) and over the band the figure the verdict uses (p99 of each draw's largest
    |error|, dash-dot)."""
    f, color = env["f_hz"], env["color"]
    lo_q, hi_q = env["percentiles"]
    gain_ax.fill_between(
        f, env["gain_db"][0], env["gain_db"][1], color=color, alpha=0.18, lw=0, label=f"Monte Carlo {lo_q:g}–{hi_q:g} %"
    )
    phase_ax.fill_between(f, env["phase_deg"][0], env["phase_deg"][1], color=color, alpha=0.18, lw=0)
    for a, v in ((gain_ax, env["total_gain_db"]), (phase_ax, env["total_phase_deg"])):
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


def draw_monte_carlo(d: dict) -> bytes:
    """Percentile band of a circuit's gain and phase across the draws, with the source and the
    nominal circuit (top two panels), and the same band as error against the source with the
    case's limits and the figure the verdict uses (bottom two panels)."""
    f = d["f_hz"]
    fig, ax = _figure(8.0, 9.0, 4, 1, sharex=True)
    ax = ax[:, 0]
    ref_db, ref_deg = d["ref_db"], d["ref_deg"]
    label = d["label"]
    ax[0].fill_between(f, d["gain_db"][0], d["gain_db"][1], color="#f5b7b1", label=label)
    ax[0].semilogx(f, ref_db, color=COLORS[0], lw=2, label="source")
    ax[0].semilogx(f, d["nominal_gain_db"], "--", color="#333", lw=1, label="rounded parts")
    ax[1].fill_between(f, d["phase_deg"][0], d["phase_deg"][1], color="#f5b7b1")
    ax[1].semilogx(f, ref_deg, color=COLORS[0], lw=2)
    ax[1].semilogx(f, d["nominal_phase_deg"], "--", color="#333", lw=1)
    for row, (lo_e, hi_e, nom_e, limit, unit, fig_value) in enumerate(
        (
            (
                d["gain_db"][0] - ref_db,
                d["gain_db"][1] - ref_db,
                d["nominal_gain_db"] - ref_db,
                d["max_gain_error_db"],
                "dB",
                d["total_gain_db"],
            ),
            (
                d["phase_deg"][0] - ref_deg,
                d["phase_deg"][1] - ref_deg,
                d["nominal_phase_deg"] - ref_deg,
                d["max_phase_error_deg"],
                "deg",
                d["total_phase_deg"],
            ),
        )
    ):
        a = ax[2 + row]
        a.fill_between(f, lo_e, hi_e, color="#f5b7b1", label=label)
        a.semilogx(f, nom_e, "--", color="#333", lw=1, label="rounded parts")
        _limits_and_figure(a, d["band_hz"], limit, fig_value, unit)
    for a in ax:
        a.axvspan(*d["band_hz"], color="#d6eaf8", alpha=0.5, lw=0)
        a.grid(True, which="both", alpha=0.3)
        a.set_xlim(f[0], f[-1])
    ax[0].set_ylabel("gain (dB)")
    ax[1].set_ylabel("phase (deg)")
    ax[2].set_ylabel("gain error (dB)")
    ax[3].set_ylabel("phase error (deg)")
    ax[3].set_xlabel("frequency (Hz)  —  shaded: the band of the criteria; dotted: limits")
    ax[0].legend(fontsize=8)
    ax[2].legend(fontsize=7, loc="lower left")
    ax[0].set_title(d["title"])
    return png_of(fig)


def _limits_and_figure(a, band_hz, limit, value, unit) -> None:
    """Dotted ±limit lines and, over the band, the Monte Carlo figure the verdict uses (the p99 of
    each draw's largest |error|) as a solid line."""
    _limit_lines(a, limit)
    if value is not None and np.isfinite(value):
        a.hlines(
            [value, -value],
            band_hz[0],
            band_hz[1],
            color=COLORS[1],
            lw=1.4,
            label=f"p99 of per-draw max: ±{value:.3g} {unit}",
        )


def draw_loop(d: dict) -> bytes:
    """Closed-loop setpoint-step and load-disturbance responses of every form, overlaid:
    ``d["series"]`` = [(name, step (t, y, u) or None, disturbance (t, y, u) or None)]."""
    fig, ax = _figure(8.0, 7.0, 2, 2, sharex="col")
    for i, (name, step, dist) in enumerate(d["series"]):
        color = COLORS[i % len(COLORS)]
        style = "-" if i == 0 else "--"
        for col, resp in enumerate((step, dist)):
            if resp is None:
                continue
            t, y, u = resp
            ax[0, col].plot(t, y, style, color=color, lw=2 if i == 0 else 1.2, label=name)
            ax[1, col].step(t, u, style, where="post", color=color, lw=2 if i == 0 else 1.2)
    ax[0, 0].axhline(d["setpoint_step"], color="#555", ls=":", lw=1, label="setpoint")
    ax[0, 1].axhline(0.0, color="#555", ls=":", lw=1)
    limits = d["limits"]
    for lim in limits:
        if lim:
            for a in ax[1]:
                for v in lim:
                    if np.isfinite(v):
                        a.axhline(v, color="#a04000", ls=":", lw=1)
    ax[0, 0].set_title(f"setpoint step of {d['setpoint_step']:g}")
    ax[0, 1].set_title(f"load step of {d['disturbance_step']:g} at the plant input")
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
    return png_of(fig)


def _zoom_near_one(points: np.ndarray) -> float | None:
    """Half-width of a window around z = 1 holding every point, when they all crowd there
    (a slow controller at a fast rate); None when the whole unit circle reads well."""
    pts = points[np.isfinite(points)]
    if pts.size == 0:
        return None
    reach = float(np.max(np.abs(pts - 1.0)))
    return None if reach > 0.2 else max(reach * 1.3, 1e-6)


def draw_pole_zero(d: dict) -> bytes:
    """The pole-zero figure (:func:`pole_zero_figure`) as PNG bytes."""
    return png_of(pole_zero_figure(d))


def pole_zero_figure(d: dict):
    """Pole-zero maps of ``d["forms"]`` = [(name, is_digital, zeros, poles)]: analog forms in the
    s-plane (rad/s, symmetric-log real axis when the corners span decades), digital forms in the
    z-plane (zoomed near z = 1 when they crowd there). A plane that no form lives in gets no
    panel (a circuit-only case has no z-plane)."""
    from matplotlib.ticker import MaxNLocator

    forms = d["forms"]
    planes = [p for p in ("s", "z") if any(digital == (p == "z") for _, digital, _, _ in forms)]
    fig, ax = _figure(9.5 if len(planes) == 2 else 5.6, 4.4, 1, len(planes))
    fig.subplots_adjust(bottom=0.14, top=0.9, left=0.1 if len(planes) == 2 else 0.16)
    axes = dict(zip(planes, ax[0]))
    s_ax, z_ax = axes.get("s"), axes.get("z")
    s_points, z_points = [], []
    for i, (name, digital, z, p) in enumerate(forms):
        color = COLORS[i % len(COLORS)]
        target = z_ax if digital else s_ax
        (z_points if digital else s_points).extend(list(z) + list(p))
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


def draw_sweep(d: dict) -> bytes:
    """The bench sweep (points, ±2σ error bars) over every form's model, and below the measured
    error against the measured form's model; grey points are not trusted."""
    f = d["f_hz"]
    fig, ax = _figure(8.0, 9.0, 4, 1, sharex=True)
    ax = ax[:, 0]
    for i, (name, resp) in enumerate(d["overlays"]):
        color = COLORS[i % len(COLORS)]
        ax[0].semilogx(
            f, 20 * np.log10(np.abs(resp)), "-" if i == 0 else "--", color=color, lw=1.6 if i == 0 else 1.1, label=name
        )
        ax[1].semilogx(f, unwrapped_deg(resp), "-" if i == 0 else "--", color=color, lw=1.6 if i == 0 else 1.1)
    meas, trusted = d["measured"], d["trusted"]
    for mask, color, label in ((trusted, "#000000", d["measured_label"]), (~trusted, "#aab7b8", "not trusted")):
        if mask.any():
            ax[0].plot(f[mask], 20 * np.log10(np.abs(meas[mask])), "o", ms=3.5, color=color, label=label)
            ax[1].plot(f[mask], np.degrees(np.unwrap(np.angle(meas)))[mask], "o", ms=3.5, color=color)
            ax[2].errorbar(
                f[mask], d["gain_error_db"][mask], yerr=2 * d["noise_db"][mask], fmt="o", ms=3, color=color, lw=0.8
            )
            ax[3].errorbar(
                f[mask], d["phase_error_deg"][mask], yerr=2 * d["noise_deg"][mask], fmt="o", ms=3, color=color, lw=0.8
            )
    lo, hi = d["band_hz"]
    for a in ax:
        a.axvspan(lo, hi, color="#d6eaf8", alpha=0.5, lw=0)
        a.grid(True, which="both", alpha=0.3)
    for a, lim in ((ax[2], d["max_gain_error_db"]), (ax[3], d["max_phase_error_deg"])):
        a.axhline(0, color="#555", lw=0.8)
        _limit_lines(a, lim)
    ax[0].set_ylabel("gain (dB)")
    ax[1].set_ylabel("phase (deg)")
    ax[2].set_ylabel("measured − model\ngain (dB)")
    ax[3].set_ylabel("measured − model\nphase (deg)")
    ax[3].set_xlabel("frequency (Hz)")
    ax[0].legend(fontsize=7, loc="best")
    ax[0].set_title(d["title"])
    return png_of(fig)


def draw_log(d: dict) -> bytes:
    """The logged controller output and its replay through every form (``d["replayed"]`` =
    [(name, replayed output, offset)]), each shifted by its offset; below, the residual."""
    t, out = d["t"], d["output"]
    fig, ax = _figure(8.0, 6.5, 2, 1, sharex=True)
    ax = ax[:, 0]
    ax[0].plot(t, out, "-", color="#000000", lw=1.4, label="logged output")
    for i, (name, y, off) in enumerate(d["replayed"]):
        color = COLORS[i % len(COLORS)]
        ax[0].plot(t, y + off, "--", color=color, lw=1.0, label=f"replayed: {name} + its offset {off:.4g}")
        ax[1].plot(t, out - y - off, "-", color=color, lw=0.9, label=name)
    for a in ax:
        a.grid(True, alpha=0.3)
    ax[0].set_ylabel("controller output")
    ax[1].set_ylabel("logged − replayed\n− offset")
    ax[1].set_xlabel("time (s)")
    ax[0].legend(fontsize=7, loc="best")
    ax[0].set_title(d["title"])
    return png_of(fig)
