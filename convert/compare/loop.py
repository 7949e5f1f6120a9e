"""Loop checks: the controller in its loop with a plant — margins, sensitivity, time responses.

Conventions
-----------
* The loop is the usual negative-feedback loop: ``u = C·(r − y)``, ``y = P(s)·e^{−sθ}·(u + d)``,
  with the load disturbance ``d`` added to the controller output at the plant input (before the
  dead time θ).
* Frequencies at interfaces in Hz. The loop transfer ``L(jω) = C_seen(jω)·P(jω)·e^{−jωθ}``,
  where ``C_seen`` is the controller as the analog loop sees it: a digital controller includes
  its zero-order hold and computation delay (:func:`convert.compare.frequency.response_seen_from_loop`).
* Dead time is handled exactly in the frequency domain: the phase of the rational part is
  unwrapped on a dense grid and the pure delays are added analytically (−ω·θ), so no Padé
  approximation enters the margins.
* Margins: gain margin in dB (positive = stable margin), phase margin in degrees, crossover
  frequency in Hz (where |L| = 1), sensitivity peak ``max |1/(1+L)|`` in dB. Where a loop has
  several crossings, the smallest margin in size is reported (for the gain margin the phase
  crossing whose |L| is nearest 1, as python-control's ``stability_margins`` does; a
  conditionally stable loop reports its upward margin when that is the smaller change).

The time simulation (:func:`simulate_loop`) is a sampled-data simulation: the plant is
discretized exactly (matrix exponential, zero-order hold on its input) at a fine sub-step ``h``;
fractional delays are exact (modified z-transform: the input switches within a sub-step); a
digital controller runs at its own rate on the sub-step grid with ZOH output, computation delay
and output limits. An analog controller runs at the sub-step (Tustin at ``h``), so its result
carries an error of order ``h``; the default ``h`` is 1/4000 of the simulated time.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from operator import mul
from typing import Sequence

import numpy as np

from convert.compare.frequency import response_seen_from_loop
from convert.controller import Controller
from convert.errors import InputError

MAX_SIM_STEPS = 400_000


# ----------------------------------------------------------------------------- frequency domain
def loop_response(controller: Controller, plant: Controller, dead_time_s: float, f_hz: Sequence[float], *,
                  delay_s: float = 0.0, hold: str = "zoh") -> np.ndarray:
    """Complex loop transfer L at ``f_hz`` (Hz): controller as seen from the loop × plant × dead time."""
    f = np.asarray(f_hz, dtype=float)
    c = response_seen_from_loop(controller, f, delay_s=delay_s, hold=hold, via="zpk")
    return c * plant.frequency_response(f, via="zpk") * np.exp(-2j * np.pi * f * dead_time_s)


@dataclass(frozen=True)
class Margins:
    """Stability figures of one loop. ``None`` where a figure does not exist (e.g. no gain
    crossover: the phase margin is undefined). Gain margin in dB, phase margin in degrees,
    frequencies in Hz, sensitivity peak in dB (and as a plain ratio ``ms``)."""

    gain_margin_db: float | None
    phase_crossover_hz: float | None
    phase_margin_deg: float | None
    crossover_hz: float | None
    sensitivity_peak_db: float
    sensitivity_peak_hz: float
    ms: float

    def as_dict(self) -> dict:
        return dict(self.__dict__)


def _rational_and_delay(controller: Controller, plant: Controller, dead_time_s: float, f: np.ndarray,
                        delay_s: float, hold: str) -> tuple[np.ndarray, np.ndarray]:
    """(magnitude, unwrapped phase in rad) of L on the grid ``f``, pure delays added analytically."""
    c = controller.frequency_response(f, via="zpk")
    delay_total = dead_time_s + delay_s
    if controller.is_digital and hold == "zoh":
        t = controller.sample_period_s
        c = c * np.sinc(f * t)
        delay_total += t / 2
    rational = c * plant.frequency_response(f, via="zpk")
    phase = np.unwrap(np.angle(rational), axis=-1) - 2 * np.pi * f * delay_total
    return np.abs(rational), phase


def margin_grid(controller: Controller, plant: Controller, *, f_low_hz: float | None = None,
                f_high_hz: float | None = None, points_per_decade: int = 400) -> np.ndarray:
    """A dense log grid (Hz) wide enough for the margins of this loop; a digital controller's
    grid stops just below its Nyquist frequency (the hold's describing response holds up to there)."""
    corners = []
    for obj in (controller, plant):
        cf = obj.corner_frequencies_hz()
        corners += cf["zeros"] + cf["poles"]
    corners = [c for c in corners if c > 0 and math.isfinite(c)]
    lo = f_low_hz or (min(corners) / 1000 if corners else 1e-4)
    hi = f_high_hz or (max(corners) * 1000 if corners else 1e4)
    lo = min(lo, 1e-3 * hi)
    if controller.is_digital:
        hi = min(hi, 0.499 * controller.fs_hz)
        lo = min(lo, hi / 1e3)
    lo, hi = _cover_crossovers(controller, plant, lo, hi)
    n = int(math.ceil(math.log10(hi / lo) * points_per_decade)) + 1
    return np.logspace(math.log10(lo), math.log10(hi), n)


#: At most this many decades are added at each end of the margin grid to reach the crossovers.
EXTRA_DECADES = 8


def _cover_crossovers(controller: Controller, plant: Controller, lo: float, hi: float) -> tuple[float, float]:
    """Widen [lo, hi] (Hz) by decades until the gain crossovers lie inside: the corner rule alone
    misses the crossover of a loop whose gain is large or small (a crossover far above or below
    every corner, e.g. 50/(2s+1) under a PI with kp = 30 crosses at 119 Hz, 1500 times its corner).
    The top end grows while |L(hi)| ≥ 0.05 (analog controllers; a digital one stops at Nyquist),
    the bottom end while |L(lo)| < 2 and |L| still rises toward low frequencies (an integrating
    loop of low gain)."""
    def gain(f: float) -> float:
        fa = np.array([f])
        return float(np.abs(controller.frequency_response(fa, via="zpk")[0] * plant.frequency_response(fa, via="zpk")[0]))

    with np.errstate(all="ignore"):
        if not controller.is_digital:
            for _ in range(EXTRA_DECADES):
                g = gain(hi)
                if not (math.isfinite(g) and g >= 0.05):
                    break
                hi *= 10.0
        for _ in range(EXTRA_DECADES):
            g, g_up = gain(lo), gain(10.0 * lo)
            if not (math.isfinite(g) and g < 2.0 and g > 1.5 * g_up):
                break
            lo /= 10.0
    return lo, hi


def margins_from_response(f_hz: np.ndarray, magnitude: np.ndarray, phase_rad: np.ndarray) -> Margins:
    """Margins from |L| and the unwrapped phase of L (radians) on a dense grid ``f_hz`` (Hz)."""
    res = margins_many(f_hz, magnitude[None, :], phase_rad[None, :])
    return Margins(**{k: (None if v is None else (None if not np.isfinite(v[0]) else float(v[0])))
                      for k, v in res.items() if k not in ("sensitivity_peak_db", "sensitivity_peak_hz", "ms")},
                   sensitivity_peak_db=float(res["sensitivity_peak_db"][0]),
                   sensitivity_peak_hz=float(res["sensitivity_peak_hz"][0]), ms=float(res["ms"][0]))


def margins_many(f_hz: np.ndarray, magnitude: np.ndarray, phase_rad: np.ndarray,
                 loop: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Vectorized margins for many loops at once: ``magnitude``/``phase_rad`` have shape (N, F);
    ``loop`` (optional) the complex L itself, which saves rebuilding it from magnitude and phase.

    Returns arrays of length N (NaN where a figure does not exist). Crossings are located by
    linear interpolation in log-frequency between grid points.
    """
    f = np.asarray(f_hz, dtype=float)
    mag = np.asarray(magnitude, dtype=float)
    ph = np.asarray(phase_rad, dtype=float)
    logf = np.log10(f)
    n = mag.shape[0]
    # gain crossovers: |L| passes through 1
    lg = np.log10(np.maximum(mag, 1e-300))
    s0, s1 = lg[:, :-1], lg[:, 1:]
    cross = (s0 >= 0) & (s1 < 0) | (s0 < 0) & (s1 >= 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(cross, s0 / (s0 - s1), 0.0)
    fc_log = logf[:-1] + frac * np.diff(logf)
    ph_c = ph[:, :-1] + frac * np.diff(ph, axis=1)
    pm_all = np.degrees(ph_c) + 180.0
    pm_all = (pm_all + 180.0) % 360.0 - 180.0  # wrap to [-180, 180)
    pm_all = np.where(cross, pm_all, np.inf)
    idx = np.argmin(np.abs(pm_all), axis=1)
    rows = np.arange(n)
    pm = pm_all[rows, idx]
    has = np.isfinite(pm)
    pm = np.where(has, pm, np.nan)
    fc = np.where(has, 10 ** fc_log[rows, idx], np.nan)
    # phase crossovers: phase passes through -180° - k·360°
    psi = (ph + np.pi) / (2 * np.pi)
    k0, k1 = np.floor(psi[:, :-1]), np.floor(psi[:, 1:])
    pcross = k0 != k1
    target = np.maximum(k0, k1)  # the level crossed (psi = integer)
    with np.errstate(divide="ignore", invalid="ignore"):
        pfrac = np.where(pcross, (target - psi[:, :-1]) / (psi[:, 1:] - psi[:, :-1]), 0.0)
    lg_p = s0 + pfrac * (s1 - s0)
    gm_all = np.where(pcross, -20.0 * lg_p, np.inf)
    # The crossing nearest 0 dB either way (python-control's stability_margins rule): a
    # conditionally stable loop's low-frequency crossing (|L| > 1, a negative figure) is a gain
    # *decrease* margin and must not hide the upward margin that is the smaller change.
    pidx = np.argmin(np.abs(gm_all), axis=1)
    gm = gm_all[rows, pidx]
    hasg = np.isfinite(gm)
    gm = np.where(hasg, gm, np.nan)
    fp = np.where(hasg, 10 ** (logf[:-1] + pfrac * np.diff(logf))[rows, pidx], np.nan)
    if loop is None:
        loop = mag * np.exp(1j * ph)
    sens = 1.0 / np.abs(1.0 + loop)
    si = np.argmax(sens, axis=1)
    ms = sens[rows, si]
    return {
        "gain_margin_db": gm,
        "phase_crossover_hz": fp,
        "phase_margin_deg": pm,
        "crossover_hz": fc,
        "sensitivity_peak_db": 20 * np.log10(ms),
        "sensitivity_peak_hz": f[si],
        "ms": ms,
    }


def loop_margins(controller: Controller, plant: Controller, dead_time_s: float = 0.0, *, delay_s: float = 0.0,
                 hold: str = "zoh", f_hz: np.ndarray | None = None) -> Margins:
    """Gain and phase margins, crossover and sensitivity peak of the loop C·P·e^{−sθ}.

    A digital ``controller`` is seen through its zero-order hold and ``delay_s`` computation
    delay. ``f_hz`` overrides the automatic dense grid (:func:`margin_grid`)."""
    f = margin_grid(controller, plant) if f_hz is None else np.asarray(f_hz, dtype=float)
    mag, phase = _rational_and_delay(controller, plant, dead_time_s, f, delay_s, hold)
    margins = margins_from_response(f, mag, phase)
    # Crossings are interpolated between grid points; beside a sharp resonance that costs a few
    # hundredths of a dB. Add a grid 100 times finer around each crossing and the sensitivity
    # peak, then read the margins again (the coarse grid stays, so the phase unwraps as before).
    marks = [x for x in (margins.crossover_hz, margins.phase_crossover_hz, margins.sensitivity_peak_hz)
             if x is not None and np.isfinite(x)]
    if not marks or f.size < 2:
        return margins
    step = float(np.median(np.diff(np.log10(f))))
    local = [np.logspace(np.log10(x) - 2 * step, np.log10(x) + 2 * step, 401) for x in marks]
    f_fine = np.unique(np.concatenate([f, *local]))
    f_fine = f_fine[(f_fine >= f[0]) & (f_fine <= f[-1])]
    mag, phase = _rational_and_delay(controller, plant, dead_time_s, f_fine, delay_s, hold)
    return margins_from_response(f_fine, mag, phase)


def margins_of_responses(f_hz: np.ndarray, controller_responses: np.ndarray, plant: Controller,
                         dead_time_s: float = 0.0) -> dict[str, np.ndarray]:
    """Margins of many loops whose controllers are given as complex responses (N, F) on ``f_hz``
    (e.g. Monte Carlo draws of a circuit). The controller responses must contain no pure delay
    beyond what unwrapping on the grid can follow."""
    f = np.asarray(f_hz, dtype=float)
    rational = np.atleast_2d(controller_responses) * plant.frequency_response(f, via="zpk")[None, :]
    phase = np.unwrap(np.angle(rational), axis=1) - 2 * np.pi * f[None, :] * dead_time_s
    loop = rational * np.exp(-2j * np.pi * f * dead_time_s)[None, :]
    return margins_many(f, np.abs(rational), phase, loop)


# ----------------------------------------------------------------------------- time domain
@dataclass(frozen=True)
class LoopResponse:
    """A simulated loop: times ``t`` (s), measurement ``y``, controller output ``u`` (after the
    output limits), and what was simulated (``kind`` "setpoint" or "disturbance")."""

    t: np.ndarray
    y: np.ndarray
    u: np.ndarray
    kind: str
    sub_step_s: float


def _state_space(controller: Controller):
    """A state-space realization (A, B, C, D) of a proper controller (controllable canonical
    form; works the same for polynomials in s or in z)."""
    if not controller.is_proper:
        raise InputError("an improper controller (more zeros than poles) cannot run in a loop simulation; "
                         "add a derivative filter", key="controller")
    den = np.asarray(controller.den, dtype=float)
    n = den.size - 1
    num = np.concatenate([np.zeros(n + 1 - len(controller.num)), np.asarray(controller.num, dtype=float)])
    d = num[0]
    rest = num[1:] - d * den[1:]
    a = np.zeros((n, n))
    if n:
        a[0, :] = -den[1:]
        a[1:, :-1] = np.eye(n - 1)
    b = np.zeros((n, 1))
    if n:
        b[0, 0] = 1.0
    return a, b, rest.reshape(1, n), np.array([[d]])


def _bilinear(a, b, c, d, h: float):
    """The bilinear (Tustin) map of a continuous state-space model at step ``h``."""
    n = a.shape[0]
    if n == 0:
        return a, b, c, d
    m = np.linalg.inv(np.eye(n) - a * h / 2)
    ad = m @ (np.eye(n) + a * h / 2)
    bd = m @ b * h
    cd = c @ m
    dd = d + c @ bd / 2
    return ad, bd, cd, dd


def _phi_gamma(a: np.ndarray, b: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
    """Φ = e^{At} and Γ = ∫₀ᵗ e^{Aσ}dσ·B (exact zero-order-hold discretization over ``t``)."""
    from scipy.linalg import expm

    n = a.shape[0]
    m = np.zeros((n + 1, n + 1))
    m[:n, :n] = a * t
    m[:n, n:] = b * t
    e = expm(m)
    return e[:n, :n], e[:n, n:]


def _delay_taps(a: np.ndarray, b: np.ndarray, h: float, delay: float) -> tuple[int, np.ndarray, np.ndarray]:
    """For an input piecewise constant on the h-grid delayed by ``delay`` = n·h + τ:
    x(k+1) gets G0·w(k−n) + G1·w(k−n−1). Returns (n, G0, G1)."""
    n = int(math.floor(delay / h + 1e-9))
    tau = delay - n * h
    if tau < 1e-12 * h:
        tau = 0.0
    phi_rest, gamma_rest = _phi_gamma(a, b, h - tau)
    if tau == 0.0:
        return n, gamma_rest[:, 0], np.zeros(a.shape[0])
    _, gamma_tau = _phi_gamma(a, b, tau)
    return n, gamma_rest[:, 0], (phi_rest @ gamma_tau)[:, 0]


def simulate_loop(controller: Controller, plant: Controller, dead_time_s: float = 0.0, *, duration_s: float,
                  kind: str = "setpoint", step: float = 1.0, delay_s: float = 0.0,
                  output_limits: tuple[float, float] | None = None, steps: int = 4000) -> LoopResponse:
    """Simulate the loop's response to a setpoint step (``kind="setpoint"``) or a load-disturbance
    step at the plant input (``kind="disturbance"``), both applied at t = 0 with size ``step``.

    ``controller`` analog: runs at the sub-step h = duration/steps (Tustin at h). ``controller``
    digital: samples y every T, updates its output through a zero-order hold, ``delay_s`` seconds
    later (computation delay); h divides T. ``output_limits`` (low, high) clamps the controller
    output (no anti-windup: the controller's state is not altered by the clamp). ``plant`` is an
    analog proper transfer function; ``dead_time_s`` a pure delay at its input.
    """
    if kind not in ("setpoint", "disturbance"):
        raise ValueError("kind must be 'setpoint' or 'disturbance'")
    if plant.is_digital or not plant.is_proper:
        raise InputError("the plant must be an analog, proper transfer function", key="plant.model")
    if not (duration_s > 0 and math.isfinite(duration_s)):
        raise InputError(f"the simulated time must be positive, found {duration_s!r}", key="duration")
    h = duration_s / steps
    every = 1
    if controller.is_digital:
        t_s = controller.sample_period_s
        every = max(1, int(math.ceil(t_s / h - 1e-9)))
        h = t_s / every
        steps = int(math.ceil(duration_s / h))
        if steps > MAX_SIM_STEPS:
            raise InputError(f"the sampled-data simulation would need {steps} steps (sample period {t_s:g} s over "
                             f"{duration_s:g} s); shorten signals.duration", key="signals.duration")
        ac, bc, cc, dc = _state_space(controller)
    else:
        ac, bc, cc, dc = _bilinear(*_state_space(controller), h)
    ap, bp, cp, dp = _state_space(plant)
    phi, _ = _phi_gamma(ap, bp, h)
    n_u, g0_u, g1_u = _delay_taps(ap, bp, h, dead_time_s + (delay_s if controller.is_digital else 0.0))
    n_d, g0_d, g1_d = _delay_taps(ap, bp, h, dead_time_s)

    # plain-Python lists: faster than numpy for these tiny matrices in a long loop
    PHI = phi.tolist()
    G0U, G1U, G0D, G1D = g0_u.tolist(), g1_u.tolist(), g0_d.tolist(), g1_d.tolist()
    CP = cp[0].tolist()
    DP = float(dp[0, 0])
    AC, BC, CC, DC = ac.tolist(), bc[:, 0].tolist(), cc[0].tolist(), float(dc[0, 0])
    npl, nct = len(PHI), len(AC)
    lo, hi = output_limits if output_limits else (-math.inf, math.inf)
    r = step if kind == "setpoint" else 0.0
    dist = step if kind == "disturbance" else 0.0

    x = [0.0] * npl
    xc = [0.0] * nct
    u_hist: list[float] = []  # controller output (held) per sub-step
    y_out = [0.0] * (steps + 1)
    u_out = [0.0] * (steps + 1)
    u_now = 0.0
    u_prev_input = 0.0
    rows_p = list(zip(PHI, G0U, G1U, G0D, G1D))
    rows_c = list(zip(AC, BC))
    for k in range(steps + 1):
        y = sum(map(mul, CP, x)) + DP * u_prev_input
        if k % every == 0:
            e = r - y
            v = sum(map(mul, CC, xc)) + DC * e
            xc = [sum(map(mul, row, xc)) + b * e for row, b in rows_c]
            u_now = lo if v < lo else hi if v > hi else v
        u_hist.append(u_now)
        y_out[k] = y
        u_out[k] = u_now
        if k == steps:
            break
        j = k - n_u
        wu0 = u_hist[j] if j >= 0 else 0.0
        wu1 = u_hist[j - 1] if j >= 1 else 0.0
        wd0 = dist if k >= n_d else 0.0
        wd1 = dist if k >= n_d + 1 else 0.0
        x = [sum(map(mul, row, x)) + g0u * wu0 + g1u * wu1 + g0d * wd0 + g1d * wd1
             for row, g0u, g1u, g0d, g1d in rows_p]
        u_prev_input = wu0 + wd0
    y_out = np.asarray(y_out)
    u_out = np.asarray(u_out)
    t = np.arange(steps + 1) * h
    return LoopResponse(t=t, y=y_out, u=u_out, kind=kind, sub_step_s=h)


def response_deviation(reference: LoopResponse, candidate: LoopResponse) -> float:
    """max |y_candidate − y_reference| over the reference's time grid (candidate interpolated)."""
    y = np.interp(reference.t, candidate.t, candidate.y)
    return float(np.max(np.abs(y - reference.y)))


def default_duration(controller: Controller, plant: Controller, dead_time_s: float = 0.0) -> float:
    """A simulated time long enough to see the loop settle (s).

    From the closed loop with a second-order Padé stand-in for the dead time: 6 time constants of
    the slowest stable closed-loop pole, kept between 10/ω_c and 80/ω_c, plus 3 dead times
    (common practice for choosing a simulation horizon)."""
    m = loop_margins(controller, plant, dead_time_s)
    wc = 2 * np.pi * (m.crossover_hz or 1.0)
    theta = dead_time_s
    if theta > 0:
        pad_num = np.array([theta ** 2 / 12, -theta / 2, 1.0])
        pad_den = np.array([theta ** 2 / 12, theta / 2, 1.0])
    else:
        pad_num = pad_den = np.array([1.0])
    if controller.is_digital:  # no analog stand-in here: fall back to the crossover rule
        return float(min(max(30.0 / wc, 10.0 / wc), 80.0 / wc) + 3 * theta)
    c_num, c_den = np.array(controller.num), np.array(controller.den)
    den = np.polyadd(np.polymul(np.polymul(c_den, plant.den), pad_den),
                     np.polymul(np.polymul(c_num, plant.num), pad_num))
    poles = np.roots(den)
    stable = [-p.real for p in poles if p.real < -1e-12]
    slow = min(stable) if stable else wc / 10
    t = 6.0 / slow
    t = min(max(t, 10.0 / wc), 80.0 / wc)
    return float(t + 3 * theta)
