"""Always-on checks of a realization against its source, plant or no plant.

Two checks every realization (made or given: digital, circuit, analog) carries into the verdict
(:func:`convert.compare.verdict.judge`, ``checks``), whatever criteria the case sets:

* ``controller_stable`` — the realization's own poles: it may have no more poles outside the unit
  circle (digital, figure the largest |z|, limit 1) or in the right half-plane (analog, figure the
  largest real part in 1/s, shown without a limit) than the source has; designed integrators
  (poles exactly at z = 1 or s = 0) are left out of the figure. An integrator on the boundary (z = 1, s = 0) is not
  unstable; a pole just past it counts as an integrator when its output would take at least a
  year to double (|z| − 1 ≤ ln 2 / samples per year; Re p ≤ ln 2 / one year), the rule the
  firmware checks use. An unstable controller's output grows without bound once its loop is
  opened (manual mode, saturation, a broken sensor), so it fails with or without a plant.
* ``same_sign`` — same action (sign) as the source: the phase of realization / source, each on
  its own (no hold, no delay), must lie within ±90° over the whole band (unwrapped from its
  bottom, the largest refined off the grid). A sign error (firmware b negated, op-amp inputs
  swapped) gives ±180° at the bottom; a zero mirrored into the right half-plane gives the same
  gain and a phase that turns to −180° across the band. The figure is the largest |phase| in
  degrees. Such a controller drives the plant the wrong way (at those frequencies), so it fails
  even when the case sets only a gain criterion (a gain error cannot see a sign).

Frequencies in Hz; poles in the controller's own plane (s in rad/s, z).
"""

from __future__ import annotations

import math

import numpy as np

from convert.compare.frequency import compare_responses, log_grid
from convert.controller import Controller

_YEAR_S = 365.25 * 86400.0
SIGN_LIMIT_DEG = 90.0


def growth_rate(ctrl: Controller) -> tuple[float | None, float]:
    """(figure, slack): the largest |z| of a digital controller's poles, or the largest real part
    (1/s) of an analog one's, designed integrators (poles exactly at z = 1 / s = 0) apart (digital
    0.0, analog None when there is no other pole); and the margin past the boundary within which a
    pole still counts as kept (a year's doubling time)."""
    point = 1.0 if ctrl.is_digital else 0.0
    others = [r.value for r in ctrl.pole_roots() if not (r.error == 0 and r.value == point)]
    if ctrl.is_digital:
        return max((abs(p) for p in others), default=0.0), math.log(2) / (_YEAR_S * ctrl.fs_hz)
    return max((p.real for p in others), default=None), math.log(2) / _YEAR_S


def unstable_poles(ctrl: Controller) -> list[complex]:
    """Poles outside the unit circle (digital) or in the right half-plane (analog), beyond the
    boundary by more than a year's doubling time and more than the root's own accuracy, and poles
    ON the boundary other than designed integrators (z = 1 / s = 0): a pole at z = -1 or an
    undamped pair on the unit circle or the jω axis does not decay, and an input at its frequency
    makes the output grow without bound (a resonator the source also has is counted on both sides,
    so it cancels in :func:`adds_unstable_poles`)."""
    _, slack = growth_rate(ctrl)
    point = 1.0 if ctrl.is_digital else 0.0
    out = []
    for r in ctrl.pole_roots():
        tol = max(slack, r.error)
        past = abs(r.value) - 1.0 if ctrl.is_digital else r.value.real
        on_boundary = abs(past) <= tol
        integrator = on_boundary and abs(r.value - point) <= max(1e-9, 10 * r.error)
        if past > tol or (on_boundary and not integrator):
            out += [complex(r.value)] * r.multiplicity
    return out


def adds_unstable_poles(source: Controller, ctrl: Controller) -> bool:
    """True when ``ctrl`` has more unstable poles than ``source`` (see :func:`unstable_poles`)."""
    return len(unstable_poles(ctrl)) > len(unstable_poles(source))


