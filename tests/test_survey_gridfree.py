"""The method survey's error maxima (``loopshift digital``'s table and ``--json``) do not depend on
the grid density, which the user does not choose: at 50, 100 and 400 points per decade every
method's max |gain error| and max |phase error|, alone and with the hold and delay, are the same
figure, and they equal an independent computation.

Outside reference: the sampled controllers are made by ``scipy.signal.cont2discrete`` (zoh, foh,
bilinear = Tustin, euler, backward_diff) and evaluated by ``scipy.signal.freqz``; the analog
response by ``numpy.polyval``; the errors on a dense grid (20,000 points per decade) and each
largest one refined by ``scipy.optimize.minimize_scalar`` (bounded, in ln f) inside the dense
interval around it. The zero-order hold's response (1 − e^{−jωT})/(jωT) times the delay
e^{−jωd} is common practice for the loop-seen error. Matched and impulse (no scipy form for these
controllers) are checked for grid independence only.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import minimize_scalar
from scipy.signal import cont2discrete, freqz

from convert.controller import Controller
from convert.digital import survey_methods

SCIPY = {"zoh": "zoh", "foh": "foh", "tustin": "bilinear", "forward-euler": "euler", "backward-euler": "backward_diff"}

CASES = [
    # (name, num, den in descending powers of s, fs Hz, delay s)
    ("pi_lead_integrator", [0.02, 1.0, 5.0], [0.001, 1.0, 0.0], 200.0, 1e-3),
    ("third_order_pid", None, None, 1000.0, 2e-4),
    ("lightly_damped_notch", None, None, 500.0, 0.0),
]


def _case(name):
    _, num, den, fs, delay = next(c for c in CASES if c[0] == name)
    if name == "third_order_pid":  # 2*(1 + 1/(0.3 s) + 0.05 s/(0.005 s + 1))/(0.002 s + 1)
        num = np.polymul(
            [2.0], np.polyadd(np.polymul([0.3, 0.0], [0.005, 1.0]), np.polyadd([0.005, 1.0], [0.015, 0.0, 0.0]))
        )
        den = np.polymul(np.polymul([0.3, 0.0], [0.005, 1.0]), [0.002, 1.0])
    if name == "lightly_damped_notch":  # a notch at 20 Hz (damping 0.05) against a broad pair
        w0 = 2 * np.pi * 20.0
        num, den = [1.0, 2 * 0.05 * w0, w0**2], [1.0, 2 * 0.7 * w0, w0**2]
    return np.asarray(num, float), np.asarray(den, float), fs, delay


@pytest.fixture(scope="module", params=[c[0] for c in CASES])
def surveys(request):
    num, den, fs, delay = _case(request.param)
    c = Controller.analog(num, den)
    return (num, den, fs, delay), {
        pp: survey_methods(c, fs, delay_s=delay, points_per_decade=pp) for pp in (50, 100, 400)
    }


FIELDS = ("max_gain_error_db", "max_phase_error_deg")


def test_maxima_do_not_move_with_the_grid_density(surveys):
    """Each method's maxima (alone and as the loop sees it) agree at 50, 100 and 400 points per
    decade to 1e-9 relative; their frequencies to the refinement's 1e-6."""
    _, by_pp = surveys
    base = by_pp[100]
    for pp in (50, 400):
        for r0, r in zip(base.rows, by_pp[pp].rows):
            assert r.realization.method == r0.realization.method
            for e0, e in ((r0.method_error, r.method_error), (r0.loop_error, r.loop_error)):
                for name in FIELDS:
                    assert getattr(e, name) == pytest.approx(getattr(e0, name), rel=1e-9, abs=1e-12), (
                        pp,
                        r.realization.method,
                        name,
                    )
                for name in ("max_gain_error_at_hz", "max_phase_error_at_hz"):
                    assert getattr(e, name) == pytest.approx(getattr(e0, name), rel=2e-6), (
                        pp,
                        r.realization.method,
                        name,
                    )
        assert by_pp[pp].best == base.best


def _scipy_ratio(num, den, fs, delay, method, with_hold):
    """f (Hz) -> digital/analog response ratio: scipy's discretization evaluated by freqz (with the
    zero-order hold and the delay when ``with_hold``) over the analog num/den by numpy.polyval."""
    b, a, _ = cont2discrete((num, den), 1 / fs, method=SCIPY[method])
    b, a = np.ravel(b), np.ravel(a)

    def ratio(f):
        f = np.atleast_1d(np.asarray(f, float))
        dig = freqz(b, a, worN=f, fs=fs)[1]
        if with_hold:
            w = 2 * np.pi * f
            dig = dig * (1 - np.exp(-1j * w / fs)) / (1j * w / fs) * np.exp(-1j * w * delay)
        return dig / (np.polyval(num, 2j * np.pi * f) / np.polyval(den, 2j * np.pi * f))

    return ratio


def _dense(ratio, band):
    """The dense grid (20,000 points per decade, in ln f) over ``band`` and the ratio on it."""
    lo, hi = np.log(band[0]), np.log(band[1])
    u = np.linspace(lo, hi, int(20000 * (hi - lo) / np.log(10)) + 2)
    return u, ratio(np.exp(u))


