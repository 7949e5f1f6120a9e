"""Sample-rate advice: the lowest sample rate that keeps a discretization method within criteria.

Two figures per method:

* **rule of thumb** (common practice): a zero-order hold plus a computation delay ``t_d`` add a
  phase lag at the crossover frequency ω_c of about ``ω_c·(T/2 + t_d)`` radians. Keeping that
  lag within ``φ_max`` needs ``T ≤ 2·(φ_max/ω_c − t_d)``, i.e. ``fs ≥ 1/T``. It ignores the
  method's own error and needs a plant (for ω_c).
* **checked**: the lowest rate that keeps the digital controller, as seen from the loop
  (method + hold + computation delay), within the case's max gain and phase error over the band,
  and, with a plant, within the loop criteria the verdict checks (``loop_check``: margin changes,
  step and disturbance deviations; without one, the phase lag it adds at crossover within the
  limit); a rate at which the method gives an unstable controller (a pole outside |z| = 1 the
  source does not have, :mod:`convert.compare.ownchecks`) never passes. A log scan (``points`` rates from just above twice the band's top to ``max_ratio``
  times it) finds the lowest scanned rate from which every higher scanned rate passes; a
  bisection in log f between it and the failing rate below then narrows the boundary to
  ``rel_tol`` (default 0.5 %), and the passing end is the advice: the lowest rate that passes,
  to within 1 %.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from collections.abc import Callable

import numpy as np

from convert.compare.frequency import compare_responses, log_grid, response_seen_from_loop
from convert.compare.ownchecks import adds_unstable_poles
from convert.controller import Controller
from convert.digital.statespace import small_dense

RULE_TEXT = (
    "added phase lag at crossover ≈ ω_c·(T/2 + t_d) for the zero-order hold and computation delay (common practice)"
)


@dataclass(frozen=True)
class RateAdvice:
    """``checked_fs_hz`` None when no scanned rate passes, or when nothing can be checked
    (``checked`` False: no gain or phase error limit and no loop criterion to test, so no rate
    "passes"); ``rule_fs_hz`` None without a crossover or phase limit, or when the delay alone
    uses up the allowed lag."""

    method: str
    checked_fs_hz: float | None
    rule_fs_hz: float | None
    limiting: str
    rule: str = RULE_TEXT
    scanned_hz: tuple[float, float] = (0.0, 0.0)
    checked: bool = True

    def as_dict(self) -> dict:
        return dict(self.__dict__)


def rule_min_fs(crossover_hz: float | None, max_lag_deg: float | None, delay_s: float = 0.0) -> float | None:
    """fs ≥ 1/T with ω_c·(T/2 + t_d) = φ_max (Hz); ``None`` when it cannot be met or is undefined."""
    if not crossover_hz or not max_lag_deg:
        return None
    wc = 2 * math.pi * crossover_hz
    t_max = 2 * (math.radians(max_lag_deg) / wc - delay_s)
    return None if t_max <= 0 else 1.0 / t_max


@small_dense  # small matrices (discretizations, loop checks): one BLAS thread is faster
def advise(
    source: Controller,
    method: str,
    discretize: Callable[[Controller, float, str], Controller],
    *,
    band_hz: tuple[float, float],
    max_gain_error_db: float | None,
    max_phase_error_deg: float | None,
    max_lag_deg: float | None,
    crossover_hz: float | None,
    delay_s: float = 0.0,
    delay_samples: float | None = None,
    points: int = 40,
    max_ratio: float = 2000.0,
    loop_check: Callable[[Controller, float], list[str]] | None = None,
    rel_tol: float = 0.005,
    points_per_decade: int = 100,
) -> RateAdvice:
    """The lowest sample rate (Hz) for ``method`` that passes. ``discretize(controller, fs_hz,
    method)`` returns the digital controller; ``delay_samples`` (if given) scales the delay with
    the rate. ``loop_check(digital, delay_s)`` (optional) returns the names of the loop criteria
    that digital controller fails; when given it replaces the phase-lag rule at crossover."""
    f = log_grid(band_hz[0], band_hz[1], points_per_decade)
    ref = source.frequency_response(f, via="zpk")

    def failures(fs: float, full: bool) -> list[str]:
        """The criteria the digital controller at ``fs`` fails: gain and phase errors (and, without
        a loop check, the lag rule at crossover); with ``full`` also the loop check."""
        d = delay_samples / fs if delay_samples is not None else delay_s
        try:
            digital = discretize(source, float(fs), method)
        except Exception:  # a method refusing a rate (e.g. unstable mapping) simply fails this rate
            return ["conversion refused"]
        if adds_unstable_poles(source, digital):  # an unstable controller never passes, whatever its errors
            return ["unstable controller (a pole outside |z| = 1)"]
        cand = response_seen_from_loop(digital, f, delay_s=d, via="zpk")
        err = compare_responses(
            ref,
            cand,
            f,
            forms=(source, digital),  # the verdict's grid-free maxima
            evaluate=lambda x: (
                source.frequency_response(x, via="zpk"),
                response_seen_from_loop(digital, x, delay_s=d, via="zpk"),
            ),
        )
        why = []
        if max_gain_error_db is not None and err.max_gain_error_db > max_gain_error_db:
            why.append("gain error")
        if max_phase_error_deg is not None and err.max_phase_error_deg > max_phase_error_deg:
            why.append("phase error")
        if loop_check is None and max_lag_deg is not None and crossover_hz:
            at = np.array([crossover_hz])
            lag = -np.degrees(
                np.angle(
                    response_seen_from_loop(digital, at, delay_s=d, via="zpk")[0]
                    / source.frequency_response(at, via="zpk")[0]
                )
            )
            if lag > max_lag_deg:
                why.append("phase lag at crossover")
        if full and loop_check is not None and not why:
            why += loop_check(digital, d)
        return why

    rates = np.logspace(math.log10(2.05 * band_hz[1]), math.log10(max_ratio * band_hz[1]), points)
    if (
        max_gain_error_db is None
        and max_phase_error_deg is None
        and loop_check is None
        and not (max_lag_deg is not None and crossover_hz)
    ):
        return RateAdvice(
            method=method,
            checked_fs_hz=None,
            rule_fs_hz=None,
            checked=False,
            limiting="nothing checked: no gain or phase error limit, and no loop criterion "
            "that can be tested (they need a plant)",
            scanned_hz=(float(rates[0]), float(rates[-1])),
        )
    checked = None
    limiting = "no criterion limits the rate in the scanned range"
    # the lowest scanned rate from which every higher scanned rate passes the band criteria: scanned
    # from the top down to the first rate that fails (the rates below it cannot change the answer) ...
    limits = [""] * len(rates)
    start: int | None = 0
    for i in range(len(rates) - 1, -1, -1):
        limits[i] = ", ".join(failures(float(rates[i]), full=False))
        if limits[i]:
            start = i + 1
            break
    if start == len(rates):
        start = None
    if start is not None and loop_check is not None:
        # ... then up from there until the loop criteria pass too (they are costlier to check)
        while start < len(rates):
            why = failures(float(rates[start]), full=True)
            if not why:
                break
            limits[start] = ", ".join(why)
            start += 1
        if start == len(rates):
            start = None
    if start is not None:
        checked = float(rates[start])
        if start > 0:
            limiting = limits[start - 1] or limiting
            lo, hi = float(rates[start - 1]), checked
            while hi / lo > 1 + rel_tol:  # bisection in log f: lo fails, hi passes
                mid = math.sqrt(lo * hi)
                why = failures(mid, full=True)
                if why:
                    lo, limiting = mid, ", ".join(why)
                else:
                    hi = mid
            checked = hi
    else:
        limiting = limits[-1] or "every scanned rate fails"
    rule = rule_min_fs(crossover_hz, max_lag_deg, delay_s if delay_samples is None else 0.0)
    if rule is not None and delay_samples is not None:
        # t_d = delay_samples·T: ω_c·T·(1/2 + n) = φ_max
        rule = 2 * math.pi * crossover_hz * (0.5 + delay_samples) / math.radians(max_lag_deg)
    return RateAdvice(
        method=method,
        checked_fs_hz=checked,
        rule_fs_hz=rule,
        limiting=limiting,
        scanned_hz=(float(rates[0]), float(rates[-1])),
    )
