"""The searches in log frequency (``convert.compare.refine``) and the refinements built on them
(``refine_maximum`` of the frequency comparison, ``loop_margins``) against scipy.optimize:
``minimize_scalar(method="bounded")`` (Brent's bounded search) and ``brentq``, the scalar
searches they replaced, run on the same functions. The responses are varied: second-order
resonances with Q from 0.5 to 50, pure delays against their Padé forms, and digital (Tustin)
forms with resonances close to the Nyquist frequency. The test functions are written here with
numpy (closed forms of the transfer functions), independently of ``convert``'s evaluation.
"""

from __future__ import annotations

import math
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from scipy.optimize import brentq, minimize_scalar

from convert.compare.frequency import REFINE_REL, log_grid, refine_maximum
from convert.compare.loop import loop_margins
from convert.compare.refine import maximize_in_brackets, root_in_bracket
from convert.controller import Controller

Q_VALUES = (0.5, 0.707, 2.0, 10.0, 50.0)


def _resonance(f0_hz: float, q: float):
    """H(jω) = 1/((s/ω0)² + s/(Q·ω0) + 1) as a function of f (Hz)."""

    def h(f):
        s = 1j * np.asarray(f, dtype=float) / f0_hz
        return 1.0 / (s * s + s / q + 1.0)

    return h


def _tustin_resonance(f0_hz: float, q: float, fs_hz: float):
    """The Tustin form of :func:`_resonance` (prewarped at f0), z^-1 polynomials by hand
    (s = 2·fs·(1 − z^-1)/(1 + z^-1), the bilinear map; common practice), evaluated at
    z = e^{j2πf/fs}."""
    w0 = 2 * fs_hz * math.tan(math.pi * f0_hz / fs_hz)  # prewarped ω0 (rad/s)
    k = 2 * fs_hz / w0
    # (k·(1−z⁻¹))² + k·(1−z⁻¹)(1+z⁻¹)/Q + (1+z⁻¹)²  over  (1+z⁻¹)²
    a = np.array([k * k + k / q + 1, -2 * k * k + 2, k * k - k / q + 1])
    b = np.array([1.0, 2.0, 1.0])

    def h(f):
        zi = np.exp(-2j * np.pi * np.asarray(f, dtype=float) / fs_hz)
        return (b[0] + b[1] * zi + b[2] * zi * zi) / (a[0] + a[1] * zi + a[2] * zi * zi)

    return h


def _gain_error(ref, cand):
    def g(f):
        with np.errstate(divide="ignore"):
            return np.abs(20 * np.log10(np.abs(cand(f) / ref(f))))

    return g


def _phase_error(ref, cand):
    def p(f):
        return np.abs(np.degrees(np.angle(cand(f) / ref(f))))

    return p


def _pade22(theta_s: float):
    """e^{−sθ} by its (2,2) Padé form (1 − sθ/2 + (sθ)²/12)/(1 + sθ/2 + (sθ)²/12) (common practice)."""

    def h(f):
        s = 2j * np.pi * np.asarray(f, dtype=float) * theta_s
        return (1 - s / 2 + s * s / 12) / (1 + s / 2 + s * s / 12)

    return h


def _delay(theta_s: float):
    def h(f):
        return np.exp(-2j * np.pi * np.asarray(f, dtype=float) * theta_s)

    return h


def _scipy_refine(value_at, f, values, most=40):
    """The refinement as it was made with scipy: every local maximum of the grid values (the
    ``most`` largest) searched by ``minimize_scalar(method="bounded")`` in ln f over its two grid
    intervals, with a tighter xatol (1e-12) than the tolerance under test."""
    v = np.nan_to_num(values, nan=np.inf)
    best_i = int(np.argmax(v))
    best, at = float(v[best_i]), float(f[best_i])
    left = np.concatenate([[True], v[1:] >= v[:-1]])
    right = np.concatenate([v[:-1] >= v[1:], [True]])
    idx = np.flatnonzero(left & right)
    idx = idx[np.argsort(-v[idx])][:most]
    for i in idx:
        i0, i1 = max(i - 1, 0), min(i + 1, f.size - 1)
        r = minimize_scalar(
            lambda u: -float(value_at(np.array([math.exp(u)]))[0]),
            bounds=(math.log(f[i0]), math.log(f[i1])),
            method="bounded",
            options={"xatol": 1e-12},
        )
        if -r.fun > best:
            best, at = float(-r.fun), float(math.exp(r.x))
    return best, at


