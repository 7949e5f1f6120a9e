"""The frequency-response comparison core, used by every conversion and by the report.

All frequencies are in Hz. Gain errors are in dB (candidate relative to reference, positive
when the candidate is larger); phase errors in degrees (candidate minus reference, wrapped to
(−180°, 180°]).
"""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Sequence

import numpy as np

from convert.compare.refine import maximize_in_brackets, maximize_rows
from convert.controller import Controller
from convert.errors import InputError


#: Widest band a comparison accepts, in decades. A controller's corners, its band and its sample
#: rate sit within a few decades of one another; twelve leave room for any of them, and beyond
#: that powers of s (or the float32 Monte Carlo arithmetic) overflow and the grid grows for nothing.
MAX_BAND_DECADES = 12


def band_width_problem(low_hz: float, high_hz: float) -> str | None:
    """Why the band (Hz) is too wide, or None. One rule for the CLI's --band and case files."""
    decades = float(np.log10(high_hz / low_hz))
    if decades > MAX_BAND_DECADES:
        return (
            f"the band spans {decades:.3g} decades; the limit is {MAX_BAND_DECADES} decades (give a band a few "
            "decades around the controller's corners)"
        )
    return None


def log_grid(f_low_hz: float, f_high_hz: float, points_per_decade: int = 100) -> np.ndarray:
    """Logarithmically spaced frequencies from ``f_low_hz`` to ``f_high_hz`` inclusive (Hz)."""
    if not (f_low_hz > 0 and f_high_hz > f_low_hz and np.isfinite(f_high_hz)):
        raise InputError(f"a band needs 0 < low < high, found {f_low_hz!r} .. {f_high_hz!r}", key="band")
    decades = np.log10(f_high_hz / f_low_hz)
    n = max(int(np.ceil(decades * points_per_decade)) + 1, 2)
    return np.logspace(np.log10(f_low_hz), np.log10(f_high_hz), n)


def hold_and_delay_factor(
    f_hz: np.ndarray, sample_period_s: float, delay_s: float = 0.0, hold: str = "zoh"
) -> np.ndarray:
    """Frequency response of the output hold plus a computation delay, as seen from the analog side.

    The zero-order hold's describing response is ``(1 − e^{−jωT}) / (jωT) = e^{−jωT/2} · sinc(fT)``
    (its fundamental component; common practice for sampled-data loop analysis). ``hold="none"``
    leaves the hold out (only the delay is applied). ``delay_s`` is the computation delay in
    seconds between sampling and the output update.
    """
    f = np.asarray(f_hz, dtype=float)
    w = 2 * np.pi * f
    factor = np.exp(-1j * w * delay_s)
    if hold == "zoh":
        factor = factor * np.exp(-1j * w * sample_period_s / 2) * np.sinc(f * sample_period_s)
    elif hold != "none":
        raise InputError(f"unknown hold {hold!r}; expected 'zoh' or 'none'", key="hold")
    return factor


def response_seen_from_loop(
    controller: Controller, f_hz: Sequence[float], *, delay_s: float = 0.0, hold: str = "zoh", via: str = "poly"
) -> np.ndarray:
    """The controller's response as the analog loop sees it.

    Analog controllers: plain C(jω) (and the delay, if any). Digital controllers:
    C(e^{jωT}) times the zero-order hold and the computation delay (see
    :func:`hold_and_delay_factor`).
    """
    f = np.asarray(f_hz, dtype=float)
    resp = controller.frequency_response(f, via=via)
    if controller.is_digital:
        return resp * hold_and_delay_factor(f, controller.sample_period_s, delay_s, hold)
    if delay_s:
        resp = resp * np.exp(-2j * np.pi * f * delay_s)
    return resp


@dataclass(frozen=True)
class ResponseError:
    """How far a candidate response is from a reference over a band.

    ``gain_error_db`` and ``phase_error_deg`` are arrays over ``f_hz``. The maxima are of the
    absolute values; the ``*_at_hz`` fields give where they occur. ``agreement_limit_hz`` is the
    first frequency where the gain error exceeds ``gain_limit_db`` or the phase error exceeds
    ``phase_limit_deg`` (``None`` when they agree over the whole band), free of the grid when
    the continuous responses were given (:func:`agreement_limit`), else the first grid point.
    """

    f_hz: np.ndarray
    gain_error_db: np.ndarray
    phase_error_deg: np.ndarray
    max_gain_error_db: float
    max_gain_error_at_hz: float
    max_phase_error_deg: float
    max_phase_error_at_hz: float
    gain_limit_db: float
    phase_limit_deg: float
    agreement_limit_hz: float | None
    unbounded_note: str = ""

    def summary(self) -> dict:
        """Plain numbers for JSON and tables."""
        return {
            "band_hz": [float(self.f_hz[0]), float(self.f_hz[-1])],
            "max_gain_error_db": self.max_gain_error_db,
            "max_gain_error_at_hz": self.max_gain_error_at_hz,
            "max_phase_error_deg": self.max_phase_error_deg,
            "max_phase_error_at_hz": self.max_phase_error_at_hz,
            "agreement_limit_hz": self.agreement_limit_hz,
            "agreement_thresholds": {"gain_db": self.gain_limit_db, "phase_deg": self.phase_limit_deg},
            "unbounded_note": self.unbounded_note,
        }


