"""Numerical range: controllers with corners spanning three decades at fs/f_corner = 1e4 and 1e5
(f_corner = the lowest corner), checked against evaluations in zeros/poles/gain form."""

from __future__ import annotations

import numpy as np
import pytest

from convert.compare.frequency import comparison_grid, default_band_hz
from convert.controller import Controller
from convert.digital import discretize
from convert.digital.realization import POLY_ACCURACY_LIMIT

W = 2 * np.pi
SPANS = {
    # corners 1 Hz .. 1 kHz (three decades); the lowest corner is 1 Hz
    "pi_lead": ([-W * 1, -W * 10], [0.0, -W * 100, -W * 1000], 1000.0),
    "four_poles": ([-W * 1, -W * 10, -W * 30], [-W * 1, -W * 100, -W * 300, -W * 1000], 1000.0),
}


def _reference(method, zeros, poles, k, fs, f):
    """The digital response built independently in zpk form: scipy.signal.bilinear_zpk for tustin;
    z = e^{sT} for matched poles and zeros (Franklin, Powell & Workman, from memory); for zoh the
    state-space from scipy.signal.cont2discrete (zpk2ss input) evaluated as C(zI − Φ)⁻¹Γ + D by a
    linear solve, never through a polynomial."""
    from scipy import signal

    t = 1 / fs
    z = np.exp(2j * np.pi * f * t)
    if method == "tustin":
        zd, pd, kd = signal.bilinear_zpk(zeros, poles, k, fs)
        return kd * np.prod(z[:, None] - zd[None, :], axis=1) / np.prod(z[:, None] - pd[None, :], axis=1)
    if method == "zoh":
        a, b, c, d = signal.zpk2ss(zeros, poles, k)
        ad, bd, cd, dd, _ = signal.cont2discrete((a, b, c, d), t, method="zoh")
        n = ad.shape[0]
        return np.array([(cd @ np.linalg.solve(x * np.eye(n) - ad, bd))[0, 0] + dd[0, 0] for x in z])
    raise AssertionError(method)


@pytest.mark.parametrize("ratio", [1e4, 1e5])
@pytest.mark.parametrize("name", list(SPANS))
@pytest.mark.parametrize("method", ["tustin", "zoh"])
def test_wide_span_against_zpk_evaluation(method, name, ratio):
    """Reference: scipy.signal (bilinear_zpk; zpk2ss + cont2discrete + solve), see _reference."""
    zeros, poles, k = SPANS[name]
    fs = ratio * 1.0
    c = Controller.from_zpk(zeros, poles, k)
    real = discretize(c, fs, method)
    f = comparison_grid(default_band_hz(c, fs), fs, 20)
    ref = _reference(method, np.array(zeros, complex), np.array(poles, complex), k, fs, f)
    np.testing.assert_allclose(real.frequency_response(f), ref, rtol=1e-6)


@pytest.mark.parametrize("ratio", [1e4, 1e5])
@pytest.mark.parametrize("name", list(SPANS))
@pytest.mark.parametrize("method", ["tustin", "zoh", "matched", "backward-euler"])
def test_polynomial_form_warns_exactly_when_it_loses_accuracy(method, name, ratio):
    """The direct-form (b/a) response is compared with the zpk-form one computed by numpy from the
    same realization; the tool must warn exactly when they part by more than its stated limit."""
    zeros, poles, k = SPANS[name]
    fs = ratio * 1.0
    c = Controller.from_zpk(zeros, poles, k)
    real = discretize(c, fs, method)
    f = comparison_grid(default_band_hz(c, fs), fs, 20)
    rel = np.max(np.abs(real.controller.frequency_response(f, via="poly") / real.frequency_response(f) - 1))
    warned = any("lose accuracy" in w for w in real.warnings)
    assert warned == (rel > POLY_ACCURACY_LIMIT)


def test_the_four_pole_span_at_1e5_is_flagged():
    """The fourth-order three-decade controller at fs = 1e5 × its lowest corner loses more than
    1e-6 in direct form (measured: about 1e-5 relative); the realization says so."""
    zeros, poles, k = SPANS["four_poles"]
    real = discretize(Controller.from_zpk(zeros, poles, k), 1e5, "matched")
    assert any("lose accuracy" in w for w in real.warnings)