def _cases():
    """(name, value function, band in Hz) for the refinement comparisons."""
    out = []
    for q in Q_VALUES:
        ref = _resonance(10.0, q)
        cand = _resonance(10.1, q * 0.97)  # a resonance moved by 1 % and damped a little more
        out.append((f"gain, resonance Q={q}", _gain_error(ref, cand), (0.1, 1000.0)))
        out.append((f"phase, resonance Q={q}", _phase_error(ref, cand), (0.1, 1000.0)))
    for theta, top in ((1e-3, 40.0), (0.02, 20.0)):
        out.append((f"phase, Padé(2,2) of a {theta} s delay", _phase_error(_delay(theta), _pade22(theta)), (0.1, top)))
        ref = lambda f, t=theta: _resonance(5.0, 10.0)(f) * _delay(t)(f)  # noqa: E731
        cand = lambda f, t=theta: _resonance(5.05, 10.0)(f) * _pade22(t)(f)  # noqa: E731
        out.append((f"gain, resonance Q=10 and a {theta} s delay against Padé", _gain_error(ref, cand), (0.1, top)))
        out.append((f"phase, resonance Q=10 and a {theta} s delay against Padé", _phase_error(ref, cand), (0.1, top)))
    fs = 1000.0
    for f0, q in ((400.0, 0.707), (450.0, 5.0), (480.0, 50.0)):
        ana, dig = _resonance(f0, q), _tustin_resonance(f0, q, fs)
        out.append((f"gain, Tustin at f0={f0} Hz of fs={fs} Hz, Q={q}", _gain_error(ana, dig), (1.0, 0.49 * fs)))
        out.append((f"phase, Tustin at f0={f0} Hz of fs={fs} Hz, Q={q}", _phase_error(ana, dig), (1.0, 0.49 * fs)))
    return out


CASES = _cases()


@pytest.mark.parametrize("name,value_at,band", CASES, ids=[c[0] for c in CASES])
def test_refine_maximum_agrees_with_scipy_bounded_search(name, value_at, band):
    """Reference: scipy.optimize.minimize_scalar (bounded Brent) on every grid local maximum, the
    search refine_maximum used before. The maxima agree to 1e-9 relative and ours is never
    smaller beyond rounding; the frequencies agree to REFINE_REL (the guarantee) unless the two
    largest peaks are equal to within that 1e-9 (then either frequency is right)."""
    f = log_grid(*band, 50)
    values = value_at(f)
    ours, ours_at = refine_maximum(value_at, f, values)
    ref, ref_at = _scipy_refine(value_at, f, values)
    assert ours == pytest.approx(ref, rel=1e-9, abs=1e-300)
    assert ours >= ref * (1 - 1e-12)
    assert ours >= float(np.max(values))
    twin = [x for x in (ours_at, ref_at) if abs(value_at(np.array([x]))[0] - ours) <= 1e-9 * ours]
    assert len(twin) == 2
    if abs(ours_at - ref_at) > REFINE_REL * ref_at:
        # two different frequencies give the same maximum: it must be two separate peaks
        mid = math.sqrt(ours_at * ref_at)
        assert value_at(np.array([mid]))[0] < ours * (1 - 1e-9)


@pytest.mark.parametrize("q", Q_VALUES[2:])
def test_peak_of_a_resonance_against_its_closed_form(q):
    """Closed form (common practice): |H| of a second-order resonance peaks at
    f0·√(1 − 1/(2Q²)) with height Q/√(1 − 1/(4Q²)). Our search on the two grid intervals
    around the largest sample finds the height to 1e-12 relative and the frequency to 1e-7
    (asked for 1e-9: near the top of a broad peak the values differ by less than their rounding
    within about √ε relative, so no search locates it closer from the values)."""
    f0 = 10.0
    h = _resonance(f0, q)
    f = log_grid(1.0, 100.0, 20)
    i = int(np.argmax(np.abs(h(f))))
    found, at = maximize_in_brackets(lambda x: np.abs(h(x)), [f[i - 1]], [f[i + 1]], rel_tol=1e-9)
    assert at[0] == pytest.approx(f0 * math.sqrt(1 - 1 / (2 * q * q)), rel=1e-7)
    assert found[0] == pytest.approx(q / math.sqrt(1 - 1 / (4 * q * q)), rel=1e-12)


