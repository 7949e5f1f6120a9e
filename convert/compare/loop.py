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

The time simulation (:func:`simulate_loop`) runs on a step h tied to the loop's dynamics
(:func:`natural_step`), never to the simulated time, and writes the loop as linear time-invariant
stretches z_{k+1} = A·z_k (plant, controller, held or delayed samples, and the constant 1 for
the steps), advanced as matrix powers in a few BLAS calls (:class:`_Orbit`), no Python loop per
step. Output clamps are handled by segments (:func:`_run`): a stretch ends where the unclamped
controller output crosses a limit, found on the stretch's own outputs, and the rest is computed
again in the other mode, so the clamp is exact at every step.

* A digital controller (:class:`_SampledLoop`): the plant discretized exactly over the sample
  period, dead time and computation delay as whole periods plus a fraction (modified
  z-transform), intersample outputs exact from the sample states; identical (1e-13 of the step)
  to the former step-by-step simulation.
* An analog controller without dead time: the continuous closed loop discretized exactly.
* An analog controller with dead time θ = m·h: the cascade controller → plant driven by the
  delayed error (:class:`_CascadeLoop`; exact for the controller's own response to the steps) or,
  where the clamp acts, the plant driven by the delayed controller output (:class:`_AnalogLoop`);
  the signal between samples is taken as linear (first-order hold), an error of order (ω·h)²
  that the tests bound against an independent RK4 simulation and python-control with a
  12th-order Padé, within 1e-3 of the step for 10× to 1000× the settling time.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from convert.compare.refine import maximize_in_brackets, root_in_bracket
from convert.controller import Controller
from convert.errors import InputError
from convert.digital.statespace import expm, foh_matrices, realize, small_dense, zoh_matrices

MAX_SIM_STEPS = 4_000_000


# ----------------------------------------------------------------------------- frequency domain
@dataclass(frozen=True)
class Margins:
    """Stability figures of one loop. ``None`` where a figure does not exist (e.g. no gain
    crossover: the phase margin is undefined). Gain margin in dB, phase margin in degrees,
    frequencies in Hz, sensitivity peak in dB (and as a plain ratio ``ms``).

    A phase crossover at zero frequency (L(0) real and negative: a plant unstable on its own)
    has ``phase_crossover_hz`` 0. Where |1 + L| has no interior minimum (|S| largest at zero
    frequency or still rising toward the top of the range) ``sensitivity_peak_note`` says so and
    ``sensitivity_peak_hz`` is 0 (zero frequency), the Nyquist frequency (a digital controller)
    or None (the supremum, approached as f → ∞); ``ms`` is then that edge value."""

    gain_margin_db: float | None
    phase_crossover_hz: float | None
    phase_margin_deg: float | None
    crossover_hz: float | None
    sensitivity_peak_db: float
    sensitivity_peak_hz: float | None
    ms: float
    sensitivity_peak_note: str = ""

    def as_dict(self) -> dict:
        return dict(self.__dict__)


def _rational(
    controller: Controller, plant: Controller, f: np.ndarray, delay_s: float, hold: str, dead_time_s: float
) -> tuple[np.ndarray, float]:
    """(rational part of L on ``f`` (Hz), total pure delay in s): the hold's sinc stays in the
    rational part, its half-period delay joins the dead time and computation delay."""
    c = controller.frequency_response(f, via="zpk")
    delay_total = dead_time_s + delay_s
    if controller.is_digital and hold == "zoh" and not plant.is_digital:
        p, whole = _sampled_plant(plant, f, controller.sample_period_s, delay_total)
        return c * p, whole
    if controller.is_digital and hold == "zoh-describing":
        t = controller.sample_period_s
        c = c * np.sinc(f * t)
        delay_total += t / 2
    return c * plant.frequency_response(f, via="zpk"), delay_total


def _sampled_plant(plant: Controller, f: np.ndarray, t: float, delay: float) -> tuple[np.ndarray, float]:
    """The plant as the sampled controller sees it (input through a zero-order hold of period t,
    delayed by ``delay`` s, output sampled at the controller's instants), on the unit circle at
    ``f`` (Hz): exact, aliasing included — P(z) = [C(zI − Φ)⁻¹(G0 + G1·z⁻¹) + D·z⁻¹]·z⁻ⁿ with
    ``delay`` = n·t + τ (:func:`_delay_taps`; the output is sampled before the new input takes
    effect, as the loop simulation does). Returns (the part without z⁻ⁿ, n·t): the whole samples
    of delay stay a pure delay, so the phase unwraps as the continuous loop's does."""
    a, phi, g0, g1, cc, d, n = _sampled_matrices(tuple(plant.num), tuple(plant.den), float(t), float(delay))
    z = np.exp(2j * np.pi * np.asarray(f, dtype=float) * t)
    zi = 1.0 / z
    out = d * zi
    if a.shape[0]:
        m = z[:, None, None] * np.eye(a.shape[0]) - phi
        rhs = g0[None, :] + g1[None, :] * zi[:, None]
        x = np.linalg.solve(m, rhs[:, :, None])[:, :, 0]
        out = out + x @ cc[0]
    return out, n * t


def margin_grid(
    controller: Controller,
    plant: Controller,
    *,
    f_low_hz: float | None = None,
    f_high_hz: float | None = None,
    points_per_decade: int = 400,
) -> np.ndarray:
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
        return float(
            np.abs(controller.frequency_response(fa, via="zpk")[0] * plant.frequency_response(fa, via="zpk")[0])
        )

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
    return Margins(
        **{
            k: (None if v is None else (None if not np.isfinite(v[0]) else float(v[0])))
            for k, v in res.items()
            if k not in ("sensitivity_peak_db", "sensitivity_peak_hz", "ms")
        },
        sensitivity_peak_db=float(res["sensitivity_peak_db"][0]),
        sensitivity_peak_hz=float(res["sensitivity_peak_hz"][0]),
        ms=float(res["ms"][0]),
    )


def margins_many(
    f_hz: np.ndarray,
    magnitude: np.ndarray,
    phase_rad: np.ndarray,
    loop: np.ndarray | None = None,
    *,
    distance: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Vectorized margins for many loops at once: ``magnitude``/``phase_rad`` have shape (N, F);
    ``loop`` (optional) the complex L itself, which saves rebuilding it from magnitude and phase;
    ``distance`` (optional) |1 + L| itself (then ``loop`` is not needed).

    Returns arrays of length N (NaN where a figure does not exist). Crossings are located by
    linear interpolation in log-frequency between grid points.
    """
    f = np.asarray(f_hz, dtype=float)
    mag = np.asarray(magnitude, dtype=float)
    ph = np.asarray(phase_rad, dtype=float)
    logf = np.log10(f)
    dlogf = np.diff(logf)
    n = mag.shape[0]
    # Every figure is computed only at the crossings, element by element as over the whole grid
    # (the same values); the grid-wide work is finding where the crossings are.
    # gain crossovers: |L| passes through 1 (log10|L| changes sign: |L| ≥ 1 on one side only)
    up = mag >= 1.0
    if np.isnan(mag.sum()):  # NaN is neither side of 1
        down = mag < 1.0
        r, c = np.nonzero(up[:, :-1] & down[:, 1:] | down[:, :-1] & up[:, 1:])
    else:
        r, c = np.nonzero(up[:, :-1] != up[:, 1:])
    s0, s1 = _log10_clipped(mag[r, c]), _log10_clipped(mag[r, c + 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = s0 / (s0 - s1)
    fc_log = logf[c] + frac * dlogf[c]
    ph_c = ph[r, c] + frac * (ph[r, c + 1] - ph[r, c])
    pm_at = np.degrees(ph_c) + 180.0
    pm_at = (pm_at + 180.0) % 360.0 - 180.0  # wrap to [-180, 180)
    pick = _first_nearest_zero(r, pm_at, n)
    pm, fc = _picked(pm_at, pick), 10 ** _picked(fc_log, pick)
    # phase crossings: phase passes through -180° - k·360°
    psi = np.add(ph, np.pi)
    np.divide(psi, 2 * np.pi, out=psi)
    k = np.floor(psi)
    r, c = np.nonzero(k[:, :-1] != k[:, 1:])
    k0, k1 = k[r, c], k[r, c + 1]
    del k
    target = np.maximum(k0, k1)  # the level crossed (psi = integer)
    with np.errstate(divide="ignore", invalid="ignore"):
        pfrac = (target - psi[r, c]) / (psi[r, c + 1] - psi[r, c])
    del psi
    g0, g1 = _log10_clipped(mag[r, c]), _log10_clipped(mag[r, c + 1])
    gm_at = -20.0 * (g0 + pfrac * (g1 - g0))
    # The crossing nearest 0 dB either way (python-control's stability_margins rule): a
    # conditionally stable loop's low-frequency crossing (|L| > 1, a negative figure) is a gain
    # *decrease* margin and must not hide the upward margin that is the smaller change.
    pick = _first_nearest_zero(r, gm_at, n)
    gm, fp = _picked(gm_at, pick), 10 ** _picked(logf[c] + pfrac * dlogf[c], pick)
    rows = np.arange(n)
    # the sensitivity peak: the largest 1/|1 + L| (the first on a tie, NaN first as argmax takes it)
    if distance is None:
        if loop is None:
            loop = mag * np.exp(1j * ph)
        distance = np.abs(1.0 + loop)
    else:
        distance = np.asarray(distance, dtype=float)
    if np.isnan(distance.sum()):
        sens = 1.0 / distance
        si = np.argmax(sens, axis=1)
        ms = sens[rows, si]
    else:
        si = np.argmin(distance, axis=1)  # 1/x falls as x rises: the same point as argmax of 1/|1 + L|
        ms = 1.0 / distance[rows, si]
    return {
        "gain_margin_db": gm,
        "phase_crossover_hz": fp,
        "phase_margin_deg": pm,
        "crossover_hz": fc,
        "sensitivity_peak_db": 20 * np.log10(ms),
        "sensitivity_peak_hz": f[si],
        "ms": ms,
    }


def _log10_clipped(x: np.ndarray) -> np.ndarray:
    """log10 of |L| as the margins take it (floored at 1e-300)."""
    return np.log10(np.maximum(x, 1e-300))


def _picked(values: np.ndarray, pick: np.ndarray) -> np.ndarray:
    """``values[pick]``, NaN where ``pick`` is -1."""
    if values.size == 0:
        return np.full(pick.shape, np.nan)
    return np.where(pick >= 0, values[np.maximum(pick, 0)], np.nan)


def _first_nearest_zero(rows: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """For each of ``n`` loops the index (into ``values``) of its crossing with the smallest
    |value|, the first such one in frequency on a tie (as ``argmin`` along the grid), or -1 for a
    loop with no crossing (or whose nearest one is not finite). ``rows`` (ascending, then in
    frequency order, as ``np.nonzero`` gives them) says which loop each crossing belongs to."""
    out = np.full(n, -1, dtype=np.intp)
    if rows.size == 0:
        return out
    a = np.abs(values)
    if np.isnan(a).any():  # argmin would take the first NaN: keep that rule exactly
        a = np.where(np.isnan(a), -np.inf, a)
    order = np.lexsort((np.arange(rows.size), a, rows))
    firsts = order[np.concatenate([[True], rows[order][1:] != rows[order][:-1]])]
    ok = np.isfinite(values[firsts])
    out[rows[firsts[ok]]] = firsts[ok]
    return out


def loop_margins(
    controller: Controller,
    plant: Controller,
    dead_time_s: float = 0.0,
    *,
    delay_s: float = 0.0,
    hold: str = "zoh",
    f_hz: np.ndarray | None = None,
) -> Margins:
    """Gain and phase margins, crossover and sensitivity peak of the loop C·P·e^{−sθ}.

    A digital ``controller`` closes the sampled loop as it runs (``hold="zoh"``): its output
    through a zero-order hold and ``delay_s`` computation delay, the plant's output sampled at its
    instants, so the margins are those of L(z) on the unit circle up to the Nyquist frequency,
    aliasing included (:func:`_sampled_plant`); ``hold="zoh-describing"`` gives the continuous
    approximation (the hold's sinc and half-period delay), ``hold="none"`` none. ``f_hz`` overrides the automatic dense grid (:func:`margin_grid`). The grid finds the
    crossings and the sensitivity peak; each is then refined inside its grid interval by a search
    in log f that samples many frequencies per call (:mod:`convert.compare.refine`): the root of
    log|L| or of the phase's distance to −180° − k·360° to 1e-13 in ln f (scipy ``brentq``'s
    xtol 1e-13, rtol 1e-14), the maximum of 1/|1 + L| to 1e-12 in ln f (or as closely as the rounding of
    |1 + L| allows). L(0) real and negative (a plant unstable on its own) is a phase
    crossing at zero frequency, with gain margin 1/|L(0)| (python-control's rule)."""
    f = margin_grid(controller, plant) if f_hz is None else np.asarray(f_hz, dtype=float)
    rational, delay_total = _rational(controller, plant, f, delay_s, hold, dead_time_s)
    mag = np.abs(rational)
    phase = np.unwrap(np.angle(rational)) - 2 * np.pi * f * delay_total
    grid = margins_from_response(f, mag, phase)
    if f.size < 3:
        return grid

    def lval(x: np.ndarray) -> np.ndarray:
        """L at the frequencies ``x`` (Hz)."""
        r, _ = _rational(controller, plant, np.asarray(x, dtype=float), delay_s, hold, dead_time_s)
        return r * np.exp(-2j * np.pi * x * delay_total)

    def phase_at(x: np.ndarray, i: int) -> np.ndarray:
        """The phase of L at ``x`` (Hz), continued from the grid point i."""
        r, _ = _rational(controller, plant, np.asarray(x, dtype=float), delay_s, hold, dead_time_s)
        return phase[i] + np.angle(r / rational[i]) - 2 * np.pi * (x - f[i]) * delay_total

    out = dict(grid.as_dict())
    with np.errstate(all="ignore"):
        if grid.crossover_hz is not None:
            i = _bracket(f, grid.crossover_hz)
            fc = root_in_bracket(lambda x: np.log(np.abs(lval(x))), f[i], f[i + 1])
            out["crossover_hz"] = fc
            pm = math.degrees(float(phase_at(np.array([fc]), i)[0])) + 180.0
            out["phase_margin_deg"] = (pm + 180.0) % 360.0 - 180.0
        if grid.phase_crossover_hz is not None:
            i = _bracket(f, grid.phase_crossover_hz)
            psi0, psi1 = (phase[i] + np.pi) / (2 * np.pi), (phase[i + 1] + np.pi) / (2 * np.pi)
            level = max(math.floor(psi0), math.floor(psi1))
            target = 2 * np.pi * level - np.pi
            fp = root_in_bracket(lambda x: phase_at(x, i) - target, f[i], f[i + 1])
            out["phase_crossover_hz"] = fp
            out["gain_margin_db"] = -20.0 * math.log10(abs(complex(lval(np.array([fp]))[0])))
        l0 = _at_zero_frequency(controller, plant)
        if l0 is not None and l0 < 0:
            gm0 = -20.0 * math.log10(-l0)
            if out["gain_margin_db"] is None or abs(gm0) < abs(out["gain_margin_db"]):
                out["gain_margin_db"], out["phase_crossover_hz"] = gm0, 0.0
        out.update(_sensitivity_peak(controller, plant, f, rational, delay_total, lval, l0))
    return Margins(**out)


def _bracket(f: np.ndarray, x: float) -> int:
    """Index i with f[i] ≤ x ≤ f[i+1] (clipped to the grid)."""
    return int(min(max(np.searchsorted(f, x) - 1, 0), f.size - 2))


def _at_zero_frequency(controller: Controller, plant: Controller) -> float | None:
    """L(0) as a real number when it is finite and non-zero (no integrator, no zero at 0);
    pure delays and the hold are 1 there."""
    with np.errstate(all="ignore"):
        c = controller.frequency_response(np.array([0.0]), via="zpk")[0]
        p = plant.frequency_response(np.array([0.0]), via="zpk")[0]
    val = c * p
    if not np.isfinite(val) or val == 0:
        return None
    return float(val.real)


def _sensitivity_peak(
    controller: Controller,
    plant: Controller,
    f: np.ndarray,
    rational: np.ndarray,
    delay_total: float,
    lval,
    l0: float | None,
) -> dict:
    """The sensitivity peak max |1/(1 + L)|: refined around the grid's largest value when it lies
    inside the grid (:func:`convert.compare.refine.maximize_in_brackets`, to 1e-12 relative in
    frequency; never below the grid's value); otherwise the edge it rises toward (zero
    frequency, the Nyquist frequency of a digital controller, or f → ∞), said in words."""
    loop = rational * np.exp(-2j * np.pi * f * delay_total)
    sens = 1.0 / np.abs(1.0 + loop)
    si = int(np.argmax(sens))
    if 0 < si < f.size - 1 and sens[si] <= max(sens[0], sens[-1]) * (1 + 1e-9):
        si = 0 if sens[0] >= sens[-1] else f.size - 1  # a plateau, not a peak: the edge decides
    if 0 < si < f.size - 1:
        found, at = maximize_in_brackets(
            lambda x: 1.0 / np.abs(1.0 + lval(x)), f[si - 1 : si], f[si + 1 : si + 2], rel_tol=1e-12, points=32
        )
        fs_, ms = float(at[0]), float(found[0])
        if ms < sens[si]:  # the search never does worse than the grid
            fs_, ms = float(f[si]), float(sens[si])
        return {
            "ms": ms,
            "sensitivity_peak_db": 20 * math.log10(ms),
            "sensitivity_peak_hz": fs_,
            "sensitivity_peak_note": "",
        }
    if si == 0:
        ms = 1.0 / abs(1.0 + l0) if l0 is not None else float(sens[0])
        return {
            "ms": ms,
            "sensitivity_peak_db": 20 * math.log10(ms),
            "sensitivity_peak_hz": 0.0,
            "sensitivity_peak_note": "no interior peak: |S| = |1/(1 + L)| is largest at zero frequency",
        }
    if controller.is_digital:
        fn = 0.5 * controller.fs_hz
        ms = 1.0 / abs(1.0 + complex(lval(np.array([fn]))[0]))
        return {
            "ms": ms,
            "sensitivity_peak_db": 20 * math.log10(ms),
            "sensitivity_peak_hz": fn,
            "sensitivity_peak_note": "no interior peak: |S| = |1/(1 + L)| is largest at the Nyquist frequency",
        }
    # analog: the supremum as f → ∞, where L tends to k = L(∞) (0 for a strictly proper loop)
    k = (controller.high_frequency_gain() or 0.0) * (plant.high_frequency_gain() or 0.0)
    if delay_total > 0 and k != 0:
        ms = 1.0 / (1.0 - abs(k)) if abs(k) < 1 else math.inf  # e^{−jωθ} turns L(∞) through every phase
    else:
        ms = 1.0 / abs(1.0 + k) if k != -1 else math.inf
    return {
        "ms": ms,
        "sensitivity_peak_db": 20 * math.log10(ms) if math.isfinite(ms) else math.inf,
        "sensitivity_peak_hz": None,
        "sensitivity_peak_note": "no interior peak: |S| = |1/(1 + L)| rises toward high frequency; "
        "the figure is its limit as f → ∞",
    }


def margins_of_responses(
    f_hz: np.ndarray, controller_responses: np.ndarray, plant: Controller, dead_time_s: float = 0.0
) -> dict[str, np.ndarray]:
    """Margins of many loops whose controllers are given as complex responses (N, F) on ``f_hz``
    (e.g. Monte Carlo draws of a circuit). The controller responses must contain no pure delay
    beyond what unwrapping on the grid can follow."""
    f = np.asarray(f_hz, dtype=float)
    rational = np.atleast_2d(controller_responses) * plant.frequency_response(f, via="zpk")[None, :]
    phase = unwrap_rows(np.angle(rational))
    phase -= 2 * np.pi * f[None, :] * dead_time_s
    mag = np.abs(rational)
    rational *= np.exp(-2j * np.pi * f * dead_time_s)[None, :]  # now L with its dead time
    rational += 1.0
    return margins_many(f, mag, phase, distance=np.abs(rational))


def unwrap_rows(p: np.ndarray) -> np.ndarray:
    """``np.unwrap(p, axis=1)`` (period 2π, discontinuity π) for a float 2-D array, value for
    value, with the wrap arithmetic done only at the steps of at least π (on a margin grid
    almost none): the correction of every other step is the 0 ``np.unwrap`` puts there."""
    p = np.asarray(p, dtype=float)
    dd = np.diff(p, axis=1)
    far = ~(np.abs(dd) < np.pi)
    up = p.copy()
    rows = np.flatnonzero(far.any(axis=1))  # only rows with a wrap change
    if rows.size:
        dd, far = dd[rows], far[rows]
        correct = np.zeros_like(dd)
        d = dd[far]
        period = 2 * np.pi
        dmod = np.mod(d - (-np.pi), period) + (-np.pi)
        np.copyto(dmod, np.pi, where=(dmod == -np.pi) & (d > 0))
        correct[far] = dmod - d
        up[rows, 1:] = p[rows, 1:] + correct.cumsum(axis=1)
    return up


# ----------------------------------------------------------------------------- time domain
@dataclass(frozen=True)
class LoopResponse:
    """A simulated loop: times ``t`` (s), measurement ``y``, controller output ``u`` (after the
    output limits), and what was simulated (``kind`` "setpoint" or "disturbance"); ``sub_step_s``
    the spacing of ``t``."""

    t: np.ndarray
    y: np.ndarray
    u: np.ndarray
    kind: str
    sub_step_s: float


@functools.lru_cache(maxsize=256)
def _sampled_matrices(num: tuple, den: tuple, t: float, delay: float):
    """(A, Φ, G0, G1, C, D, n) of :func:`_sampled_plant`, once per plant, period and delay (the
    margins' refinement evaluates the same sampled plant at a few frequencies at a time)."""
    plant = Controller.analog(num, den)
    a, b, cc, d = _realize(plant, "plant.model")
    n, g0, g1 = _delay_taps(a, b, t, delay)
    phi = _phi_gamma(a, b, t)[0] if a.shape[0] else np.zeros((0, 0))
    for m in (phi, g0, g1):
        m.setflags(write=False)
    return a, phi, g0, g1, cc, d, n


def _realize(c: Controller, key: str = "controller"):
    """(A, B, C, D) of a proper transfer function (in s or in z): the balanced cascade of
    :func:`convert.digital.statespace.realize` (poles and zeros kept as first- and second-order
    sections, not a companion matrix, so sampled matrices keep the roots to rounding)."""
    if not c.is_proper:
        raise InputError(
            "an improper controller (more zeros than poles) cannot run in a loop simulation; add a derivative filter",
            key=key,
        )

    return _realized(tuple(c.num), tuple(c.den))


@functools.lru_cache(maxsize=256)
def _realized(num: tuple, den: tuple):
    """:func:`_realize`'s matrices, computed once per transfer function (the loop checks, the
    margins' refinement and the sample-rate advice ask for the same plant hundreds of times);
    read-only, so no caller can change what the next one gets."""
    a, b, cc, d = realize(num, den)
    out = a, b.reshape(-1, 1), cc.reshape(1, -1)
    for m in out:
        m.setflags(write=False)
    return (*out, float(d))


def _phi_gamma(a: np.ndarray, b: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
    """Φ = e^{At} and Γ = ∫₀ᵗ e^{Aσ}dσ·B (exact zero-order-hold discretization over ``t``)."""
    return zoh_matrices(a, b, t)


def _foh(a: np.ndarray, b: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact discretization for an input linear over each step (first-order hold):
    x(h) = Φ·x(0) + Γs·w(0⁺) + Γe·w(h⁻). Returns (Φ, Γs, Γe) with Γs, Γe of shape (n,)."""
    phi, g1, g2 = foh_matrices(a, b, h)
    return phi, g1[:, 0] - g2[:, 0], g2[:, 0]


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


class _Orbit:
    """Powers of one square matrix A, arranged so that ``orbit(z, count)`` = [A^j·z, j < count]
    costs count·dim² multiply-adds in a few BLAS calls and no Python loop over steps: level L
    holds (A^{64^L})^j for j < 64, and an orbit is the outer product of the levels' blocks.
    The powers are formed by repeated products, so rounding grows with the level count (a few),
    not with the number of steps."""

    K = 64

    def __init__(self, a: np.ndarray):
        self.levels: list[np.ndarray] = []
        self._next = a

    def _level(self, i: int) -> np.ndarray:
        while len(self.levels) <= i:
            b = self._next
            p = np.empty((self.K + 1,) + b.shape)
            p[0] = np.eye(b.shape[0])
            for j in range(1, self.K + 1):
                p[j] = p[j - 1] @ b
            self.levels.append(p[: self.K])
            self._next = p[self.K]
        return self.levels[i]

    def orbit(self, z: np.ndarray, count: int, level: int = 0) -> np.ndarray:
        p = self._level(level)
        if count <= self.K:
            return p[:count] @ z
        c = -(-count // self.K)
        starts = self.orbit(z, c, level + 1)  # (c, dim)
        dim = z.size
        # row i·K + j is (A^{64^L})^j applied to start i: one product, laid out without a copy
        return (starts @ p.reshape(self.K * dim, dim).T).reshape(c * self.K, dim)[:count]


class _StepOrbit:
    """:class:`_Orbit` for a loop with many states (a long dead time held as a delay line of
    past outputs): the states advance one step at a time through the sparse matrix (each step
    costs its few nonzeros, where the powers of the dense matrix would cost dim² each and 64·dim²
    of memory per level)."""

    def __init__(self, a: np.ndarray):
        from scipy.sparse import csr_matrix

        self.a = csr_matrix(a)

    def orbit(self, z: np.ndarray, count: int) -> np.ndarray:
        out = np.empty((count, z.size))
        out[0] = z
        for j in range(1, count):
            out[j] = self.a @ out[j - 1]
        return out


#: above this many states a loop is advanced step by step through its sparse matrix
_DENSE_ORBIT_MAX = 300


class _LoopSystem:
    """A loop written as z_{k+1} = A(key, mode)·z_k, with y_k, u_k and the controller's
    unclamped output v_k read as rows of z_k. ``key`` names the stretch of steps (set by known
    events: the disturbance arriving after the dead time, the first step after the setpoint
    step) and ``mode`` the output clamp ("lin", "lo", "hi"); the last state is the constant 1."""

    dim: int
    boundaries: tuple[int, ...]

    def key(self, k: int):  # pragma: no cover - abstract
        raise NotImplementedError

    def build(self, key, mode) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(A, y_row, u_row, v_row) for one stretch and clamp mode."""
        raise NotImplementedError  # pragma: no cover


def _run(system: _LoopSystem, steps: int, limits: tuple[float, float], extra=None):
    """Outputs y_k, u_k for k = 0..steps, by segments: inside a segment the loop is linear and
    time-invariant (one stretch, one clamp mode) and is advanced by :class:`_Orbit` in one go.
    A segment ends at the next known event or at the first step whose unclamped controller output
    calls for another clamp mode (found on the segment's own outputs, then the segment is cut
    there and the rest computed again from that step): the clamp is exact at the sample instants.
    ``extra(key, Z)`` may return more per-step columns (e.g. states for intersample outputs)."""
    lo, hi = limits
    cache: dict = {}
    # A mode is left only when v passes its limit by more than `tol`: where the loop settles with
    # the output exactly at a limit, rounding would otherwise flip the mode at every step (the
    # two modes differ there by less than `tol` in u).
    tol = 1e-12 * max([1.0] + [abs(x) for x in (lo, hi) if math.isfinite(x)])

    def get(key, mode):
        if (key, mode) not in cache:
            a, y_row, u_row, v_row = system.build(key, mode)
            orbit = _Orbit(a) if a.shape[0] <= _DENSE_ORBIT_MAX else _StepOrbit(a)
            cache[(key, mode)] = (orbit, y_row, u_row, v_row)
        return cache[(key, mode)]

    def classify(v, current):
        """The clamp mode (0 lin, 1 lo, 2 hi) for unclamped outputs v, coming from mode ``current``."""
        low = lo - tol if current != 1 else lo + tol
        high = hi + tol if current != 2 else hi - tol
        return np.where(v < low, 1, np.where(v > high, 2, 0))

    modes = ("lin", "lo", "hi")
    z = np.zeros(system.dim)
    z[-1] = 1.0
    y = np.empty(steps + 1)
    u = np.empty(steps + 1)
    extras: list = []
    k = 0
    window = 256
    # a window's states are held at once: keep them near 32 MB for a loop with many states
    top = 1 << 16 if system.dim <= _DENSE_ORBIT_MAX else max(64, (1 << 22) // system.dim)
    bounds = sorted(b for b in system.boundaries if b > 0)
    mode = "lin"
    while k <= steps:
        key = system.key(k)
        kb = next((b for b in bounds if b > k), steps + 1)
        _, _, _, v_row = get(key, "lin")
        mode = modes[int(classify(np.array([v_row @ z]), modes.index(mode))[0])]
        orbit, y_row, u_row, v_row = get(key, mode)
        count = min(window, kb - k, steps + 1 - k)
        zs = orbit.orbit(z, count + 1)
        v = zs[:count] @ v_row
        changed = np.nonzero(classify(v, modes.index(mode)) != modes.index(mode))[0]
        if changed.size:
            count = max(1, int(changed[0]))  # at least one step: a mode chosen at k holds for step k
            window = max(64, 2 * count)
        else:
            window = min(2 * window, top)
        y[k : k + count] = zs[:count] @ y_row
        u[k : k + count] = zs[:count] @ u_row
        if extra is not None:
            extras.append(extra(key, mode, zs[:count], u[k : k + count]))
        z = zs[count]
        k += count
    return y, np.clip(u, lo, hi), extras  # a settled output within `tol` of a limit stays on it


class _Prefilter:
    """The setpoint as the loop's error sees it: r_f = F·r for a setpoint step r (F = C_sp/C, the
    2-DOF law u = C_sp·r − C·y written as C·(F·r − y)). Its states sit just before the constant
    1 of a loop's state (indices ``j .. j+n``); ``row(unit, one)`` is r_f_k as a row on that state,
    ``advance(a, one)`` writes the states' update into a loop matrix. ``step_s`` the update
    interval: an analog F is discretized exactly for the constant r (ZOH of a step is exact); a
    digital F runs once per update. ``F = None``: r_f = r (no states).

    ``added`` (an improper F, e.g. a card whose setpoint path lacks a pole of its feedback path):
    ``f`` is then G = C·(F − 1) = C_sp − C, proper, and its output w = G·r is added to the
    controller's output instead (u = C·(r − y) + G·r, the same law); ``row`` is w_k and the
    error sees the plain r (:meth:`error_row`)."""

    def __init__(
        self, f: Controller | None, r: float, step_s: float | None, continuous: bool = False, added: bool = False
    ):
        self.r = r
        self.added = added
        if f is None:
            self.n, self.d = 0, 1.0
            return
        a, b, c, d = _realize(f, "setpoint filter")
        self.n, self.c, self.d = a.shape[0], c[0], d
        if continuous:
            self.phi, self.gam = a, b[:, 0]
        elif f.is_digital:
            self.phi, self.gam = a, b[:, 0]
        else:
            phi, gam = _phi_gamma(a, b, step_s)
            self.phi, self.gam = phi, gam[:, 0]

    def place(self, j: int) -> None:
        self.j = j

    def error_row(self, unit: np.ndarray, one: int) -> np.ndarray:
        """The setpoint as the error sees it at k."""
        return self.r * unit[one] if self.added else self.row(unit, one)

    def error_next_row(self, unit: np.ndarray, one: int) -> np.ndarray:
        return self.r * unit[one] if self.added else self.next_row(unit, one)

    def output_row(self, unit: np.ndarray, one: int) -> np.ndarray | None:
        """w_k added to the controller's output (None unless ``added``)."""
        return self.row(unit, one) if self.added else None

    def row(self, unit: np.ndarray, one: int) -> np.ndarray:
        out = self.d * self.r * unit[one]
        if self.n:
            out = out.copy()
            out[self.j : self.j + self.n] += self.c
        return out

    def next_row(self, unit: np.ndarray, one: int) -> np.ndarray:
        """r_f_{k+1} as a row on the state at k."""
        if not self.n:
            return self.row(unit, one)
        out = (self.c @ self.gam + self.d) * self.r * unit[one]
        out[self.j : self.j + self.n] += self.c @ self.phi
        return out

    def advance(self, a: np.ndarray, one: int) -> None:
        if self.n:
            j, n = self.j, self.n
            a[j : j + n, j : j + n] = self.phi
            a[j : j + n, one] = self.gam * self.r

    def samples(self, count: int) -> np.ndarray:
        """r_f_k for k = 0..count−1 (a digital F, or an analog one sampled every step_s)."""
        if not self.n:  # no states: the same value every sample
            return np.full(count, 0.0 + self.d * self.r)
        x = np.zeros(self.n)
        out = np.empty(count)
        for k in range(count):
            out[k] = (self.c @ x if self.n else 0.0) + self.d * self.r
            if self.n:
                x = self.phi @ x + self.gam * self.r
        return out


class _SampledLoop(_LoopSystem):
    """A digital controller at period T through a zero-order hold, its output reaching the plant
    after ``delay_u`` (dead time + computation delay) and the load after ``delay_d`` (dead time),
    both split as whole periods and a fraction (modified z-transform, exact). State:
    [plant x; controller xc; u_{k−1} … u_{k−n−1}; 1]. The measurement is sampled before the
    output changes (the plant input's left limit enters its direct term)."""

    def __init__(
        self,
        controller: Controller,
        plant: Controller,
        delay_u: float,
        delay_d: float,
        r: float,
        dist: float,
        prefilter: Controller | None = None,
    ):
        t = controller.sample_period_s
        self.t = t
        self.ap, self.bp, self.cp, self.dp = _realize(plant, "plant.model")
        self.ac, self.bc, self.cc, self.dc = _realize(controller)
        self.phi, _ = _phi_gamma(self.ap, self.bp, t)
        self.n, self.g0, self.g1 = _delay_taps(self.ap, self.bp, t, delay_u)
        self.nd, self.g0d, self.g1d = _delay_taps(self.ap, self.bp, t, delay_d)
        self.delay_u, self.delay_d = delay_u, delay_d
        self.r, self.dist = r, dist
        self.np_, self.nc = self.ap.shape[0], self.ac.shape[0]
        self.iu = self.np_ + self.nc
        self.pre = _pre(prefilter, r, t)
        self.dim = self.iu + self.n + 2 + self.pre.n
        self.pre.place(self.dim - 1 - self.pre.n)
        self.boundaries = (self.nd, self.nd + 1) if dist else ()

    def key(self, k: int):
        if not self.dist:
            return 2
        return 0 if k < self.nd else (1 if k == self.nd else 2)

    def build(self, key, mode):
        np_, iu, dim, n = self.np_, self.iu, self.dim, self.n
        one = dim - 1
        unit = np.eye(dim)
        y_row = np.zeros(dim)
        y_row[:np_] = self.cp[0]
        y_row[iu + n] += self.dp
        if key == 2:
            y_row[one] += self.dp * self.dist
        e_row = self.pre.error_row(unit, one) - y_row
        v_row = np.zeros(dim)
        v_row[np_:iu] = self.cc[0]
        v_row += self.dc * e_row
        if self.pre.added:
            v_row += self.pre.output_row(unit, one)
        u_row = v_row if mode == "lin" else (self.lo if mode == "lo" else self.hi) * unit[one]
        a = np.zeros((dim, dim))
        u_kn = u_row if n == 0 else unit[iu + n - 1]
        a[:np_, :np_] = self.phi
        a[:np_] += np.outer(self.g0, u_kn) + np.outer(self.g1, unit[iu + n])
        if key >= 1:
            a[:np_, one] += self.dist * (self.g0d if key == 1 else self.g0d + self.g1d)
        a[np_:iu, np_:iu] = self.ac
        a[np_:iu] += np.outer(self.bc[:, 0], e_row)
        a[iu] = u_row
        a[iu + 1 : iu + n + 1, iu : iu + n] = np.eye(n)
        self.pre.advance(a, one)
        a[one, one] = 1.0
        return a, y_row, u_row, v_row

    def intersample(self, every: int):
        """Per sub-step i (1..every−1) at s = i·T/every: the row on x_k and the coefficients of
        (u_{k−n−1}, u_{k−n}) and of the load's (older, newer) held values in y(kT + s⁻).

        The input switches from the older to the newer held value at kT + τ; with
        E(s) = [[Φ(s), Γ(s)], [0, 1]] = E(h)^i, the part after the switch is Γ(s − τ) (read from
        E(s)·E(−τ)) and the part before it Γ(s) − Γ(s − τ)."""
        np_ = self.np_
        m = np.zeros((np_ + 1, np_ + 1))
        m[:np_, :np_] = self.ap
        m[:np_, np_:] = self.bp
        step = expm(m * (self.t / every))
        tau = self.delay_u - self.n * self.t
        tau_d = self.delay_d - self.nd * self.t
        back = {x: (expm(-m * x) if x > 0 else None) for x in {tau, tau_d}}
        cp, dp = self.cp[0], self.dp
        out = []
        e = np.eye(np_ + 1)
        for i in range(1, every):
            e = e @ step
            s = i * self.t / every
            row = cp @ e[:np_, :np_]

            def split(x, e=e, s=s):
                g_s = cp @ e[:np_, np_]
                if s <= x + 1e-12 * self.t:
                    return float(g_s + dp), 0.0
                g_after = cp @ (e @ back[x])[:np_, np_] if back[x] is not None else g_s
                return float(g_s - g_after), float(g_after + dp)

            out.append((row, split(tau), split(tau_d)))
        return out


def sampled_loop_matrix(controller: Controller, plant: Controller, delay_s: float) -> np.ndarray:
    """The closed-loop state matrix (one period T) of a digital ``controller`` with an analog
    ``plant`` whose input is delayed ``delay_s`` (dead time + computation delay), zero-order hold:
    its eigenvalues are the sampled-data loop's poles (states: plant, controller, held outputs)."""
    sys = _SampledLoop(controller, plant, delay_s, delay_s, 0.0, 0.0)
    sys.lo, sys.hi = -math.inf, math.inf
    a, _, _, _ = sys.build(2, "lin")
    return a[:-1, :-1]


class _AnalogLoop(_LoopSystem):
    """An analog controller and plant at step h. Without dead time the closed loop is one
    linear system, discretized exactly (matrix exponential): exact at every step. With dead time
    θ = m·h the plant's input is the controller output m steps back; between samples it is taken
    as linear (first-order hold: the plant and controller are discretized exactly for inputs
    linear over a step), an error of order (ω·h)²/8 of the signal's curvature, with h tied to the
    loop's dynamics. State: [plant x; controller xc; u_{k−1} … u_{k−m}; 1]."""

    def __init__(
        self,
        controller: Controller,
        plant: Controller,
        theta: float,
        h: float,
        r: float,
        dist: float,
        prefilter: Controller | None = None,
    ):
        self.ap, self.bp, self.cp, self.dp = _realize(plant, "plant.model")
        self.ac, self.bc, self.cc, self.dc = _realize(controller)
        self.r, self.dist, self.h = r, dist, h
        self.np_, self.nc = self.ap.shape[0], self.ac.shape[0]
        self.iu = self.np_ + self.nc
        self.m = int(round(theta / h)) if theta > 0 else 0
        self.pre = _pre(prefilter, r, h, continuous=not self.m)
        self.dim = self.iu + self.m + 1 + self.pre.n
        self.pre.place(self.dim - 1 - self.pre.n)
        if self.m:
            self.pf = _foh(self.ap, self.bp, h)
            self.cf = _foh(self.ac, self.bc, h)
            self.boundaries = (self.m - 1, self.m, self.m + 1)
        else:
            self.boundaries = ()

    def key(self, k: int):
        if not self.m:
            return 0
        m = self.m
        return (k == m - 1, k == m, k >= m, k >= m + 1)

    def build(self, key, mode):
        if not self.m:
            return self._build_direct(mode)
        first, at_m, d_on, d_left = key
        np_, iu, dim, m = self.np_, self.iu, self.dim, self.m
        one = dim - 1
        unit = np.eye(dim)
        cp, dp = self.cp[0], self.dp
        y_row = np.zeros(dim)
        y_row[:np_] = cp
        if not at_m:
            y_row[iu + m - 1] += dp  # u_{k−m}, left limit (zero just after the setpoint step)
        if d_left:
            y_row[one] += dp * self.dist
        e_row = self.pre.error_row(unit, one) - y_row
        v_row = np.zeros(dim)
        v_row[np_:iu] = self.cc[0]
        v_row += self.dc * e_row
        if self.pre.added:
            v_row += self.pre.output_row(unit, one)
        u_row = v_row if mode == "lin" else (self.lo if mode == "lo" else self.hi) * unit[one]
        # u_{k−m+1} at its left limit (u_0⁻ = 0: the controller output was zero before t = 0)
        newer = np.zeros(dim) if first else (u_row if m == 1 else unit[iu + m - 2])
        phi, gs, ge = self.pf
        x_next = np.zeros((np_, dim))
        x_next[:, :np_] = phi
        x_next += np.outer(gs, unit[iu + m - 1]) + np.outer(ge, newer)
        if d_on:
            x_next[:, one] += (gs + ge) * self.dist
        y_next = cp @ x_next + dp * newer
        if d_on:  # the load reached the plant input at θ: y_{k+1}'s direct term sees it
            y_next = y_next + dp * self.dist * unit[one]
        e_next = self.pre.error_next_row(unit, one) - y_next
        phic, cs, ce = self.cf
        a = np.zeros((dim, dim))
        a[:np_] = x_next
        a[np_:iu, np_:iu] = phic
        a[np_:iu] += np.outer(cs, e_row) + np.outer(ce, e_next)
        a[iu] = u_row
        a[iu + 1 : iu + m, iu : iu + m - 1] = np.eye(m - 1)
        self.pre.advance(a, one)
        a[one, one] = 1.0
        return a, y_row, u_row, v_row

    def _build_direct(self, mode):
        """No dead time: the continuous closed loop (or, clamped, the plant on a constant input and
        the controller on the measurement), discretized exactly over h."""
        np_, iu, dim = self.np_, self.iu, self.dim
        one = dim - 1
        unit = np.eye(dim)
        cp, dp, cc, dc = self.cp[0], self.dp, self.cc[0], self.dc
        ref = self.pre.error_row(unit, one)
        w = self.pre.output_row(unit, one) if self.pre.added else np.zeros(dim)
        if mode == "lin":
            # y = Cp x + Dp (Cc xc + Dc (r − y) + d)
            g = 1.0 + dp * dc
            if g == 0:
                raise InputError(
                    "the loop has no solution at t = 0: controller and plant direct gains give 1 + Dc·Dp = 0",
                    key="plant.model",
                )
            y_row = np.zeros(dim)
            y_row[:np_] = cp
            y_row[np_:iu] = dp * cc
            y_row[one] = dp * self.dist
            y_row += dp * dc * ref + dp * w
            y_row /= g
            v_row = np.zeros(dim)
            v_row[np_:iu] = cc
            v_row += dc * (ref - y_row) + w
            u_row = v_row
        else:
            lim = self.lo if mode == "lo" else self.hi
            u_row = lim * unit[one]
            y_row = np.zeros(dim)
            y_row[:np_] = cp
            y_row[one] = dp * (lim + self.dist)
            v_row = np.zeros(dim)
            v_row[np_:iu] = cc
            v_row += dc * (ref - y_row) + w
        e_row = ref - y_row
        ac = np.zeros((dim, dim))
        ac[:np_, :np_] = self.ap
        ac[:np_] += np.outer(self.bp[:, 0], u_row + self.dist * unit[one])
        ac[np_:iu, np_:iu] = self.ac
        ac[np_:iu] += np.outer(self.bc[:, 0], e_row)
        self.pre.advance(ac, one)
        return expm(ac * self.h), y_row, u_row, v_row


class _CascadeLoop(_LoopSystem):
    """An analog loop with dead time θ = m·h and no clamp acting, written as the cascade
    controller → plant driven by the error e(t − θ): the controller and plant are discretized
    together, exactly for an error linear over each step (first-order hold), so the controller's
    fast response to the setpoint step (a derivative kick) is exact, and only the smooth
    measurement is interpolated between samples. The controller's states m steps later are its
    states now, which gives its output u_k = Cc·xc_{k+m} + Dc·e_k. State:
    [controller xc (delayed by θ); plant x; e_{k−1} … e_{k−m}; 1]. Strictly proper plants."""

    def __init__(
        self,
        controller: Controller,
        plant: Controller,
        theta: float,
        h: float,
        r: float,
        dist: float,
        prefilter: Controller | None = None,
    ):
        ap, bp, cp, dp = _realize(plant, "plant.model")
        ac, bc, cc, dc = _realize(controller)
        self.nc, self.np_ = ac.shape[0], ap.shape[0]
        self.cc, self.dc = cc, dc
        n = self.nc + self.np_
        a = np.zeros((n, n))
        a[: self.nc, : self.nc] = ac
        a[self.nc :, : self.nc] = bp @ cc
        a[self.nc :, self.nc :] = ap
        b_e = np.vstack([bc, bp * dc])
        b_d = np.vstack([np.zeros((self.nc, 1)), bp])
        self.phi, self.gs, self.ge = _foh(a, b_e, h)
        self.gd = _phi_gamma(a, b_d, h)[1][:, 0]
        self.c = np.concatenate([np.zeros(self.nc), cp[0]])
        self.m = int(round(theta / h))
        self.r, self.dist = r, dist
        self.ng = n
        self.pre = _Prefilter(prefilter, r, h)
        self.dim = n + self.m + 1 + self.pre.n
        self.pre.place(self.dim - 1 - self.pre.n)
        self.boundaries = (self.m - 1, self.m)

    def key(self, k: int):
        return (k == self.m - 1, k >= self.m)

    def build(self, key, mode):
        first, d_on = key
        ng, m, dim = self.ng, self.m, self.dim
        one = dim - 1
        unit = np.eye(dim)
        y_row = np.zeros(dim)
        y_row[:ng] = self.c
        e_row = self.pre.row(unit, one) - y_row
        self._ref = self.pre.row(unit, one)
        older = unit[ng + m - 1]
        newer = np.zeros(dim) if first else (e_row if m == 1 else unit[ng + m - 2])
        a = np.zeros((dim, dim))
        a[:ng, :ng] = self.phi
        a[:ng] += np.outer(self.gs, older) + np.outer(self.ge, newer)
        if d_on:
            a[:ng, one] += self.gd * self.dist
        a[ng] = e_row
        a[ng + 1 : ng + m, ng : ng + m - 1] = np.eye(m - 1)
        self.pre.advance(a, one)
        a[one, one] = 1.0
        return a, y_row, np.zeros(dim), np.zeros(dim)

    def extra(self, key, mode, zs, u_seg):
        y = zs[:, : self.ng] @ self.c
        return zs[:, : self.nc] @ self.cc[0], zs @ self._ref - y

    def outputs(self, extras, steps: int) -> np.ndarray:
        """u_k = Cc·xc_{k+m} + Dc·e_k for k = 0..steps."""
        cx = np.concatenate([e[0] for e in extras])
        e = np.concatenate([e[1] for e in extras])
        return cx[self.m : self.m + steps + 1] + self.dc * e[: steps + 1]


#: The simulation step is this fraction of 1/ω, ω the loop's speed (see :func:`natural_step`).
STEP_FRACTION = 0.02
#: Modes faster than this multiple of the crossover do not shorten the step further.
FAST_CAP = 5.0
#: At most this many steps of dead time (the state carries one held output per step).
MAX_DELAY_STEPS = 128


def natural_step(controller: Controller, plant: Controller, dead_time_s: float = 0.0) -> float:
    """The simulation step (s) tied to the loop's dynamics, never to the simulated time:
    STEP_FRACTION/ω, with ω (rad/s) the largest of the crossover and the magnitudes of the
    plant's poles and an analog controller's poles and zeros, each capped at FAST_CAP times the
    crossover. Faster modes are still integrated exactly (matrix exponentials); they only enter
    through the first-order hold of the delayed controller output, where they act for a step or
    two after the setpoint and load steps (tests check the result against an independent
    fine-step simulation and python-control for 10× to 1000× the settling time)."""
    try:
        m = loop_margins(controller, plant, dead_time_s)
        wc = 2 * math.pi * m.crossover_hz if m.crossover_hz else None
    except Exception:  # noqa: BLE001 - a loop without margins still gets a step
        wc = None
    roots = plant.poles()
    if not controller.is_digital:
        roots = np.concatenate([roots, controller.poles(), controller.zeros()])
    mags = np.abs(roots[np.abs(roots) > 0])
    if wc is None:
        wc = float(np.median(mags)) if mags.size else 1.0
    w = max([wc] + [min(x, FAST_CAP * wc) for x in mags])
    return STEP_FRACTION / w


def simulate_loop(
    controller: Controller,
    plant: Controller,
    dead_time_s: float = 0.0,
    *,
    duration_s: float,
    kind: str = "setpoint",
    step: float = 1.0,
    delay_s: float = 0.0,
    output_limits: tuple[float, float] | None = None,
    steps: int | None = None,
    sub_step_s: float | None = None,
    realized=None,
    setpoint_filter: Controller | None = None,
) -> LoopResponse:
    """Simulate the loop's response to a setpoint step (``kind="setpoint"``) or a load-disturbance
    step at the plant input (``kind="disturbance"``), both applied at t = 0 with size ``step``.

    The step h between output points follows the loop's dynamics (:func:`natural_step`), not the
    simulated time, unless ``sub_step_s`` (s) or ``steps`` (h = duration/steps) is given.

    ``controller`` digital: samples y every T, updates its output through a zero-order hold,
    ``delay_s`` seconds later (computation delay); the plant between samples is exact
    (:class:`_SampledLoop`), h divides T. ``controller`` analog: :class:`_AnalogLoop` (exact without
    dead time; first-order hold of the delayed output with one). ``output_limits`` (low, high)
    clamps the controller output (no anti-windup: the controller's state is not altered by the
    clamp). ``plant`` is an analog proper transfer function; ``dead_time_s`` a pure delay at its
    input. Linear stretches are advanced as matrix powers (:class:`_Orbit`), the clamp by
    segments (:func:`_run`).

    ``realized`` (a digital controller's firmware realization,
    :class:`convert.digital.fixedpoint.Realized`): its arithmetic model computes the output
    sample by sample (bit-true for fixed point; :func:`_simulate_realized`), the plant as above.

    ``setpoint_filter`` F (a setpoint step only): the 2-DOF law u = C_sp·r − C·y, simulated as
    u = C·(F·r − y) with F = C_sp/C (a PID with setpoint weights b, c; a two-input card's setpoint
    path over its feedback controller). F's own states join the loop's state, so the result is
    as exact as the unity-error loop's (analog F: exact for the step; with a digital controller
    the filtered setpoint is sampled at the controller's instants, or a digital F with the
    controller's period runs once per sample). F must be proper and stable. The load-disturbance
    response does not depend on F (it is ignored for ``kind="disturbance"``).
    """
    if kind not in ("setpoint", "disturbance"):
        raise ValueError("kind must be 'setpoint' or 'disturbance'")
    if plant.is_digital or not plant.is_proper:
        raise InputError("the plant must be an analog, proper transfer function", key="plant.model")
    if not (duration_s > 0 and math.isfinite(duration_s)):
        raise InputError(f"the simulated time must be positive, found {duration_s!r}", key="duration")
    if not controller.is_proper:
        _realize(controller)  # raises the improper-controller error
    if sub_step_s is not None:
        h = float(sub_step_s)
    elif steps is not None:
        h = duration_s / steps
    else:
        h = natural_step(controller, plant, dead_time_s)
    r = step if kind == "setpoint" else 0.0
    dist = step if kind == "disturbance" else 0.0
    pre = setpoint_filter if kind == "setpoint" else None
    if pre is not None:
        pre = _check_prefilter(pre, controller)
    lo, hi = output_limits if output_limits else (-math.inf, math.inf)
    # An unstable loop grows like |λ|^k: past k ≈ 709/ln|λ| steps its true output (and the matrix
    # powers _Orbit forms, A^(64^L)) exceeds the float range. That is the loop's own behaviour, not a
    # numerical accident: the outputs become inf/nan from there on (response_deviation then gives
    # inf, which the verdict skips as "not finite"; the closed-loop stability check fails such a
    # loop on its own), and numpy's overflow warnings are not shown to the user.
    with np.errstate(over="ignore", invalid="ignore"):
        return _simulate(controller, plant, dead_time_s, delay_s, duration_s, h, r, dist, (lo, hi), kind, realized, pre)


def _simulate(controller, plant, dead_time_s, delay_s, duration_s, h, r, dist, limits, kind, realized, pre=None):
    lo, hi = limits
    if controller.is_digital and realized is not None:
        return _simulate_realized(
            realized.model(),
            controller.sample_period_s,
            plant,
            dead_time_s,
            delay_s,
            duration_s,
            h,
            r,
            dist,
            (lo, hi),
            kind,
            pre,
        )
    with one_blas_thread():
        if controller.is_digital:
            return _simulate_sampled(
                controller, plant, dead_time_s, delay_s, duration_s, h, r, dist, (lo, hi), kind, pre
            )
        return _simulate_analog(controller, plant, dead_time_s, duration_s, h, r, dist, (lo, hi), kind, pre)


def _check_prefilter(f: Controller, controller: Controller):
    """F checked; an improper F is returned as ``("added", G)`` with G = C·(F − 1) = C_sp − C."""
    if not f.is_proper:
        fn, fd = np.asarray(f.num, float), np.asarray(f.den, float)
        g = (
            Controller.analog(
                np.polymul(np.polysub(fn, fd), controller.num),
                np.polymul(fd, controller.den),
                name="setpoint path minus feedback path",
            )
            if not f.is_digital
            else None
        )
        if g is None or controller.is_digital or not g.is_proper:
            raise InputError("the setpoint path C_sp = F·C is improper and cannot be simulated", key="setpoint filter")
        return ("added", g)
    if f.is_digital and (
        not controller.is_digital or not math.isclose(f.sample_period_s, controller.sample_period_s, rel_tol=1e-9)
    ):
        raise ValueError("a digital setpoint filter needs a digital controller with the same sample period")
    p = f.poles()
    bad = np.abs(p) >= 1 - 1e-9 if f.is_digital else p.real >= -1e-12 * max(1.0, float(np.max(np.abs(p), initial=0)))
    if np.any(bad):
        raise InputError(
            "the setpoint filter F = C_sp/C has a pole on or beyond the stability boundary (a zero of "
            "the feedback controller there): the setpoint step cannot be simulated through it",
            key="setpoint filter",
        )
    return f


def _pre(pre, r: float, step_s: float | None, continuous: bool = False) -> _Prefilter:
    if isinstance(pre, tuple):
        return _Prefilter(pre[1], r, step_s, continuous, added=True)
    return _Prefilter(pre, r, step_s, continuous)


def one_blas_thread():
    """BLAS limited to one thread while the loop is simulated (its matrices are small, and waking
    a second thread costs more than the product): the one scoped limit the package has,
    :data:`convert.digital.statespace.small_dense`."""

    return small_dense


def _simulate_analog(controller, plant, dead_time_s, duration_s, h, r, dist, limits, kind, pre=None):
    lo, hi = limits
    if dead_time_s > 0:
        m = max(1, int(math.ceil(dead_time_s / h - 1e-9)))
        if m > MAX_DELAY_STEPS:
            m = MAX_DELAY_STEPS
        h = dead_time_s / m
    n_steps = int(math.ceil(duration_s / h - 1e-9))
    _check_steps(n_steps, h, duration_s)
    if dead_time_s > 0 and plant.is_strictly_proper and not isinstance(pre, tuple):
        # the controller's own fast response to the steps is exact in the cascade form; it holds
        # while the clamp does not act (checked on its result)
        casc = _CascadeLoop(controller, plant, dead_time_s, h, r, dist, pre)
        y, _, extras = _run(casc, n_steps + casc.m, (-math.inf, math.inf), casc.extra)
        u = casc.outputs(extras, n_steps)
        tol = 1e-12 * max([1.0] + [abs(x) for x in (lo, hi) if math.isfinite(x)])
        if np.all((u >= lo - tol) & (u <= hi + tol)):
            u = np.clip(u, lo, hi)
            return LoopResponse(t=np.arange(n_steps + 1) * h, y=y[: n_steps + 1], u=u, kind=kind, sub_step_s=h)
    sys = _AnalogLoop(controller, plant, dead_time_s, h, r, dist, pre)
    sys.lo, sys.hi = lo, hi
    y, u, _ = _run(sys, n_steps, (lo, hi))
    return LoopResponse(t=np.arange(n_steps + 1) * h, y=y, u=u, kind=kind, sub_step_s=h)


def _check_steps(n: int, h: float, duration_s: float) -> None:
    if n > MAX_SIM_STEPS:
        raise InputError(
            f"the loop simulation would need {n} steps ({h:.3g} s each over {duration_s:g} s); "
            "shorten signals.duration",
            key="signals.duration",
        )


def _simulate_sampled(controller, plant, dead_time_s, delay_s, duration_s, h, r, dist, limits, kind, pre=None):
    t_s = controller.sample_period_s
    every = max(1, int(math.ceil(t_s / h - 1e-9)))
    h = t_s / every
    steps = int(math.ceil(duration_s / h - 1e-9))
    _check_steps(steps, h, duration_s)
    samples = steps // every + 1
    sys = _SampledLoop(controller, plant, dead_time_s + delay_s, dead_time_s, r, dist, pre)
    sys.lo, sys.hi = limits
    n, nd, np_, iu = sys.n, sys.nd, sys.np_, sys.iu
    need_inter = every > 1

    def extra(key, mode, zs, u_seg):
        if not need_inter:
            return None
        older = zs[:, iu + n]
        newer = u_seg if n == 0 else zs[:, iu + n - 1]
        return zs[:, :np_].copy(), older.copy(), newer.copy()

    y_s, u_s, extras = _run(sys, samples - 1, limits, extra)
    if not need_inter:
        y, u = y_s, u_s
    else:
        x = np.concatenate([e[0] for e in extras])
        older = np.concatenate([e[1] for e in extras])
        newer = np.concatenate([e[2] for e in extras])
        k = np.arange(samples)
        d_old = dist * (k - nd - 1 >= 0)
        d_new = dist * (k - nd >= 0)
        y = np.empty((samples, every))
        y[:, 0] = y_s
        for i, (row, cu, cd) in enumerate(sys.intersample(every), start=1):
            y[:, i] = x @ row + cu[0] * older + cu[1] * newer + cd[0] * d_old + cd[1] * d_new
        y = y.reshape(-1)
        u = np.repeat(u_s, every)
    y = y[: steps + 1]
    u = u[: steps + 1]
    return LoopResponse(t=np.arange(steps + 1) * h, y=y, u=u, kind=kind, sub_step_s=h)


def _plant_stepper(phi, g0_u, g1_u, g0_d, g1_d, c_row, d_p):
    """(advance, output) of the plant on the sub-step grid, on Python floats: ``advance(x, wu0,
    wu1, wd0, wd1)`` = Φ·x + G0u·wu0 + G1u·wu1 + G0d·wd0 + G1d·wd1 and ``output(x, u_in)`` =
    C·x + D·u_in, each row summed left to right from 0.0 (what ``sum(map(mul, row, x))`` did
    before Python 3.12 made sum() compensated; :func:`_compiled_loop` sums so too), written out
    for one and two states, the common plants."""
    rows = list(zip(phi.tolist(), g0_u.tolist(), g1_u.tolist(), g0_d.tolist(), g1_d.tolist()))
    if len(rows) == 1:
        ((p00,), a0, a1, b0, b1) = rows[0]
        (c0,) = c_row

        def advance(x, wu0, wu1, wd0, wd1):
            return (0.0 + p00 * x[0] + a0 * wu0 + a1 * wu1 + b0 * wd0 + b1 * wd1,)

        def output(x, u_in):
            return 0.0 + c0 * x[0] + d_p * u_in

        return advance, output
    if len(rows) == 2:
        ((p00, p01), a00, a10, b00, b10), ((p10, p11), a01, a11, b01, b11) = rows
        c0, c1 = c_row

        def advance(x, wu0, wu1, wd0, wd1):
            x0, x1 = x
            return (
                0.0 + p00 * x0 + p01 * x1 + a00 * wu0 + a10 * wu1 + b00 * wd0 + b10 * wd1,
                0.0 + p10 * x0 + p11 * x1 + a01 * wu0 + a11 * wu1 + b01 * wd0 + b11 * wd1,
            )

        def output(x, u_in):
            return 0.0 + c0 * x[0] + c1 * x[1] + d_p * u_in

        return advance, output

    def dot(row, x):
        acc = 0.0
        for p, xi in zip(row, x):
            acc = acc + p * xi
        return acc

    def advance(x, wu0, wu1, wd0, wd1):
        return [dot(row, x) + a0 * wu0 + a1 * wu1 + b0 * wd0 + b1 * wd1 for row, a0, a1, b0, b1 in rows]

    def output(x, u_in):
        return dot(c_row, x) + d_p * u_in

    return advance, output


@functools.lru_cache(maxsize=64)
def _compiled_loop(dim: int, lines: tuple[str, ...], consts: tuple[str, ...], states: tuple[str, ...]):
    """The loop of :func:`_simulate_realized` with a model's step (its ``kernel()`` source lines)
    and a ``dim``-state plant written out as one Python function (compiled once per shape; the
    numbers are its arguments): no call per sample. Every operation is the one the step-by-step
    loop makes, in its order (rows summed from 0.0, left to right, as :func:`_plant_stepper`
    does), so the floats are the same (tests/test_loop_realized.py compares the two runs)."""
    xs = [f"x_{i}" for i in range(dim)]
    taps = ("g0u", "g1u", "g0d", "g1d")
    plant_names = [f"p_{i}_{j}" for i in range(dim) for j in range(dim)]
    plant_names += [f"{g}_{i}" for g in taps for i in range(dim)] + [f"c_{i}" for i in range(dim)] + ["d_p"]
    rows = [
        " + ".join(["0.0"] + [f"p_{i}_{j} * x_{j}" for j in range(dim)])
        + f" + g0u_{i} * wu0 + g1u_{i} * wu1 + g0d_{i} * wd0 + g1d_{i} * wd1"
        for i in range(dim)
    ]
    body = [
        "def run(steps, every, n_u, n_d, dist, lo, hi, ref, plant, consts, states):",
        f"    ({', '.join(plant_names)},) = plant",
        *([f"    ({', '.join(consts)},) = consts"] if consts else []),
        *([f"    ({', '.join(states)},) = states"] if states else []),
        *[f"    {x} = 0.0" for x in xs],
        "    u_hist = []",
        "    y_out = [0.0] * (steps + 1)",
        "    u_out = [0.0] * (steps + 1)",
        "    u_now = u_in = 0.0",
        "    for k in range(steps + 1):",
        "        y = " + " + ".join(["0.0"] + [f"c_{i} * x_{i}" for i in range(dim)] + ["d_p * u_in"]),
        "        if k % every == 0:",
        "            v = ref[k // every] - y",
        *[f"            {line}" for line in lines],
        "            v = float(v)",
        "            u_now = lo if v < lo else hi if v > hi else v",
        "        u_hist.append(u_now)",
        "        y_out[k] = y",
        "        u_out[k] = u_now",
        "        if k == steps:",
        "            break",
        "        j = k - n_u",
        "        wu0 = u_hist[j] if j >= 0 else 0.0",
        "        wu1 = u_hist[j - 1] if j >= 1 else 0.0",
        "        wd0 = dist if k >= n_d else 0.0",
        "        wd1 = dist if k >= n_d + 1 else 0.0",
        *([f"        {', '.join(xs)} = {', '.join(f'({r})' for r in rows)}"] if dim else []),
        "        u_in = wu0 + wd0",
        f"    return y_out, u_out, ({''.join(name + ', ' for name in states)})",
    ]
    namespace: dict = {}
    exec(compile("\n".join(body), "<loopshift: compiled loop with firmware>", "exec"), namespace)  # noqa: S102
    return namespace["run"]


def _simulate_realized(model, t_s, plant, dead_time_s, delay_s, duration_s, h, r, dist, limits, kind, pre=None):
    """The sampled loop with a nonlinear controller model (``model.step(e) -> u``, user units, or
    ``model.step(r, y)`` when ``model.two_inputs``, a PID block weighing the setpoint itself): the
    plant advanced exactly at the sub-step h (a divisor of T) with its input's fractional delays
    (:func:`_delay_taps`), the model called once per sample, its output held and clamped. The
    caller holds ``np.errstate(over="ignore", invalid="ignore")``, so a model's
    ``unguarded_step`` is called where it has one."""
    every = max(1, int(math.ceil(t_s / h - 1e-9)))
    h = t_s / every
    steps = int(math.ceil(duration_s / h - 1e-9))
    _check_steps(steps, h, duration_s)
    ap, bp, cp, dp = _realize(plant, "plant.model")
    phi, _ = _phi_gamma(ap, bp, h)
    n_u, g0_u, g1_u = _delay_taps(ap, bp, h, dead_time_s + delay_s)
    n_d, g0_d, g1_d = _delay_taps(ap, bp, h, dead_time_s)
    advance, output = _plant_stepper(phi, g0_u, g1_u, g0_d, g1_d, cp[0].tolist(), float(dp))
    lo, hi = limits
    x = [0.0] * phi.shape[0]
    u_hist: list[float] = []
    y_out = [0.0] * (steps + 1)
    u_out = [0.0] * (steps + 1)
    u_now = u_in = 0.0
    ref = _Prefilter(pre, r, t_s).samples(steps // every + 1).tolist()
    two = getattr(model, "two_inputs", False)  # a PID block: step(setpoint, measurement)
    if hasattr(model, "kernel") and not two:
        lines, consts, states = model.kernel()
        plant_values = phi.ravel().tolist() + g0_u.tolist() + g1_u.tolist() + g0_d.tolist() + g1_d.tolist()
        run = _compiled_loop(phi.shape[0], tuple(lines), tuple(consts), tuple(name for name, _ in states))
        y_out, u_out, final = run(
            steps, every, n_u, n_d, dist, lo, hi, ref,
            plant_values + cp[0].tolist() + [float(dp)], tuple(consts.values()), tuple(v for _, v in states),
        )  # fmt: skip
        model.store_kernel_states(final)
        return LoopResponse(t=np.arange(steps + 1) * h, y=np.array(y_out), u=np.array(u_out), kind=kind, sub_step_s=h)
    step = getattr(model, "unguarded_step", model.step)
    for k in range(steps + 1):
        y = output(x, u_in)
        if k % every == 0:
            v = step(ref[k // every], y) if two else step(ref[k // every] - y)
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
        x = advance(x, wu0, wu1, wd0, wd1)
        u_in = wu0 + wd0
    return LoopResponse(t=np.arange(steps + 1) * h, y=np.array(y_out), u=np.array(u_out), kind=kind, sub_step_s=h)


def response_deviation(reference: LoopResponse, candidate: LoopResponse) -> float:
    """max |y_candidate − y_reference| over the time both cover, read on the finer of the two
    grids (the other response interpolated linearly; both grids follow the loop's dynamics, so a
    coarse grid of one form does not hide the other's intersample behaviour). ``inf`` when either
    response left the float range (a diverging loop, see :func:`simulate_loop`)."""
    if not (np.all(np.isfinite(reference.y)) and np.all(np.isfinite(candidate.y))):
        return math.inf
    end = min(reference.t[-1], candidate.t[-1])
    if candidate.sub_step_s < reference.sub_step_s:
        t = candidate.t[candidate.t <= end]
        return float(np.max(np.abs(candidate.y[: t.size] - np.interp(t, reference.t, reference.y))))
    t = reference.t[reference.t <= end]
    return float(np.max(np.abs(np.interp(t, candidate.t, candidate.y) - reference.y[: t.size])))


def default_duration(controller: Controller, plant: Controller, dead_time_s: float = 0.0) -> float:
    """A simulated time long enough to see the loop settle (s).

    From the closed loop with a second-order Padé stand-in for the dead time: 6 time constants of
    the slowest stable closed-loop pole, kept between 10/ω_c and 80/ω_c, plus 3 dead times
    (common practice for choosing a simulation horizon)."""
    m = loop_margins(controller, plant, dead_time_s)
    wc = 2 * np.pi * (m.crossover_hz or 1.0)
    theta = dead_time_s
    if theta > 0:
        pad_num = np.array([theta**2 / 12, -theta / 2, 1.0])
        pad_den = np.array([theta**2 / 12, theta / 2, 1.0])
    else:
        pad_num = pad_den = np.array([1.0])
    if controller.is_digital:  # no analog stand-in here: fall back to the crossover rule
        return float(30.0 / wc + 3 * theta)
    c_num, c_den = np.array(controller.num), np.array(controller.den)
    den = np.polyadd(
        np.polymul(np.polymul(c_den, plant.den), pad_den), np.polymul(np.polymul(c_num, plant.num), pad_num)
    )
    poles = np.roots(den)
    stable = [-p.real for p in poles if p.real < -1e-12]
    slow = min(stable) if stable else wc / 10
    t = 6.0 / slow
    t = min(max(t, 10.0 / wc), 80.0 / wc)
    return float(t + 3 * theta)
