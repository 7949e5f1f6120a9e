"""The figures of a report: what each one draws, taken from the results, and who draws it.

Each ``*_data`` function takes :class:`convert.compare.evaluate.CaseResults` and returns the
plain data (numpy arrays, numbers, strings) a drawing function of :mod:`convert.report.canvas`
turns into PNG bytes; :func:`figure_jobs` pairs them. Keeping the two apart lets the drawing
run in a process started before the results exist (:class:`convert.report.canvas.Painter`). Frequencies in Hz, gains
in dB, phases in degrees, times in seconds.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from convert.compare.frequency import response_seen_from_loop, unwrapped_phase_error_deg
from convert.compare.evaluate import firmware_output_limits
from convert.circuit.schematic import Schematic
from convert.report import canvas
from convert.report.canvas import COLORS
from convert.report.schematic import schematic_png


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


def bode_data(results) -> dict:
    """What the Bode figure draws (:func:`convert.report.canvas.draw_bode`): the source and every
    realization as the loop sees them on :func:`display_grid`, each one's error against the
    source, and the Monte Carlo error envelope of circuit forms."""
    f = display_grid(results)
    ref = response_seen_from_loop(results.reference, f, via="zpk")
    lo, hi = results.case.criteria.band_hz
    curves = [("source", ref, None, None)]
    envelopes = []
    for i, r in enumerate(results.realizations, start=1):
        resp = r.seen(f)
        if r.form == "digital":
            resp = np.where(f < 0.5 * r.controller.fs_hz, resp, np.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = resp / ref
        curves.append((r.name, resp, ratio, unwrapped_phase_error_deg(ratio)))
        if r.band is not None:
            env = _error_envelope_data(r.band, results.reference, COLORS[i % len(COLORS)], (f[0], f[-1]))
            if env is not None:
                envelopes.append(env)
    crit = results.case.criteria
    return {
        "f_hz": f,
        "band_hz": (lo, hi),
        "curves": curves,
        "envelopes": envelopes,
        "max_gain_error_db": crit.max_gain_error_db,
        "max_phase_error_deg": crit.max_phase_error_deg,
        "title": bode_title(results),
    }


def _source_on_band(reference, band: dict) -> tuple[np.ndarray, np.ndarray]:
    """The source's gain (dB) and phase (deg) on a Monte Carlo band's grid, its phase on the
    nominal circuit's unwrapped branch (the branch the band's phase sits on)."""
    f = band["f_hz"]
    ref = response_seen_from_loop(reference, f, via="zpk")
    ref_db = 20 * np.log10(np.abs(ref))
    ref_deg = np.degrees(np.unwrap(np.angle(ref)))
    ref_deg += 360 * np.round((band["nominal_phase_deg"][0] - ref_deg[0]) / 360)
    return ref_db, ref_deg


def _total(band: dict) -> tuple[float | None, float | None]:
    total = band.get("total")
    return (None, None) if total is None else (total.max_gain_error_db, total.max_phase_error_deg)


def _error_envelope_data(band: dict, reference, color: str, f_range) -> dict | None:
    """A circuit's Monte Carlo envelope on the Bode error panels (within ``f_range``, Hz): the
    percentile band of its error against the source, and the p99 figure the verdict uses."""
    keep = (band["f_hz"] >= f_range[0] / 1.05) & (band["f_hz"] <= f_range[1] * 1.05)
    band = {
        **band,
        "f_hz": band["f_hz"][keep],
        "gain_db": band["gain_db"][:, keep],
        "phase_deg": band["phase_deg"][:, keep],
        "nominal_phase_deg": band["nominal_phase_deg"][keep],
    }
    if band["f_hz"].size < 2:
        return None
    ref_db, ref_deg = _source_on_band(reference, band)
    gain, phase = _total(band)
    return {
        "f_hz": band["f_hz"],
        "color": color,
        "percentiles": band["percentiles"],
        "gain_db": (band["gain_db"][0] - ref_db, band["gain_db"][1] - ref_db),
        "phase_deg": (band["phase_deg"][0] - ref_deg, band["phase_deg"][1] - ref_deg),
        "total_gain_db": gain,
        "total_phase_deg": phase,
    }


def monte_carlo_data(results, realization) -> dict:
    """What the Monte Carlo figure of a circuit draws (:func:`convert.report.canvas.draw_monte_carlo`)."""
    band = realization.band
    ref_db, ref_deg = _source_on_band(results.reference, band)
    lo_q, hi_q = band["percentiles"]
    crit = results.case.criteria
    gain, phase = _total(band)
    return {
        "f_hz": band["f_hz"],
        "gain_db": band["gain_db"],
        "phase_deg": band["phase_deg"],
        "nominal_gain_db": band["nominal_gain_db"],
        "nominal_phase_deg": band["nominal_phase_deg"],
        "ref_db": ref_db,
        "ref_deg": ref_deg,
        "label": f"{lo_q:g}–{hi_q:g} % of draws",
        "band_hz": crit.band_hz,
        "max_gain_error_db": crit.max_gain_error_db,
        "max_phase_error_deg": crit.max_phase_error_deg,
        "total_gain_db": gain,
        "total_phase_deg": phase,
        "title": f"Monte Carlo: {band['draws']} draws ({band.get('distribution', 'uniform')}), seed {band['seed']}"
        "; errors against the source",
    }


def loop_data(results) -> dict:
    """What the closed-loop figure draws (:func:`convert.report.canvas.draw_loop`): every form's
    setpoint-step and load-step responses, thinned to at most about 1,500 points each for the
    eye, and the output limits."""
    series = [("source", results.source_step, results.source_disturbance)]
    series += [(r.name, r.step, r.disturbance) for r in results.realizations]

    def thin(resp):
        if resp is None:
            return None
        every = max(1, resp.t.size // 1500)  # enough points for the eye, far fewer to draw
        return resp.t[::every], resp.y[::every], resp.u[::every]

    sig = results.case.signals
    limits = [
        firmware_output_limits(results.case, results.source.extra.get("output_limits"))
        if results.case.digital
        else None,
        sig.output_range,
    ]
    return {
        "series": [(name, thin(step), thin(dist)) for name, step, dist in series],
        "setpoint_step": sig.setpoint_step,
        "disturbance_step": sig.disturbance_step,
        "limits": [tuple(lim) if lim else lim for lim in limits],
    }


def pole_zero_data(results) -> dict:
    """What the pole-zero figure draws (:func:`convert.report.canvas.draw_pole_zero`): each
    form's zeros and poles (rad/s for analog forms, z for digital ones)."""
    forms = [("source", results.reference)] + [(r.name, r.controller) for r in results.realizations]
    return {"forms": [(name, c.is_digital, c.zeros(), c.poles()) for name, c in forms]}