def test_maximum_at_a_bracket_end_and_values_that_cannot_be_evaluated():
    """A function rising across the whole bracket has its maximum at the upper end, which the
    search samples exactly (scipy's bounded search stops within xatol of it); a NaN inside the
    bracket reads as +∞ (an error that cannot be evaluated is never small)."""
    found, at = maximize_in_brackets(lambda x: np.log(x), [1.0, 2.0], [3.0, 5.0], rel_tol=1e-7)
    assert at.tolist() == pytest.approx([3.0, 5.0], rel=1e-15)
    assert found.tolist() == pytest.approx([math.log(3.0), math.log(5.0)], rel=1e-15)
    ref = minimize_scalar(lambda x: -math.log(x), bounds=(1.0, 3.0), method="bounded", options={"xatol": 1e-7})
    assert found[0] >= -ref.fun
    found, _ = maximize_in_brackets(lambda x: np.where(np.abs(x - 2.0) < 0.1, np.nan, 1.0), [1.0], [3.0], rel_tol=1e-6)
    assert found[0] == math.inf


def _loops():
    """(name, L(f) as a complex function, a bracket (Hz) around one crossing of |L| = 1 and one
    of the phase through −180°)."""
    out = []
    for q in Q_VALUES:
        for theta in (0.0, 0.01):
            p = _resonance(2.0, q)

            def loop(f, p=p, theta=theta):
                s = 2j * np.pi * np.asarray(f, dtype=float)
                return 0.8 * (1 + 1 / (s * 0.5)) * p(f) * np.exp(-s * theta)

            out.append((f"PI with a resonance Q={q}, dead time {theta} s", loop))
    fs = 1000.0

    def digital(f, fs=fs):
        # a Tustin resonance at 450 Hz as the controller, seen through the hold, with a slow plant
        return 30 * _tustin_resonance(450.0, 5.0, fs)(f) * _resonance(20.0, 0.7)(f) * np.exp(-1j * np.pi * f / fs)

    out.append(("Tustin resonance at 0.45 fs through the hold", digital))
    return out


LOOPS = _loops()


def _crossings(fun, f):
    """Brackets [f[i], f[i+1]] of a grid where the real ``fun`` changes sign."""
    g = fun(f)
    return [(f[i], f[i + 1]) for i in np.flatnonzero(np.sign(g[:-1]) * np.sign(g[1:]) < 0)]


@pytest.mark.parametrize("name,loop", LOOPS, ids=[c[0] for c in LOOPS])
def test_roots_agree_with_brentq(name, loop):
    """Reference: scipy.optimize.brentq in ln f with xtol 1e-13, rtol 1e-14 (what loop_margins
    called before) on the same brackets: every crossing of |L| = 1 and every crossing of the
    unwrapped phase through −180° − k·360° agree to 1e-12 relative in frequency."""
    f = log_grid(0.01, 499.0 if "Tustin" in name else 100.0, 100)
    phase = np.unwrap(np.angle(loop(f)))
    brackets = []
    for a, b in _crossings(lambda x: np.log(np.abs(loop(x))), f):
        brackets.append((lambda x: np.log(np.abs(loop(x))), a, b))
    psi = np.floor((phase + np.pi) / (2 * np.pi))
    for i in np.flatnonzero(psi[:-1] != psi[1:]):
        target = 2 * np.pi * max(psi[i], psi[i + 1]) - np.pi

        def ph(x, i=i, target=target):
            return phase[i] + np.angle(loop(x) / loop(np.array([f[i]]))[0]) - target

        brackets.append((ph, f[i], f[i + 1]))
    assert brackets, "each loop has at least one crossing"
    for fun, a, b in brackets:
        ours = root_in_bracket(fun, a, b)
        ref = math.exp(
            brentq(
                lambda u, g=fun: float(g(np.array([math.exp(u)]))[0]), math.log(a), math.log(b), xtol=1e-13, rtol=1e-14
            )
        )
        assert ours == pytest.approx(ref, rel=1e-12)
        assert a <= ours <= b


def test_root_bracket_without_a_sign_change_takes_the_nearer_end():
    """The rules kept from before: same signs at both ends give the end with the smaller |value|
    (a crossing that grid interpolation put just outside its bracket), an exact zero at an end
    gives that end, values that are not finite give the geometric mid-point."""
    assert root_in_bracket(lambda x: x - 0.5, 1.0, 2.0) == 1.0
    assert root_in_bracket(lambda x: 3.0 - x, 1.0, 2.0) == 2.0
    assert root_in_bracket(lambda x: x - 1.0, 1.0, 2.0) == 1.0
    assert root_in_bracket(lambda x: np.full(x.shape, np.nan), 1.0, 4.0) == pytest.approx(2.0)


