"""The frequency-response comparison core, used by every conversion and by the report.

All frequencies are in Hz. Gain errors are in dB (candidate relative to reference, positive
when the candidate is larger); phase errors in degrees (candidate minus reference, wrapped to
(−180°, 180°]).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

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
        return (f"the band spans {decades:.3g} decades; the limit is {MAX_BAND_DECADES} decades (give a band a few "
                "decades around the controller's corners)")
    return None


def log_grid(f_low_hz: float, f_high_hz: float, points_per_decade: int = 100) -> np.ndarray:
    """Logarithmically spaced frequencies from ``f_low_hz`` to ``f_high_hz`` inclusive (Hz)."""
    if not (f_low_hz > 0 and f_high_hz > f_low_hz and np.isfinite(f_high_hz)):
        raise InputError(f"a band needs 0 < low < high, found {f_low_hz!r} .. {f_high_hz!r}", key="band")
    decades = np.log10(f_high_hz / f_low_hz)
    n = max(int(np.ceil(decades * points_per_decade)) + 1, 2)
    return np.logspace(np.log10(f_low_hz), np.log10(f_high_hz), n)


def hold_and_delay_factor(f_hz: np.ndarray, sample_period_s: float, delay_s: float = 0.0,
                          hold: str = "zoh") -> np.ndarray:
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


def response_seen_from_loop(controller: Controller, f_hz: Sequence[float], *, delay_s: float = 0.0,
                            hold: str = "zoh", via: str = "poly") -> np.ndarray:
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
    ``phase_limit_deg`` (``None`` when they agree over the whole band).
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


def compare_responses(reference: np.ndarray, candidate: np.ndarray, f_hz: Sequence[float], *,
                      gain_limit_db: float = 1.0, phase_limit_deg: float = 5.0) -> ResponseError:
    """Errors of ``candidate`` against ``reference`` (complex arrays over ``f_hz``).

    Signed errors: gain in dB (20·log10|cand/ref|), phase in degrees (angle of cand/ref,
    unwrapped along frequency: :func:`unwrapped_phase_error_deg`).
    """
    f = np.asarray(f_hz, dtype=float)
    ref = np.asarray(reference, dtype=complex)
    cand = np.asarray(candidate, dtype=complex)
    if ref.shape != f.shape or cand.shape != f.shape:
        raise ValueError("reference, candidate and f_hz must have the same shape")
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = cand / ref
        gain_err = 20 * np.log10(np.abs(ratio))
    phase_err = unwrapped_phase_error_deg(ratio)
    abs_gain = np.abs(np.nan_to_num(gain_err, nan=np.inf, posinf=np.inf, neginf=np.inf))
    abs_phase = np.abs(np.nan_to_num(phase_err, nan=180.0))
    ig = int(np.argmax(abs_gain))
    ip = int(np.argmax(abs_phase))
    exceed = np.flatnonzero((abs_gain > gain_limit_db) | (abs_phase > phase_limit_deg))
    limit = float(f[exceed[0]]) if exceed.size else None
    return ResponseError(
        f_hz=f,
        gain_error_db=gain_err,
        phase_error_deg=phase_err,
        max_gain_error_db=float(abs_gain[ig]),
        max_gain_error_at_hz=float(f[ig]),
        max_phase_error_deg=float(abs_phase[ip]),
        max_phase_error_at_hz=float(f[ip]),
        gain_limit_db=gain_limit_db,
        phase_limit_deg=phase_limit_deg,
        agreement_limit_hz=limit,
    )


def compare_controllers(reference: Controller, candidate: Controller, f_hz: Sequence[float], *,
                        delay_s: float = 0.0, hold: str = "zoh", gain_limit_db: float = 1.0,
                        phase_limit_deg: float = 5.0, via: str = "poly") -> ResponseError:
    """Compare two controllers as the analog loop sees them (digital ones with hold and delay)."""
    ref = response_seen_from_loop(reference, f_hz, hold=hold, via=via)
    cand = response_seen_from_loop(candidate, f_hz, delay_s=delay_s, hold=hold, via=via)
    return compare_responses(ref, cand, f_hz, gain_limit_db=gain_limit_db, phase_limit_deg=phase_limit_deg)


# ---------------------------------------------------------------------------------------------
# For the analog <-> digital conversions: delay in seconds or samples,
# the default band, and analog and digital responses on one grid.

def delay_in_seconds(*, delay_s: float | None = None, delay_samples: float | None = None,
                     fs_hz: float | None = None) -> float:
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


def comparison_grid(band_hz: tuple[float, float], fs_hz: float | None = None,
                    points_per_decade: int = 100) -> np.ndarray:
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


def responses_on_grid(analog: Controller, digital: Controller, f_hz: Sequence[float], *, delay_s: float = 0.0,
                      hold: str = "zoh", digital_response: np.ndarray | None = None,
                      via: str = "poly") -> GridResponses:
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