def unwrapped_phase_error_deg(ratio: np.ndarray) -> np.ndarray:
    """Phase (degrees) of ``ratio`` = candidate/reference, unwrapped along the last (frequency)
    axis from the first finite point, so an error that grows past ±180° (a hold and delay near
    Nyquist) is reported in full instead of wrapping back toward 0. Non-finite points stay NaN."""
    ang = np.angle(np.asarray(ratio, dtype=complex))
    ok = np.isfinite(ang)
    if ok.all():
        return np.degrees(np.unwrap(ang, axis=-1))
    out = np.full(ang.shape, np.nan)
    for idx in np.ndindex(ang.shape[:-1]):
        row, good = ang[idx], ok[idx]
        if good.any():
            out[idx + (good,)] = np.unwrap(row[good])
    return np.degrees(out)


def compare_responses(
    reference: np.ndarray,
    candidate: np.ndarray,
    f_hz: Sequence[float],
    *,
    gain_limit_db: float = 1.0,
    phase_limit_deg: float = 5.0,
    evaluate=None,
    forms: tuple[Controller | None, Controller | None] | None = None,
) -> ResponseError:
    """Errors of ``candidate`` against ``reference`` (complex arrays over ``f_hz``).

    Signed errors: gain in dB (20·log10|cand/ref|), phase in degrees (angle of cand/ref,
    unwrapped along frequency: :func:`unwrapped_phase_error_deg`, piecewise across roots on the
    axis: :func:`phase_error_across`).

    The maxima do not depend on the grid when the continuous responses are given:
    ``evaluate(f) -> (reference, candidate)`` refines every local maximum and the agreement limit
    (:func:`compare_batch`, one row), and ``forms`` = (reference controller, candidate controller)
    (either may be None) finds zeros and poles on the jω axis / unit circle inside the band, where
    the error is unbounded: both maxima are then +∞ at that frequency with ``unbounded_note``.
    """
    f = np.asarray(f_hz, dtype=float)
    ref = np.asarray(reference, dtype=complex)
    cand = np.asarray(candidate, dtype=complex)
    if ref.shape != f.shape or cand.shape != f.shape:
        raise ValueError("reference, candidate and f_hz must have the same shape")
    if evaluate is None and forms is None:
        return compare_on_grid(ref, cand[None, :], f, gain_limit_db=gain_limit_db, phase_limit_deg=phase_limit_deg)[0]
    if evaluate is None:
        return _compare_forms_on_grid(ref, cand, f, forms, gain_limit_db, phase_limit_deg)

    def ratio_at(x, _rows):
        r, c = evaluate(np.asarray(x, dtype=float).reshape(-1))
        with np.errstate(divide="ignore", invalid="ignore"):
            return (np.asarray(c, complex) / np.asarray(r, complex)).reshape(np.shape(x))

    return compare_batch(
        ref,
        cand[None, :],
        f,
        ratio_at=ratio_at,
        forms=[forms or (None, None)],
        gain_limit_db=gain_limit_db,
        phase_limit_deg=phase_limit_deg,
    )[0]


def _compare_forms_on_grid(ref, cand, f, forms, gain_limit_db, phase_limit_deg) -> ResponseError:
    """:func:`compare_responses` with ``forms`` but no continuous responses: roots on the axis
    are found (unbounded errors, the phase unwrapped across roots), the maxima and the agreement
    limit are the grid's."""
    unbounded, look = axis_roots(*forms, float(f[0]), float(f[-1]))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = cand / ref
        gain_err = 20 * np.log10(np.abs(ratio))
    phase_err = phase_error_across(ratio, f, look)
    abs_gain, abs_phase = _absolute_errors(gain_err, phase_err)
    limit = _agreement_limits(f, abs_gain, abs_phase, gain_limit_db, phase_limit_deg)[0]
    if unbounded:
        peak = _unbounded_maxima(unbounded)
        if limit is None or limit > unbounded[0].f_hz:
            limit = unbounded[0].f_hz
    else:
        ig, ip = int(np.argmax(abs_gain)), int(np.argmax(abs_phase))
        peak = {
            "gain": (float(abs_gain[ig]), float(f[ig])),
            "phase": (float(abs_phase[ip]), float(f[ip])),
            "unbounded_note": "",
        }
    return _response_error(f, gain_err, phase_err, peak, limit, gain_limit_db, phase_limit_deg)


def _response_error(f, gain_err, phase_err, peak, limit, gain_limit_db, phase_limit_deg) -> ResponseError:
    return ResponseError(
        f_hz=f,
        gain_error_db=gain_err,
        phase_error_deg=phase_err,
        max_gain_error_db=float(peak["gain"][0]),
        max_gain_error_at_hz=float(peak["gain"][1]),
        max_phase_error_deg=float(peak["phase"][0]),
        max_phase_error_at_hz=float(peak["phase"][1]),
        gain_limit_db=gain_limit_db,
        phase_limit_deg=phase_limit_deg,
        agreement_limit_hz=limit,
        unbounded_note=peak["unbounded_note"],
    )