def _near(f: np.ndarray, brackets: np.ndarray, x: float) -> int:
    """The index i of the grid interval [f[i], f[i+1]] among ``brackets`` nearest to x (Hz)."""
    assert brackets.size, "the reference grid has a crossing"
    i = int(brackets[np.argmin(np.abs(np.log(f[brackets] / x)))])
    assert f[i] / 1.01 <= x <= f[i + 1] * 1.01, "ours is at a crossing of the reference grid"
    return i


def _margins_reference(loop, m):
    """The figures of ``m`` (our Margins) recomputed by scipy alone on ``loop`` (a numpy
    function of f in Hz): on a dense grid of our own, the crossing of |L| = 1, the crossing of the
    phase through −180° − k·360° and the minimum of |1 + L| nearest to ours, each refined by
    brentq in ln f (xtol 1e-14) or bounded Brent (xatol 1e-12). Which crossing the margins pick is
    python-control's rule, tested in test_margins_reference.py; here the refinement is checked."""
    f = np.logspace(-3, 3, 6001)
    lv = loop(f)
    ph = np.unwrap(np.angle(lv))
    mag = np.log(np.abs(lv))
    i = _near(f, np.flatnonzero(np.sign(mag[:-1]) != np.sign(mag[1:])), m.crossover_hz)
    fc = math.exp(brentq(lambda u: math.log(abs(loop(math.exp(u)))), math.log(f[i]), math.log(f[i + 1]), xtol=1e-14))
    pm = math.degrees(ph[i] + np.angle(loop(fc) / lv[i])) + 180.0
    out = {"crossover_hz": fc, "phase_margin_deg": (pm + 180.0) % 360.0 - 180.0}
    psi = np.floor((ph + np.pi) / (2 * np.pi))
    if m.phase_crossover_hz is not None:
        j = _near(f, np.flatnonzero(psi[:-1] != psi[1:]), m.phase_crossover_hz)
        target = 2 * np.pi * max(psi[j], psi[j + 1]) - np.pi
        fp = math.exp(
            brentq(
                lambda u: ph[j] + np.angle(loop(math.exp(u)) / lv[j]) - target,
                math.log(f[j]),
                math.log(f[j + 1]),
                xtol=1e-14,
            )
        )
        gm = -20 * math.log10(abs(loop(fp)))
        out["phase_crossover_hz"], out["gain_margin_db"] = fp, gm
    d = np.abs(1 + lv)
    minima = np.flatnonzero((d[1:-1] <= d[:-2]) & (d[1:-1] <= d[2:])) + 1
    k = minima[np.argmin(np.abs(np.log(f[minima] / m.sensitivity_peak_hz)))]
    r = minimize_scalar(
        lambda u: abs(1 + loop(math.exp(u))),
        bounds=(math.log(f[k - 1]), math.log(f[k + 1])),
        method="bounded",
        options={"xatol": 1e-12},
    )
    out["ms"] = 1 / r.fun
    return out


def _agree(m, ref: dict) -> dict:
    """Every figure of ``ref`` equals ours to 1e-9 relative (1e-9 absolute near zero)."""
    for key, value in ref.items():
        assert getattr(m, key) == pytest.approx(value, rel=1e-9, abs=1e-9), key
    return ref


def _pi_on_resonance(q, theta):
    """L(f) of the PI controller 0.6·(1 + 1/(0.5 s)) on the plant 1/((s/ω0)² + s/(Q·ω0) + 1),
    ω0 = 2π·2 rad/s, with dead time θ (s), written with numpy."""

    def loop(f):
        s = 2j * np.pi * np.asarray(f, dtype=float)
        return (0.3 * s + 0.6) / (0.5 * s) * _resonance(2.0, q)(f) * np.exp(-s * theta)

    return loop


@pytest.mark.parametrize("q", Q_VALUES)
@pytest.mark.parametrize("theta", [0.0, 0.05])
def test_loop_margins_agree_with_scipy(q, theta):
    """Reference: :func:`_margins_reference` (scipy brentq and bounded Brent on a numpy
    evaluation of L) for a PI controller on resonant plants with Q from 0.5 to 50, with and
    without dead time: every refined figure agrees to 1e-9 relative (frequencies, margins, Ms)."""
    w0 = 2 * math.pi * 2.0
    controller = Controller.analog([0.3, 0.6], [0.5, 0.0])
    plant = Controller.analog([1.0], [1 / w0**2, 1 / (q * w0), 1.0])
    m = loop_margins(controller, plant, theta, hold="none")
    assert m.crossover_hz and not m.sensitivity_peak_note
    if theta:
        assert m.phase_crossover_hz  # the dead time turns the phase through −180°
    _agree(m, _margins_reference(_pi_on_resonance(q, theta), m))


