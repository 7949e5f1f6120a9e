"""Several discretization methods side by side: each method's digital form and its errors against
the analog controller over a band, with the best method picked and the reason given.

Two error figures per method (both against the analog controller, over the band in Hz; the
maxima do not depend on the grid: they are refined on the continuous responses, as the report's):

* ``method_error``: C_d(e^{jωT}) against C(jω) — what the discretization method alone changes
  (error source 1 of the budget). The best method is picked on this figure, since the output
  hold and the computation delay are the same for every method.
* ``loop_error``: C_d(e^{jωT}) × zero-order hold × computation delay against C(jω) — the digital
  controller as the analog loop sees it (error sources 1 and 2 together).

Ranking: methods that put a pole on or outside the unit circle which the analog controller did
not have are never picked; among the rest, the highest agreement limit wins (agreeing over the
whole band counts as highest), then the smallest of max(gain error / gain limit, phase error /
phase limit).
"""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Sequence

import numpy as np

from convert.compare.frequency import (
    ResponseError,
    compare_batch,
    comparison_grid,
    compare_responses,
    default_band_hz,
    hold_and_delay_factor,
)
from convert.controller import Controller
from convert.digital.derivative_filter import add_derivative_filter, derivative_filter_time_constant
from convert.digital.realization import METHODS, DigitalRealization, discretize
from convert.digital.statespace import small_dense
from convert.errors import InputError


@dataclass(frozen=True)
class MethodRow:
    realization: DigitalRealization
    method_error: ResponseError
    loop_error: ResponseError

    @property
    def unstable(self) -> bool:
        return any("unit circle" in w for w in self.realization.warnings)

    def summary(self) -> dict:
        out = self.realization.summary()
        out["method_error"] = self.method_error.summary()
        out["loop_error"] = self.loop_error.summary()
        return out


@dataclass(frozen=True)
class MethodSurvey:
    """Result of :func:`survey_methods`. ``band_hz`` is the band asked for (or the default);
    ``f_hz`` the grid used. ``filter_error`` is the derivative filter's own deviation (filtered
    analog against the improper original) when one was added, else None."""

    analog: Controller
    rows: tuple[MethodRow, ...]
    band_hz: tuple[float, float]
    f_hz: np.ndarray
    delay_s: float
    best: str | None
    best_reason: str
    filter_n: float | None = None
    filter_tau_s: float | None = None
    filter_error: ResponseError | None = None

    def row(self, method: str) -> MethodRow:
        for r in self.rows:
            if r.realization.method == method:
                return r
        raise KeyError(method)


def _score(row: MethodRow) -> tuple[float, float]:
    e = row.method_error
    limit = np.inf if e.agreement_limit_hz is None else e.agreement_limit_hz
    size = max(e.max_gain_error_db / e.gain_limit_db, e.max_phase_error_deg / e.phase_limit_deg)
    return (-limit, size)


def _reason(row: MethodRow, others: int) -> str:
    e = row.method_error
    if e.agreement_limit_hz is None:
        head = f"agrees within {e.gain_limit_db:g} dB / {e.phase_limit_deg:g} deg over the whole band" + (
            " with the smallest errors" if others else ""
        )
    else:
        head = (
            f"agrees within {e.gain_limit_db:g} dB / {e.phase_limit_deg:g} deg up to {e.agreement_limit_hz:.4g} Hz"
            + (", the highest of the methods" if others else "")
        )
    return f"{head}; max method error {e.max_gain_error_db:.3g} dB, {e.max_phase_error_deg:.3g} deg"