def pole_zero_figure(results):
    """The pole-zero figure of ``results`` as a matplotlib Figure (see :func:`canvas.pole_zero_figure`)."""
    return canvas.pole_zero_figure(pole_zero_data(results))


def bode_title(results) -> str:
    """The Bode figure's title: it claims a hold and a delay only where a digital form has them."""
    digital = results.reference.is_digital or any(r.controller.is_digital for r in results.realizations)
    if digital:
        return "Controller as the loop sees it (hold and delay included): source and new forms"
    return "Controller frequency response (every form analog): source and new forms"


def figure_jobs(results) -> list[tuple[str, Callable, Any, float]]:
    """Every figure the results call for, as ``(name, draw function, its plain data, weight)``:
    the data computed here; the drawing (a module-level function of :mod:`convert.report.canvas`
    or :func:`convert.report.schematic.schematic_png`) may run in another process. ``weight`` is a
    rough relative drawing cost (1 is about 0.1 s of CPU
    time, measured on the demo cases), to share the drawing between two processes."""
    jobs: list[tuple[str, Callable, Any, float]] = [
        ("bode.png", canvas.draw_bode, bode_data(results), 2.0 + 0.15 * len(results.realizations))
    ]
    for r in results.realizations:
        if r.band is not None:
            jobs.append((f"montecarlo-{_slug(r.name)}.png", canvas.draw_monte_carlo, monte_carlo_data(results, r), 2.6))
    if results.source_step is not None:
        jobs.append(("loop.png", canvas.draw_loop, loop_data(results), 1.4))
    jobs.append(("polezero.png", canvas.draw_pole_zero, pole_zero_data(results), 1.0))
    for r in results.realizations:
        content = r.files.get("schematic.png")
        if content is not None:  # described by the computation (drawn here) or PNG bytes made elsewhere
            drawn = isinstance(content, Schematic)
            jobs.append((schematic_figure_name(r), schematic_png if drawn else _as_is, content, 0.8 if drawn else 0.0))
    return jobs


def _as_is(png: bytes) -> bytes:
    return png


def schematic_figure_name(realization) -> str:
    """The figure name of a realization's schematic (``schematic-<name>.png``)."""
    return f"schematic-{_slug(realization.name)}.png"


def _slug(text: str) -> str:
    import re

    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")