def stability_check(source: Controller, ctrl: Controller) -> dict:
    """The ``controller_stable`` check of ``ctrl`` against ``source`` (a verdict check dict)."""
    figure, _ = growth_rate(ctrl)
    mine, theirs = unstable_poles(ctrl), unstable_poles(source)
    where = "outside the unit circle" if ctrl.is_digital else "in the right half-plane"
    if ctrl.is_digital:
        label, unit, limit = "controller stable on its own", "|z|", 1.0
        shown = ", ".join(f"z = {_c(p)} (|z| = {abs(p):.6g})" for p in mine[:3])
    else:
        # no limit to divide by: the figure is a real part (negative when stable); the count decides
        label, unit, limit = "controller stable on its own", "1/s", None
        shown = ", ".join(f"s = {_c(p)} 1/s" for p in mine[:3])
    if len(mine) > len(theirs):
        note = (
            f"the controller itself is unstable: {len(mine)} pole(s) {where} or undamped on its edge ({shown}) "
            f"where the source has "
            f"{len(theirs) or 'none'}; its output grows without bound whenever its loop is open"
        )
        status = "fail"
    else:
        figure_is = "largest |z| of its poles" if ctrl.is_digital else "largest real part of its poles"
        note = (
            f"no pole {where} or undamped on its edge; figure: {figure_is}, designed integrators apart"
            if not mine
            else f"{len(mine)} pole(s) {where}, as many as the source has"
        )
        status = "pass"
    return dict(
        key="controller_stable",
        label=label,
        unit=unit,
        limit=limit,
        value=None if figure is None else float(figure),
        status=status,
        note=note,
    )


def sign_check(source: Controller, ctrl: Controller, band_hz: tuple[float, float]) -> dict:
    """The ``same_sign`` check: the largest |phase of ctrl / source| (degrees) over the band
    ``band_hz`` (Hz), each on its own, unwrapped from the band's bottom and refined off the grid
    (:func:`convert.compare.frequency.compare_responses`), within 90°. Where a zero or pole on
    the axis inside the band leaves the phase without a bound, it is read at the band's bottom."""
    lo, hi = float(band_hz[0]), float(band_hz[1])
    base = dict(key="same_sign", label="same action (sign) as the source", unit="deg", limit=SIGN_LIMIT_DEG)
    bottom = np.array([lo])
    with np.errstate(all="ignore"):
        ratio = complex(ctrl.frequency_response(bottom, via="zpk")[0] / source.frequency_response(bottom, via="zpk")[0])
    if not (np.isfinite(ratio) and ratio != 0):
        return dict(
            base,
            value=None,
            status="skipped",
            note=f"realization / source is not a finite non-zero number at {lo:.4g} Hz",
        )
    at_bottom = (
        f"at the band's bottom ({lo:.4g} Hz): gain {20 * math.log10(abs(ratio)):+.2f} dB, "
        f"phase {math.degrees(math.atan2(ratio.imag, ratio.real)):+.1f} deg"
    )
    phase, where = abs(math.degrees(math.atan2(ratio.imag, ratio.real))), lo
    if hi > lo:

        def evaluate(f):
            return source.frequency_response(f, via="zpk"), ctrl.frequency_response(f, via="zpk")

        f = log_grid(lo, hi, 50)
        with np.errstate(all="ignore"):
            err = compare_responses(*evaluate(f), f, evaluate=evaluate, forms=(source, ctrl))
        if not err.unbounded_note and math.isfinite(err.max_phase_error_deg):
            phase, where = max((phase, where), (abs(err.max_phase_error_deg), err.max_phase_error_at_hz))
    ok = phase <= SIGN_LIMIT_DEG
    note = f"realization / source {at_bottom}; largest |phase| over the band {phase:.1f} deg at {where:.4g} Hz"
    if not ok:
        note = (
            "the realization acts against the source (sign inverted"
            + (")" if where == lo else f" at {where:.4g} Hz, inside the band)")
            + ": "
            + note
            + "; it would drive the plant the wrong way"
        )
    return dict(base, value=phase, status="pass" if ok else "fail", note=note)


def own_checks(source: Controller, ctrl: Controller, band_hz: tuple[float, float]) -> list[dict]:
    """Both always-on checks of one realization (see the module docstring); ``band_hz`` in Hz."""
    return [stability_check(source, ctrl), sign_check(source, ctrl, band_hz)]


def _c(z: complex) -> str:
    z = complex(z)
    if abs(z.imag) <= 1e-12 * max(abs(z.real), 1e-300):
        return f"{z.real:.6g}"
    return f"{z.real:.6g}{z.imag:+.6g}j"