def _grid_free(analog, digitals, f, analog_f, hold_f, t, delay_s, limits) -> list[tuple[ResponseError, ResponseError]]:
    """Per sampled controller in ``digitals``: (method error, loop-seen error) against ``analog``,
    their maxima and agreement limits refined on the continuous responses (factored forms,
    ``via="zpk"``) and roots on the axis looked for, all methods in the same rounds
    (:func:`convert.compare.frequency.compare_batch`): each row is what
    :func:`convert.compare.frequency.compare_responses` gives for it alone, the call the
    ``discretization`` row of :func:`convert.compare.stages.digital_budget` makes, so the survey's
    method error is the report's. ``analog_f``, ``hold_f``: the analog response and the
    hold-and-delay factor on ``f`` (Hz); ``t``: sample period (s); ``delay_s``: computation delay (s).
    Candidate rows: 0..m-1 the controllers alone, m..2m-1 as the loop sees them."""
    m = len(digitals)
    digital_f = np.array([d.frequency_response(f, via="zpk") for d in digitals])
    # every method's factored form in one array (padded; a padded factor is skipped, not
    # multiplied by one), multiplied in the order Controller.frequency_response uses
    roots = [(d.zeros(), d.poles()) for d in digitals]
    gains = np.array([d.gain for d in digitals] * 2)
    zeros, zero_used = _padded([z for z, _ in roots] * 2)
    poles, pole_used = _padded([p for _, p in roots] * 2)
    seen_row = np.arange(2 * m) >= m

    def ratio_at(x, rows):
        ref = analog.frequency_response(x, via="zpk")
        w = 2.0 * np.pi * x
        z = np.exp(1j * w * t)
        cand = np.empty(x.shape, dtype=complex)
        cand[...] = gains[rows][:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            for k in range(zeros.shape[1]):
                cand = np.where(zero_used[rows, k][:, None], cand * (z - zeros[rows, k][:, None]), cand)
            for k in range(poles.shape[1]):
                cand = np.where(pole_used[rows, k][:, None], cand / (z - poles[rows, k][:, None]), cand)
            seen = seen_row[rows]
            if seen.any():
                cand[seen] = cand[seen] * hold_and_delay_factor(x[seen], t, delay_s)
            return cand / ref

    errors = compare_batch(
        analog_f,
        np.concatenate([digital_f, digital_f * hold_f[None, :]]),
        f,
        ratio_at=ratio_at,
        forms=[(analog, d) for d in digitals] * 2,
        **limits,
    )
    return [(errors[k], errors[m + k]) for k in range(m)]


def _padded(root_lists) -> tuple[np.ndarray, np.ndarray]:
    """Root lists of unequal length as one complex array (rows × longest) and a mask of the
    entries that are roots."""
    width = max((len(r) for r in root_lists), default=0)
    values = np.zeros((len(root_lists), width), dtype=complex)
    used = np.zeros((len(root_lists), width), dtype=bool)
    for i, r in enumerate(root_lists):
        values[i, : len(r)] = r
        used[i, : len(r)] = True
    return values, used


@small_dense  # one BLAS-thread limit for the whole survey instead of one per method
def survey_methods(
    controller: Controller,
    fs_hz: float,
    methods: Sequence[str] = METHODS,
    *,
    prewarp_hz: float | None = None,
    delay_s: float = 0.0,
    band_hz: tuple[float, float] | None = None,
    match_at_hz: float | None = None,
    keep_delay: bool = False,
    filter_n: float | None = None,
    gain_limit_db: float = 1.0,
    phase_limit_deg: float = 5.0,
    points_per_decade: int = 100,
) -> MethodSurvey:
    """Discretize ``controller`` by each of ``methods`` at ``fs_hz`` and compare each with it.

    ``band_hz`` = (low, high) in Hz; default: a decade below the lowest corner to fs/2.
    ``delay_s``: computation delay (s) for the loop-seen figures. ``filter_n``: add a derivative
    filter with ratio N first when the controller is improper. Prewarp goes to tustin only (it
    is not passed to the other methods, so they carry no "ignored" warning).
    """
    methods = list(dict.fromkeys(methods))
    if not methods:
        raise InputError("give at least one method", key="method")
    original = controller
    tau = None
    if filter_n is not None:
        tau = derivative_filter_time_constant(controller, filter_n) if not controller.is_proper else None
        controller = add_derivative_filter(controller, filter_n)
    if band_hz is None:
        band_hz = default_band_hz(controller, fs_hz)
    f = comparison_grid(band_hz, fs_hz, points_per_decade)
    t = 1.0 / fs_hz
    # the analog response and the hold-and-delay factor are the same for every method: once
    analog = controller.frequency_response(f, via="zpk")
    hold = hold_and_delay_factor(f, t, delay_s)
    reals = [
        discretize(
            controller,
            fs_hz,
            m,
            prewarp_hz=prewarp_hz if m == "tustin" else None,
            match_at_hz=match_at_hz if m == "matched" else None,
            keep_delay=keep_delay if m == "matched" else False,
        )
        for m in methods
    ]
    limits = dict(gain_limit_db=gain_limit_db, phase_limit_deg=phase_limit_deg)
    errors = _grid_free(controller, [real.controller for real in reals], f, analog, hold, t, delay_s, limits)
    rows = [MethodRow(real, *errors[k]) for k, real in enumerate(reals)]
    candidates = [r for r in rows if not r.unstable]
    if candidates:
        best_row = min(candidates, key=_score)
        best, reason = best_row.realization.method, _reason(best_row, len(rows) - 1)
    else:
        best, reason = None, "every method asked for gives an unstable sampled controller; raise fs"
    filter_error = None
    if tau is not None:
        filter_error = compare_responses(
            original.frequency_response(f, via="zpk"),
            analog,
            f,
            evaluate=lambda x: (original.frequency_response(x, via="zpk"), controller.frequency_response(x, via="zpk")),
            forms=(original, controller),
            **limits,
        )
    return MethodSurvey(
        controller,
        tuple(rows),
        (float(band_hz[0]), float(band_hz[1])),
        f,
        float(delay_s),
        best,
        reason,
        filter_n if tau is not None else None,
        tau,
        filter_error,
    )