def _reference_maxima(num, den, fs, delay, method, band, with_hold):
    """max |gain error| (dB) and max |phase error| (deg) over the band: scipy's discretization and
    freqz on a dense grid, each largest one refined by minimize_scalar in ln f."""
    ratio = _scipy_ratio(num, den, fs, delay, method, with_hold)
    u, r = _dense(ratio, band)
    gain = np.abs(20 * np.log10(np.abs(r)))
    phase = np.unwrap(np.angle(r))
    out = []
    for values, fun in (
        (gain, lambda x: -abs(20 * np.log10(abs(ratio(np.exp(x))[0])))),
        (np.abs(phase), None),
    ):
        i = int(np.argmax(values))
        if fun is None:  # the phase on the dense grid's branch at that point
            near = phase[i]

            def fun(x, near=near):
                ang = np.angle(ratio(np.exp(x))[0])
                return -abs(near + np.angle(np.exp(1j * (ang - near))))

        lo_i, hi_i = u[max(i - 1, 0)], u[min(i + 1, u.size - 1)]
        res = minimize_scalar(fun, bounds=(lo_i, hi_i), method="bounded", options={"xatol": 1e-12})
        best = max(values[i], -res.fun)
        out.append(best)
    return out[0], float(np.degrees(out[1]))


def test_maxima_equal_scipy_dense_and_refined(surveys):
    """The five methods scipy has: the survey's maxima (at 50 and 400 points per decade) equal
    scipy's dense-and-refined maxima to 1e-7 relative (both refine a smooth maximum; the figures
    differ only by rounding and the searches' tolerances)."""
    (num, den, fs, delay), by_pp = surveys
    for pp in (50, 400):
        s = by_pp[pp]
        for row in s.rows:
            method = row.realization.method
            if method not in SCIPY:
                continue
            for err, with_hold in ((row.method_error, False), (row.loop_error, True)):
                # the band's ends as the survey compares them (a top at fs/2 is taken at 0.999·fs/2)
                g, p = _reference_maxima(num, den, fs, delay, method, (s.f_hz[0], s.f_hz[-1]), with_hold)
                assert err.max_gain_error_db == pytest.approx(g, rel=1e-7, abs=1e-10), (pp, method, with_hold)
                assert err.max_phase_error_deg == pytest.approx(p, rel=1e-7, abs=1e-9), (pp, method, with_hold)


def _reference_agreement_limit(num, den, fs, delay, method, band, with_hold, limits=(1.0, 5.0)):
    """The first frequency where |gain error| > 1 dB or |phase error| > 5 deg: scipy's
    discretization and freqz on a dense grid (20,000 points per decade), the first dense point
    beyond a limit, and the crossing inside the dense interval before it by ``scipy.optimize.brentq``
    (the excess over the limits, ln f, xtol 1e-13). None when both errors stay within."""
    from scipy.optimize import brentq

    ratio = _scipy_ratio(num, den, fs, delay, method, with_hold)
    u, r = _dense(ratio, band)
    phase = np.unwrap(np.angle(r))
    over = (np.abs(20 * np.log10(np.abs(r))) > limits[0]) | (np.degrees(np.abs(phase)) > limits[1])
    if not over.any():
        return None
    i = int(np.argmax(over))
    if i == 0:
        return float(band[0])

    def excess(x, near=phase[i]):
        q = ratio(np.exp(x))[0]
        ph = np.degrees(abs(near + np.angle(np.exp(1j * (np.angle(q) - near)))))
        return max(abs(20 * np.log10(abs(q))) - limits[0], (ph - limits[1]) / limits[1] * limits[0])

    return float(np.exp(brentq(excess, u[i - 1], u[i], xtol=1e-13)))


def test_agreement_limit_is_free_of_the_grid_and_equals_scipy(surveys):
    """The 'agrees up to' frequency (the first where an error leaves 1 dB / 5 deg) was the first
    grid point beyond the limits, a figure that moved with the grid density. It is now the
    crossing itself: at 50, 100 and 400 points per decade the same to 1e-8 relative, and equal to
    scipy's dense-and-brentq crossing (``_reference_agreement_limit``) to 1e-7."""
    (num, den, fs, delay), by_pp = surveys
    base = by_pp[100]
    for pp in (50, 400):
        for r0, r in zip(base.rows, by_pp[pp].rows):
            for e0, e in ((r0.method_error, r.method_error), (r0.loop_error, r.loop_error)):
                if e0.agreement_limit_hz is None:
                    assert e.agreement_limit_hz is None, (pp, r.realization.method)
                else:
                    assert e.agreement_limit_hz == pytest.approx(e0.agreement_limit_hz, rel=1e-8), (
                        pp,
                        r.realization.method,
                    )
    crossings = 0
    for row in base.rows:
        method = row.realization.method
        if method not in SCIPY:
            continue
        for err, with_hold in ((row.method_error, False), (row.loop_error, True)):
            ref = _reference_agreement_limit(num, den, fs, delay, method, (base.f_hz[0], base.f_hz[-1]), with_hold)
            if ref is None:
                assert err.agreement_limit_hz is None, (method, with_hold)
            else:
                crossings += ref > base.f_hz[0]
                assert err.agreement_limit_hz == pytest.approx(ref, rel=1e-7), (method, with_hold)
    assert crossings >= 2