def test_loop_margins_of_a_digital_controller_near_nyquist_agree_with_scipy():
    """Reference: :func:`_margins_reference` on L written with numpy: a Tustin resonance at
    450 Hz (fs = 1 kHz, Q = 5) as the controller, seen through the zero-order hold
    (sinc(f·T)·e^{−jπfT}, common practice) and 0.2 ms of computation delay, on a plant with a
    corner at 20 Hz. Every refined figure agrees to 1e-9 relative."""
    fs, q, f0 = 1000.0, 5.0, 450.0
    w0 = 2 * fs * math.tan(math.pi * f0 / fs)
    k = 2 * fs / w0
    a = [k * k + k / q + 1, -2 * k * k + 2, k * k - k / q + 1]
    b = [30.0, 60.0, 30.0]
    controller = Controller.from_b_a(np.array(b) / a[0], np.array(a) / a[0], 1 / fs)
    plant = Controller.analog([1.0], [1 / (2 * math.pi * 20.0), 1.0])
    # the describing response of the hold (the sampled loop's own margins are checked against
    # python-control in test_margins_reference.py): here the refinement is what is tested
    m = loop_margins(controller, plant, 0.0, delay_s=2e-4, hold="zoh-describing")
    assert m.crossover_hz and m.phase_crossover_hz and not m.sensitivity_peak_note

    def loop(f):
        f = np.asarray(f, dtype=float)
        s = 2j * np.pi * f
        hold = np.sinc(f / fs) * np.exp(-1j * np.pi * f / fs)
        return 30 * _tustin_resonance(f0, q, fs)(f) * hold * np.exp(-s * 2e-4) / (s / (2 * np.pi * 20.0) + 1)

    assert set(_agree(m, _margins_reference(loop, m))) >= {"phase_crossover_hz", "gain_margin_db"}


def test_refinement_path_needs_no_scipy_optimize():
    """Comparing two controllers (gain and phase maxima refined) and the loop margins load
    neither scipy.optimize nor scipy.signal: their import is a sizeable part of a report's floor
    (issue 15). Checked in a fresh interpreter."""
    code = textwrap.dedent(
        """
        import sys
        import numpy as np
        from convert.controller import Controller
        from convert.compare.frequency import compare_controllers, log_grid
        from convert.compare.loop import loop_margins
        from convert.digital.realization import discretize
        ana = Controller.analog([1.0, 2.0], [0.01, 1.0, 0.0])
        dig = discretize(ana, 200.0, "tustin").controller
        err = compare_controllers(ana, dig, log_grid(0.1, 90.0), delay_s=0.001)
        assert err.max_gain_error_db > 0
        m = loop_margins(dig, Controller.analog([5.0], [0.2, 1.0]), 0.01, delay_s=0.001)
        assert m.crossover_hz is not None
        print(sorted(n for n in sys.modules if n in ("scipy.optimize", "scipy.signal")))
        """
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "[]"


@pytest.mark.parametrize("points", [3, 8, 64])
def test_the_number_of_samples_per_round_does_not_move_the_result(points):
    """The samples per round are a setting of ours, not the user's: with 3, 8 or 64 samples
    a round the maxima of every case agree with scipy's bounded search to 1e-9 relative and
    their frequencies with each other to the tolerance asked (unimodal brackets)."""
    checked = 0
    for name, value_at, band in CASES:
        f = log_grid(*band, 50)
        v = value_at(f)
        i = int(np.argmax(v))
        lo, hi = f[max(i - 1, 0)], f[min(i + 1, f.size - 1)]
        dense = value_at(np.geomspace(lo, hi, 4001))
        if np.count_nonzero((dense[1:-1] > dense[:-2]) & (dense[1:-1] >= dense[2:])) > 1:
            continue  # two peaks inside one bracket: which one a local search finds is not the point here
        checked += 1
        found, at = maximize_in_brackets(value_at, [lo], [hi], rel_tol=1e-7, points=points)
        ref = minimize_scalar(
            lambda u, g=value_at: -float(g(np.array([math.exp(u)]))[0]),
            bounds=(math.log(lo), math.log(hi)),
            method="bounded",
            options={"xatol": 1e-12},
        )
        assert found[0] == pytest.approx(max(-ref.fun, v[i]), rel=1e-9), name
        base, _ = maximize_in_brackets(value_at, [lo], [hi], rel_tol=1e-7)
        assert found[0] == pytest.approx(base[0], rel=1e-9), name
    assert checked >= len(CASES) - 3