def compare_batch(
    reference: np.ndarray,
    candidates: np.ndarray,
    f_hz: Sequence[float],
    *,
    ratio_at,
    forms: Sequence[tuple[Controller | None, Controller | None]] | None = None,
    gain_limit_db: float = 1.0,
    phase_limit_deg: float = 5.0,
) -> list[ResponseError]:
    """:func:`compare_responses` of each row of ``candidates`` (2-D complex, rows × ``f_hz``)
    against one ``reference`` (complex over ``f_hz``), free of the grid, every row's searches
    done in the same rounds (so a survey of many forms costs a few numpy calls a round, not a few
    per form). ``ratio_at(x, rows)`` is the continuous candidate/reference ratio: ``x`` a 2-D
    array of frequencies (Hz), ``rows`` (one per row of ``x``) the candidate each row of ``x``
    belongs to; same shape as ``x``. ``forms``: per candidate, (reference controller, candidate
    controller), either may be None, for the roots on the axis (:func:`axis_roots`).

    Each row's result is what it would be alone: the maxima by :func:`refine_maximum`'s rule and
    the agreement limit by :func:`agreement_limit`'s, searched in groups that stop as they would
    alone (:func:`convert.compare.refine.maximize_rows`)."""
    f = np.asarray(f_hz, dtype=float)
    ref = np.asarray(reference, dtype=complex)
    cand = np.asarray(candidates, dtype=complex)
    if ref.shape != f.shape or cand.ndim != 2 or cand.shape[1] != f.size:
        raise ValueError("reference and f_hz must have the same shape, candidates one row per response over f_hz")
    k = cand.shape[0]
    forms = list(forms) if forms is not None else [(None, None)] * k
    if len(forms) != k:
        raise ValueError("forms must have one (reference, candidate) pair per candidate")
    found_roots: dict = {}
    roots = []
    for pair in forms:  # the same pair of forms (a survey's 'alone' and 'seen' rows) is looked at once
        key = (id(pair[0]), id(pair[1]))
        if key not in found_roots:
            found_roots[key] = axis_roots(*pair, float(f[0]), float(f[-1]))
        roots.append(found_roots[key])
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = cand / ref[None, :]
        gain_err = 20 * np.log10(np.abs(ratio))
    phase_err = np.stack([phase_error_across(ratio[i], f, roots[i][1]) for i in range(k)])
    abs_gain, abs_phase = _absolute_errors(gain_err, phase_err)
    errors_at = _error_functions(ratio_at, f, phase_err)
    peaks = grid_free_maxima(errors_at, f, abs_gain, abs_phase, roots)
    limits = agreement_limit(
        errors_at,
        f,
        abs_gain,
        abs_phase,
        gain_limit_db,
        phase_limit_deg,
        [(p["gain"][0], p["phase"][0]) for p in peaks],
    )
    out = []
    for i in range(k):
        unbounded, limit = roots[i][0], limits[i]
        if unbounded and (limit is None or limit > unbounded[0].f_hz):
            limit = unbounded[0].f_hz
        out.append(_response_error(f, gain_err[i], phase_err[i], peaks[i], limit, gain_limit_db, phase_limit_deg))
    return out


def compare_on_grid(
    reference: np.ndarray,
    candidates: np.ndarray,
    f_hz: Sequence[float],
    *,
    gain_limit_db: float = 1.0,
    phase_limit_deg: float = 5.0,
) -> list[ResponseError]:
    """:func:`compare_responses` of each row of ``candidates`` (2-D complex, rows × ``f_hz``)
    against one ``reference`` (complex over ``f_hz``) on the grid alone, all rows in one pass:
    no continuous responses to refine on and no forms to look for roots on the axis, so each
    maximum is the grid's largest |error| (the first on a tie) and the phase error is unwrapped
    along frequency (:func:`unwrapped_phase_error_deg`). What ``compare_responses`` returns when
    given neither ``evaluate`` nor ``forms``."""
    f = np.asarray(f_hz, dtype=float)
    ref = np.asarray(reference, dtype=complex)
    cand = np.asarray(candidates, dtype=complex)
    if ref.shape != f.shape or cand.ndim != 2 or cand.shape[1] != f.size:
        raise ValueError("reference and f_hz must have the same shape, candidates one row per response over f_hz")
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = cand / ref
        gain_err = 20 * np.log10(np.abs(ratio))
    phase_err = unwrapped_phase_error_deg(ratio)
    abs_gain, abs_phase = _absolute_errors(gain_err, phase_err)
    rows = np.arange(cand.shape[0])
    ig, ip = np.argmax(abs_gain, axis=-1), np.argmax(abs_phase, axis=-1)
    gmax, pmax = abs_gain[rows, ig], abs_phase[rows, ip]
    limits = _agreement_limits(f, abs_gain, abs_phase, gain_limit_db, phase_limit_deg)
    return [
        ResponseError(
            f_hz=f,
            gain_error_db=gain_err[k],
            phase_error_deg=phase_err[k],
            max_gain_error_db=float(gmax[k]),
            max_gain_error_at_hz=float(f[ig[k]]),
            max_phase_error_deg=float(pmax[k]),
            max_phase_error_at_hz=float(f[ip[k]]),
            gain_limit_db=gain_limit_db,
            phase_limit_deg=phase_limit_deg,
            agreement_limit_hz=limits[k],
        )
        for k in rows
    ]


