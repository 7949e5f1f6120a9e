"""Sample-rate advice: the lowest sample rate that keeps a discretization method within criteria.

Two figures per method:

* **rule of thumb** (common practice): a zero-order hold plus a computation delay ``t_d`` add a
  phase lag at the crossover frequency ω_c of about ``ω_c·(T/2 + t_d)`` radians. Keeping that
  lag within ``φ_max`` needs ``T ≤ 2·(φ_max/ω_c − t_d)``, i.e. ``fs ≥ 1/T``. It ignores the
  method's own error and needs a plant (for ω_c).
* **checked**: the lowest rate on a log scan (``points`` rates from just above twice the band's
  top to ``max_ratio`` times it) from which every higher scanned rate keeps the digital
  controller, as seen from the loop (method + hold + computation delay), within the case's max
  gain and phase error over the band, and the phase lag it adds at crossover within the limit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from convert.compare.frequency import compare_responses, log_grid, response_seen_from_loop
from convert.controller import Controller

RULE_TEXT = ("added phase lag at crossover ≈ ω_c·(T/2 + t_d) for the zero-order hold and computation delay "
             "(common practice)")


@dataclass(frozen=True)
class RateAdvice:
    """``checked_fs_hz`` None when no scanned rate passes; ``rule_fs_hz`` None without a
    crossover or phase limit, or when the delay alone uses up the allowed lag."""

    method: str
    checked_fs_hz: float | None
    rule_fs_hz: float | None
    limiting: str
    rule: str = RULE_TEXT
    scanned_hz: tuple[float, float] = (0.0, 0.0)

    def as_dict(self) -> dict:
        return dict(self.__dict__)


def rule_min_fs(crossover_hz: float | None, max_lag_deg: float | None, delay_s: float = 0.0) -> float | None:
    """fs ≥ 1/T with ω_c·(T/2 + t_d) = φ_max (Hz); ``None`` when it cannot be met or is undefined."""
    if not crossover_hz or not max_lag_deg:
        return None
    wc = 2 * math.pi * crossover_hz
    t_max = 2 * (math.radians(max_lag_deg) / wc - delay_s)
    return None if t_max <= 0 else 1.0 / t_max


def advise(source: Controller, method: str, discretize: Callable[[Controller, float, str], Controller], *,
           band_hz: tuple[float, float], max_gain_error_db: float | None, max_phase_error_deg: float | None,
           max_lag_deg: float | None, crossover_hz: float | None, delay_s: float = 0.0,
           delay_samples: float | None = None, points: int = 40, max_ratio: float = 2000.0) -> RateAdvice:
    """Scan sample rates for ``method``. ``discretize(controller, fs_hz, method)`` returns the
    digital controller; ``delay_samples`` (if given) scales the delay with the rate."""
    f = log_grid(band_hz[0], band_hz[1], 50)
    ref = source.frequency_response(f, via="zpk")
    rates = np.logspace(math.log10(2.05 * band_hz[1]), math.log10(max_ratio * band_hz[1]), points)
    ok = []
    limits = []
    for fs in rates:
        d = delay_samples / fs if delay_samples is not None else delay_s
        try:
            digital = discretize(source, float(fs), method)
        except Exception:  # a method refusing a rate (e.g. unstable mapping) simply fails this rate
            ok.append(False)
            limits.append("conversion refused")
            continue
        cand = response_seen_from_loop(digital, f, delay_s=d, via="zpk")
        err = compare_responses(ref, cand, f)
        why = []
        if max_gain_error_db is not None and err.max_gain_error_db > max_gain_error_db:
            why.append("gain error")
        if max_phase_error_deg is not None and err.max_phase_error_deg > max_phase_error_deg:
            why.append("phase error")
        if max_lag_deg is not None and crossover_hz:
            at = np.array([crossover_hz])
            lag = -np.degrees(np.angle(response_seen_from_loop(digital, at, delay_s=d, via="zpk")[0]
                                       / source.frequency_response(at, via="zpk")[0]))
            if lag > max_lag_deg:
                why.append("phase lag at crossover")
        ok.append(not why)
        limits.append(", ".join(why))
    ok_arr = np.array(ok)
    checked = None
    limiting = "no criterion limits the rate in the scanned range"
    # lowest index from which every higher rate passes
    for i in range(len(rates)):
        if ok_arr[i:].all():
            checked = float(rates[i])
            if i > 0:
                limiting = limits[i - 1] or limiting
            break
    if checked is None:
        limiting = limits[-1] or "every scanned rate fails"
    rule = rule_min_fs(crossover_hz, max_lag_deg, delay_s if delay_samples is None else 0.0)
    if rule is not None and delay_samples is not None:
        # t_d = delay_samples·T: ω_c·T·(1/2 + n) = φ_max
        rule = 2 * math.pi * crossover_hz * (0.5 + delay_samples) / math.radians(max_lag_deg)
    return RateAdvice(method=method, checked_fs_hz=checked, rule_fs_hz=rule, limiting=limiting,
                      scanned_hz=(float(rates[0]), float(rates[-1])))