def _absolute_errors(gain_db: np.ndarray, phase_deg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """|gain error| (dB) and |phase error| (deg) as the maxima and limits read them: a gain error
    that is not finite counts as +∞, a phase error that cannot be evaluated as 180°."""
    abs_gain = np.abs(np.nan_to_num(gain_db, nan=np.inf, posinf=np.inf, neginf=np.inf))
    abs_phase = np.abs(np.nan_to_num(phase_deg, nan=180.0))
    return abs_gain, abs_phase


def _agreement_limits(
    f: np.ndarray, abs_gain: np.ndarray, abs_phase: np.ndarray, gain_limit_db: float, phase_limit_deg: float
) -> list[float | None]:
    """Per row (the last axis is frequency): the first grid frequency (Hz) where either error
    exceeds its limit, or None where the row agrees over the whole grid."""
    exceed = np.atleast_2d((abs_gain > gain_limit_db) | (abs_phase > phase_limit_deg))
    first = np.argmax(exceed, axis=-1)
    return [float(f[i]) if exceed[k, i] else None for k, i in enumerate(first)]


def compare_controllers(
    reference: Controller,
    candidate: Controller,
    f_hz: Sequence[float],
    *,
    delay_s: float = 0.0,
    hold: str = "zoh",
    gain_limit_db: float = 1.0,
    phase_limit_deg: float = 5.0,
    via: str = "poly",
) -> ResponseError:
    """Compare two controllers as the analog loop sees them (digital ones with hold and delay);
    the maxima are refined on the continuous responses and roots on the axis are found
    (:func:`compare_responses`)."""

    def evaluate(f):
        return (
            response_seen_from_loop(reference, f, hold=hold, via=via),
            response_seen_from_loop(candidate, f, delay_s=delay_s, hold=hold, via=via),
        )

    ref, cand = evaluate(np.asarray(f_hz, dtype=float))
    return compare_responses(
        ref,
        cand,
        f_hz,
        gain_limit_db=gain_limit_db,
        phase_limit_deg=phase_limit_deg,
        evaluate=evaluate,
        forms=(reference, candidate),
    )


# ---------------------------------------------------------------------------------------------
# For the analog <-> digital conversions: delay in seconds or samples,
# the default band, and analog and digital responses on one grid.


#: the longest computation delay a digital form may have, in samples: a firmware's computation and
#: its fieldbus take a few periods; a longer transport delay is the loop's, given as the plant's dead
#: time (which the loop checks treat exactly at any length)
MAX_DELAY_SAMPLES = 32


def delay_problem(delay_s: float, fs_hz: float) -> str | None:
    """Why a computation delay of ``delay_s`` (s) at ``fs_hz`` (Hz) is refused, or None."""
    samples = delay_s * fs_hz
    if samples <= MAX_DELAY_SAMPLES * (1 + 1e-12):
        return None
    return (
        f"a computation delay of {delay_s:.4g} s is {samples:.4g} samples at {fs_hz:.6g} Hz, more than a firmware's "
        f"computation takes (at most {MAX_DELAY_SAMPLES} samples here); give a transport delay of the loop as "
        "the plant's dead time, or check the unit (ms, not s?)"
    )


def delay_in_seconds(
    *, delay_s: float | None = None, delay_samples: float | None = None, fs_hz: float | None = None
) -> float:
    """The computation delay in seconds, given either in seconds or in samples (× 1/fs_hz).

    Zero when neither is given. A negative delay, or both forms at once, is refused.
    """
    if delay_s is not None and delay_samples is not None:
        raise InputError("give the delay in seconds or in samples, not both", key="delay")
    if delay_samples is not None:
        if fs_hz is None or not fs_hz > 0:
            raise InputError("a delay in samples needs the sample rate (fs, Hz)", key="delay")
        value = float(delay_samples) / float(fs_hz)
    else:
        value = 0.0 if delay_s is None else float(delay_s)
    if not (np.isfinite(value) and value >= 0):
        raise InputError(f"the delay must be zero or positive, found {value!r} s", key="delay")
    if fs_hz is not None and fs_hz > 0 and (why := delay_problem(value, float(fs_hz))):
        raise InputError(why, key="delay")
    return value


def default_band_hz(controller: Controller, fs_hz: float) -> tuple[float, float]:
    """The band a digital form is judged over: a decade below the controller's lowest corner
    (zeros and poles other than s = 0; fs/1000 when it has none) up to fs/2 (Hz)."""
    corners = controller.corner_frequencies_hz()
    every = [f for f in corners.get("zeros", []) + corners.get("poles", []) if f > 0]
    high = fs_hz / 2
    low = min(every) / 10 if every else fs_hz / 1000
    if not low < high / 10:
        low = high / 100
    return float(low), float(high)


def comparison_grid(
    band_hz: tuple[float, float], fs_hz: float | None = None, points_per_decade: int = 100
) -> np.ndarray:
    """The log grid for a band; when the band reaches the Nyquist frequency fs/2, its top point is
    set a hair below it (fs/2 · 0.999) so a digital zero at z = −1 (Tustin, matched) gives a finite
    error figure instead of −∞ dB."""
    low, high = band_hz
    if fs_hz is not None and high >= fs_hz / 2:
        high = fs_hz / 2 * 0.999
    return log_grid(low, high, points_per_decade)


@dataclass(frozen=True)
class GridResponses:
    """Analog and digital forms evaluated on one grid (Hz).

    ``analog``: C(j2πf). ``digital``: C_d(e^{j2πfT}) alone (the discretization method's effect).
    ``digital_seen``: the digital form as the analog loop sees it — times the zero-order hold of
    the output and the computation delay ``delay_s`` (see :func:`hold_and_delay_factor`).
    """

    f_hz: np.ndarray
    analog: np.ndarray
    digital: np.ndarray
    digital_seen: np.ndarray
    delay_s: float


def responses_on_grid(
    analog: Controller,
    digital: Controller,
    f_hz: Sequence[float],
    *,
    delay_s: float = 0.0,
    hold: str = "zoh",
    digital_response: np.ndarray | None = None,
    via: str = "poly",
) -> GridResponses:
    """Evaluate an analog controller and a digital one on the same grid.

    ``digital_response`` may carry a more accurate evaluation of the digital form (for example
    from its directly mapped zeros and poles); otherwise the controller is evaluated ``via``.
    """
    if analog.is_digital or not digital.is_digital:
        raise InputError("responses_on_grid takes an analog controller then a digital one")
    f = np.asarray(f_hz, dtype=float)
    ana = analog.frequency_response(f, via=via)
    dig = digital.frequency_response(f, via=via) if digital_response is None else np.asarray(digital_response, complex)
    seen = dig * hold_and_delay_factor(f, digital.sample_period_s, delay_s, hold)
    return GridResponses(f, ana, dig, seen, float(delay_s))


# ---------------------------------------------------------------------------------------------
# Grid-independent maxima: refine the grid's local maxima on the continuous responses, and find
# zeros or poles on the jω axis / unit circle inside the band (where the error is unbounded).

#: Relative accuracy (in frequency) to which a local maximum of |error| is refined.
REFINE_REL = 1e-6
#: A root within this relative distance of the jω axis (|Re s| ≤ tol·|s|) or of the unit circle
#: (||z| − 1| ≤ tol), or within its own estimated rounding error, counts as on it.
ON_AXIS_REL = 1e-9
#: Two on-axis roots of the same kind (zero/zero or pole/pole), one in each form, cancel in the
#: ratio when their frequencies agree within this relative amount.
SAME_ROOT_REL = 1e-7


@dataclass(frozen=True)
class AxisRoot:
    """A zero or pole of one form at a frequency on the jω axis / unit circle (Hz)."""

    f_hz: float
    kind: str  # "zero" or "pole"
    form: str  # "reference" or "candidate"
    on_axis: bool  # False: near the axis (a resonance or a notch), only a place to look
    jump: int = 0  # half-turns the phase error steps by as f passes it (left-half-plane limit on the axis)
    damping: float = 0.0  # relative distance from the axis: |Re s|/|s|, or |ln|z||/angle

    def text(self) -> str:
        return f"a {self.kind} of the {self.form} on the jω axis at {self.f_hz:.6g} Hz"


def _root_frequencies(controller: Controller, kind: str, form: str) -> list[AxisRoot]:
    roots = controller.zero_roots() if kind == "zero" else controller.pole_roots()
    out = []
    # a zero of the candidate (or a pole of the reference) in the left half plane turns the ratio's
    # phase up by half a turn per multiplicity as f passes it; right-half-plane roots turn it down
    sign = 1 if (kind == "zero") == (form == "candidate") else -1
    for r in roots:
        v = complex(r.value)
        if controller.is_digital:
            ang = float(np.angle(v))
            if ang <= 0 or abs(v) == 0:
                continue
            f = ang / (2 * np.pi * controller.sample_period_s)
            on = abs(abs(v) - 1.0) <= max(ON_AXIS_REL, float(r.error))
            outside = abs(v) > 1.0 and not on
            damping = abs(np.log(abs(v))) / ang
        else:
            if v.imag <= 0:
                continue
            f = v.imag / (2 * np.pi)
            on = abs(v.real) <= max(ON_AXIS_REL * abs(v), float(r.error))
            outside = v.real > 0 and not on
            damping = abs(v.real) / abs(v)
        out.append(
            AxisRoot(
                float(f),
                kind,
                form,
                bool(on),
                sign * int(r.multiplicity) * (-1 if outside else 1),
                0.0 if on else float(damping),
            )
        )
    return out


def axis_roots(
    reference: Controller | None, candidate: Controller | None, f_low_hz: float, f_high_hz: float
) -> tuple[list[AxisRoot], list[AxisRoot]]:
    """Zeros and poles of either form inside the band [f_low_hz, f_high_hz] (Hz).

    Returns ``(unbounded, inside)``: the roots on the jω axis (analog) or unit circle (digital)
    that do not cancel against the same kind of root of the other form at the same frequency (the
    ratio candidate/reference, hence the error, is unbounded there), and every root with a positive
    imaginary part / angle inside the band, by frequency (places where a narrow extremum of the
    error can hide between grid points, and where the phase error turns by half a turn)."""
    every = []
    for ctrl, form in ((reference, "reference"), (candidate, "candidate")):
        if ctrl is not None:
            every += _root_frequencies(ctrl, "zero", form) + _root_frequencies(ctrl, "pole", form)
    inside = [r for r in every if f_low_hz <= r.f_hz <= f_high_hz]
    on = [r for r in inside if r.on_axis]
    left = list(on)
    for r in on:
        if r not in left:
            continue
        twin = next(
            (
                o
                for o in left
                if o.form != r.form and o.kind == r.kind and abs(o.f_hz - r.f_hz) <= SAME_ROOT_REL * r.f_hz
            ),
            None,
        )
        if twin is not None:
            left.remove(r)
            left.remove(twin)
    return sorted(left, key=lambda r: r.f_hz), sorted(inside, key=lambda r: r.f_hz)


def _local_maxima(values: np.ndarray) -> np.ndarray:
    """Indices of the grid's local maxima (endpoints included) of a finite 1-D array."""
    v = np.asarray(values, dtype=float)
    if v.size < 3:
        return np.arange(v.size)
    left = np.concatenate([[True], v[1:] >= v[:-1]])
    right = np.concatenate([v[:-1] >= v[1:], [True]])
    return np.flatnonzero(left & right)


def _maximum_brackets(f: np.ndarray, values: np.ndarray, look_at_hz: Sequence[float] = (), most: int = 40):
    """The grid's maximum of ``values`` over ``f`` (Hz) and the brackets (index pairs into ``f``)
    :func:`refine_maximum` refines: around the ``most`` largest local maxima, then the grid
    interval around each frequency in ``look_at_hz``. Returns ``(maximum, at_hz, brackets)``;
    no brackets when the grid's maximum is not finite (nothing to refine) or ``f`` has one point."""
    v = np.nan_to_num(np.asarray(values, dtype=float), nan=np.inf)
    best_i = int(np.argmax(v))
    best, at = float(v[best_i]), float(f[best_i])
    none = np.zeros((0, 2), dtype=np.intp)
    if f.size < 2 or not np.isfinite(best):
        return best, at, none
    idx = _local_maxima(v)
    idx = idx[np.argsort(-v[idx])][:most]
    brackets = [(max(i - 1, 0), min(i + 1, f.size - 1)) for i in idx]
    for fl in look_at_hz:
        j = int(np.searchsorted(f, fl))
        brackets.append((max(j - 1, 0), min(j, f.size - 1)))
    return best, at, np.array([b for b in brackets if b[1] > b[0]], dtype=np.intp).reshape(-1, 2)


def _larger(best: float, at: float, found: np.ndarray, found_at: np.ndarray) -> tuple[float, float]:
    """The grid's (maximum, at_hz) replaced by the largest refined one when that is larger."""
    if found.size:
        k = int(np.argmax(found))
        if found[k] > best:
            return float(found[k]), float(found_at[k])
    return best, at


def refine_maximum(
    value_at, f_hz: np.ndarray, values: np.ndarray, look_at_hz: Sequence[float] = (), most: int = 40
) -> tuple[float, float]:
    """The maximum of a continuous nonnegative function of frequency over [f_hz[0], f_hz[-1]]
    (Hz), independent of the grid: every local maximum of ``values`` (= ``value_at(f_hz)``, the
    ``most`` largest) and the grid interval around each frequency in ``look_at_hz`` is refined on
    ``value_at`` (a vectorized function of frequency in Hz), all brackets at once, by
    :func:`convert.compare.refine.maximize_in_brackets`: each local maximum is located to
    :data:`REFINE_REL`/2 relative in frequency (the tolerance the bounded scalar search used here
    before) or as closely as the rounding of the values allows, and the maximum returned is never
    below the grid's. Returns ``(maximum, at_hz)``."""
    f = np.asarray(f_hz, dtype=float)
    best, at, brackets = _maximum_brackets(f, values, look_at_hz, most)
    if brackets.size == 0:
        return best, at
    found, found_at = maximize_in_brackets(value_at, f[brackets[:, 0]], f[brackets[:, 1]], rel_tol=REFINE_REL / 2)
    return _larger(best, at, found, found_at)


def _wrap_to(angle_rad: np.ndarray, near_rad: np.ndarray) -> np.ndarray:
    """``angle_rad`` moved by whole turns to lie within half a turn of ``near_rad``."""
    return near_rad + np.angle(np.exp(1j * (angle_rad - near_rad)))


def phase_error_across(ratio: np.ndarray, f_hz: np.ndarray, roots: Sequence[AxisRoot] = ()) -> np.ndarray:
    """Phase error (deg) of ``ratio`` (1-D, over ``f_hz``) unwrapped along frequency, starting
    within (−180°, 180°] at the first point. Each step between neighbouring grid points is the
    smallest turn, except across ``roots`` (:func:`axis_roots`): there the step is taken nearest
    the half turns the roots make (a left-half-plane zero of the candidate turns the phase up by
    180°, one of the reference down), so a step of about ±180° at a notch is never read the wrong
    way round and a −3° error beyond a pair of notches never reads 357°."""
    f = np.asarray(f_hz, dtype=float)
    ang = np.angle(np.asarray(ratio, dtype=complex))
    ok = np.isfinite(ang)
    if not ok.all() or not len(roots) or ang.size < 2:
        return unwrapped_phase_error_deg(ratio)
    step = np.diff(ang)
    expected = np.zeros(step.size)
    for r in roots:
        i = int(np.searchsorted(f, r.f_hz)) - 1  # the step from f[i] to f[i+1] holds it
        # only a root whose half turn happens within that one step (a notch or a sharp peak)
        if 0 <= i < step.size and r.damping < 0.5 * (f[i + 1] / f[i] - 1):
            expected[i] += np.pi * r.jump
    step = expected + np.angle(np.exp(1j * (step - expected)))
    return np.degrees(np.concatenate([[ang[0]], ang[0] + np.cumsum(step)]))


def _unbounded_maxima(unbounded: Sequence[AxisRoot]) -> dict:
    """Both maxima +∞ at the first root on the axis, with the note that says why."""
    note = (
        "unbounded: "
        + "; ".join(r.text() for r in unbounded)
        + " (the ratio of the two forms goes to zero or infinity there, on any grid)"
    )
    first = unbounded[0]
    return {"gain": (np.inf, first.f_hz), "phase": (np.inf, first.f_hz), "unbounded_note": note}


def grid_free_maxima(errors_at, f_hz: np.ndarray, abs_gain: np.ndarray, abs_phase: np.ndarray, roots) -> list[dict]:
    """The one routine for max |gain error| and max |phase error| over a band, free of the grid,
    for every row of a :func:`compare_batch` at once.

    ``errors_at(x, rows) -> (|gain error| dB, |phase error| deg)`` (:func:`_error_functions`);
    ``abs_gain``/``abs_phase`` the absolute errors on the grid ``f_hz`` (rows × points); ``roots``
    per row, ``(unbounded, inside)`` of :func:`axis_roots`. With a root on the axis inside the band
    (``unbounded``) both maxima are +∞ at that root's frequency and ``unbounded_note`` says why;
    otherwise each maximum is refined by :func:`refine_maximum`'s rule, all rows' brackets in the
    same rounds. Returns per row ``{"gain": (value, at_hz), "phase": (value, at_hz),
    "unbounded_note": str}``."""
    f = np.asarray(f_hz, dtype=float)
    out: list[dict] = []
    searches = []  # (row, kind, first bracket, bracket count)
    lo, hi = [], []
    for i, (unbounded, inside) in enumerate(roots):
        if unbounded:
            out.append(_unbounded_maxima(unbounded))
            continue
        look = [r.f_hz for r in inside]
        peak = {"unbounded_note": ""}
        for kind, values in (("gain", abs_gain[i]), ("phase", abs_phase[i])):
            best, at, brackets = _maximum_brackets(f, values, look)
            peak[kind] = (best, at)
            if brackets.size:
                searches.append((i, kind, len(lo), len(brackets)))
                lo.extend(f[brackets[:, 0]])
                hi.extend(f[brackets[:, 1]])
        out.append(peak)
    if not searches:
        return out
    group = np.concatenate([np.full(n, g) for g, (_, _, _, n) in enumerate(searches)])
    row = np.array([s[0] for s in searches])[group]
    phase = np.array([s[1] == "phase" for s in searches])[group]

    def values_at(x, rows):
        g, p = errors_at(x, row[rows])
        return np.where(phase[rows][:, None], p, g)

    found, found_at = maximize_rows(values_at, lo, hi, rel_tol=REFINE_REL / 2, groups=group)
    for i, kind, start, n in searches:
        best, at = out[i][kind]
        out[i][kind] = _larger(best, at, found[start : start + n], found_at[start : start + n])
    return out


def _error_functions(ratio_at, f_hz: np.ndarray, phase_deg: np.ndarray):
    """``errors_at(x, rows) -> (|gain error| dB, |phase error| deg)``: vectorized functions of
    frequency (``x`` in Hz, 2-D, one row of ``x`` per entry of ``rows``, the candidate it belongs
    to) from ``ratio_at(x, rows)``, the continuous candidate/reference ratio; each row's phase
    error is continued from its grid's unwrapped ``phase_deg`` (rows × points; the nearest grid
    point's branch)."""
    grid_phase = np.radians(np.nan_to_num(np.atleast_2d(phase_deg), nan=0.0))
    lf = np.log(f_hz)

    def errors_at(x, rows):
        q = np.asarray(ratio_at(x, rows), dtype=complex)
        j = np.clip(np.searchsorted(lf, np.log(x)), 0, f_hz.size - 1)
        with np.errstate(divide="ignore", invalid="ignore"):
            gain = np.abs(20 * np.log10(np.abs(q)))
            phase = np.abs(np.degrees(_wrap_to(np.angle(q), grid_phase[np.asarray(rows)[:, None], j])))
        return gain, phase

    return errors_at


#: the agreement limit is located to this relative width in frequency
AGREEMENT_REL = 1e-9
#: sub-intervals a round of the search for the crossing
SPLIT = 512
#: a local maximum of the excess below the first grid point beyond the limits is located to this
#: relative width: enough to tell whether it leaves the limits (near a smooth peak the value is
#: then within about (1e-4)² of the peak's, relative to its curvature)
EXCURSION_REL = 1e-4


def agreement_limit(
    errors_at,
    f_hz: np.ndarray,
    abs_gain: np.ndarray,
    abs_phase: np.ndarray,
    gain_limit_db: float,
    phase_limit_deg: float,
    peaks: Sequence[tuple[float, float]] | None = None,
) -> list[float | None]:
    """Per row: the first frequency (Hz) in the band where |gain error| exceeds ``gain_limit_db``
    or |phase error| exceeds ``phase_limit_deg``, free of the grid (None: within both over the band).

    ``errors_at(x, rows)``: the absolute errors as continuous functions (:func:`_error_functions`);
    ``abs_gain``/``abs_phase`` the absolute errors on the grid ``f_hz`` (rows × points). The grid
    gives the first point beyond a limit; an earlier excursion between grid points is looked for
    by refining every local maximum of the excess before it
    (:func:`convert.compare.refine.maximize_rows`, to :data:`EXCURSION_REL`); the crossing is
    then bracketed by a point within the limits and one beyond and narrowed, :data:`SPLIT`
    sub-intervals a round, keeping the first sub-interval that crosses, to :data:`AGREEMENT_REL`
    relative. Returned: the bracket's upper end (a frequency where the limit is exceeded). An
    error that cannot be evaluated counts as beyond. ``peaks``: per row, the band's refined
    (max |gain error|, max |phase error|) when known: within both limits, the errors agree over
    the whole band without a further search. Every row's search runs in the same rounds."""
    f = np.asarray(f_hz, dtype=float)
    abs_gain, abs_phase = np.atleast_2d(abs_gain), np.atleast_2d(abs_phase)
    gs, ps = max(gain_limit_db, 1e-12), max(phase_limit_deg, 1e-12)
    grid = np.maximum((abs_gain - gain_limit_db) / gs, (abs_phase - phase_limit_deg) / ps)

    def excess(x, rows):
        g, p = errors_at(x, rows)
        with np.errstate(invalid="ignore"):
            e = np.maximum((g - gain_limit_db) / gs, (p - phase_limit_deg) / ps)
        return np.nan_to_num(e, nan=np.inf)

    limits: list[float | None] = [None] * grid.shape[0]
    pending = []  # (row, first grid point beyond, first excursion bracket, bracket count)
    lo, hi = [], []
    for i, row in enumerate(grid):
        beyond = np.flatnonzero(row > 0)
        first = int(beyond[0]) if beyond.size else f.size
        if first == 0:
            limits[i] = float(f[0])
            continue
        if first == f.size and peaks is not None and peaks[i][0] <= gain_limit_db and peaks[i][1] <= phase_limit_deg:
            continue
        n = 0
        if first > 1:
            idx = _local_maxima(row[:first])
            brackets = [(max(j - 1, 0), min(j + 1, first - 1)) for j in idx]
            brackets = np.array([b for b in brackets if b[1] > b[0]], dtype=np.intp).reshape(-1, 2)
            n = len(brackets)
            if n:
                lo.extend(f[brackets[:, 0]])
                hi.extend(f[brackets[:, 1]])
        pending.append((i, first, len(lo) - n, n))
    if not pending:
        return limits
    found = at = np.zeros(0)
    if lo:
        group = np.concatenate([np.full(n, g) for g, (_, _, _, n) in enumerate(pending) if n])
        owner = np.array([i for i, _, _, n in pending for _ in range(n)])
        found, at = maximize_rows(lambda x, rows: excess(x, owner[rows]), lo, hi, rel_tol=EXCURSION_REL, groups=group)
    search_rows, ulo, uhi = [], [], []
    for i, first, start, n in pending:
        bracket = None
        out = np.flatnonzero(found[start : start + n] > 0) if n else np.zeros(0, dtype=np.intp)
        if out.size:
            k = start + out[np.argmin(at[start + out])]
            bracket = (float(lo[k]), float(at[k]))
        elif first < f.size:
            bracket = (float(f[first - 1]), float(f[first]))
        if bracket is not None:
            search_rows.append(i)
            ulo.append(np.log(bracket[0]))
            uhi.append(np.log(bracket[1]))
    if not search_rows:
        return limits
    rows, ulo, uhi = np.array(search_rows), np.array(ulo), np.array(uhi)
    live = np.arange(rows.size)
    for _ in range(8):  # 512 sub-intervals a round: a grid interval below 1e-9 in three rounds
        live = live[uhi[live] - ulo[live] > AGREEMENT_REL]
        if live.size == 0:
            break
        u = np.linspace(ulo[live], uhi[live], SPLIT + 1, axis=1)
        over = excess(np.exp(u[:, 1:-1]), rows[live]) > 0
        k = np.where(over.any(axis=1), np.argmax(over, axis=1), SPLIT - 1)
        r = np.arange(live.size)
        ulo[live], uhi[live] = u[r, k], u[r, k + 1]
    for n, i in enumerate(rows):
        limits[int(i)] = float(np.exp(uhi[n]))
    return limits
