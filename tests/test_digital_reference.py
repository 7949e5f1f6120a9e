"""analog -> digital against general-purpose reference libraries (scipy.signal, python-control).

Coefficients are compared as whole vectors: |ours − reference| ≤ 1e-9 × max|reference|.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from convert.controller import Controller, from_expression
from convert.digital import discretize

W20 = 2 * math.pi * 20.0
CONTROLLERS = {
    "integrator": from_expression("5/s"),
    "pi": from_expression("2*(1 + 1/(0.5*s))"),
    "lead": from_expression("(0.5*s+1)/(0.05*s+1)"),
    "lag": from_expression("(0.2*s+1)/(2*s+1)"),
    "filtered_pid": from_expression("2*(1 + 1/(0.3*s) + 0.05*s/(0.005*s+1))"),
    "lowpass2": Controller.analog([W20**2], [1.0, 2 * 0.5 * W20, W20**2]),
}
RATES = [10.0, 1e3, 1e5]
SCIPY_NAMES = {
    "zoh": "zoh",
    "foh": "foh",
    "tustin": "bilinear",
    "impulse": "impulse",
    "forward-euler": "euler",
    "backward-euler": "backward_diff",
}
CONTROL_NAMES = {
    "zoh": "zoh",
    "foh": "foh",
    "tustin": "tustin",
    "impulse": "impulse",
    "forward-euler": "euler",
    "backward-euler": "backward_diff",
}


def _same_length(ours, ref):
    ours, ref = np.asarray(ours, float), np.asarray(ref, float)
    n = max(ours.size, ref.size)
    return (np.concatenate([np.zeros(n - ours.size), ours]), np.concatenate([np.zeros(n - ref.size), ref]))


def _assert_close(ours, ref, what):
    o, r = _same_length(ours, ref)
    scale = np.max(np.abs(r))
    assert np.max(np.abs(o - r)) <= 1e-9 * scale, f"{what}: {o} vs {r}"


def _descending(real) -> tuple[np.ndarray, np.ndarray]:
    c = real.controller
    return np.array(c.num), np.array(c.den)


@pytest.mark.parametrize("fs", RATES)
@pytest.mark.parametrize("name", list(CONTROLLERS))
@pytest.mark.parametrize("method", list(SCIPY_NAMES))
def test_against_scipy_cont2discrete(name, fs, method):
    """Reference: scipy.signal.cont2discrete (transfer-function input) for zoh, foh, bilinear,
    impulse, euler, backward_diff. scipy's impulse method accepts strictly proper systems only,
    so it is compared on those."""
    from scipy.signal import cont2discrete

    c = CONTROLLERS[name]
    if method == "impulse" and not c.is_strictly_proper:
        pytest.skip("scipy's impulse method refuses a direct term")
    num, den, _ = cont2discrete((list(c.num), list(c.den)), 1 / fs, method=SCIPY_NAMES[method])
    num, den = np.ravel(num) / den[0], np.ravel(den) / den[0]
    ours_num, ours_den = _descending(discretize(c, fs, method))
    _assert_close(ours_den, den, f"{name} {method} den")
    _assert_close(ours_num, num, f"{name} {method} num")


@pytest.mark.parametrize("fs", RATES)
@pytest.mark.parametrize("name", list(CONTROLLERS))
@pytest.mark.parametrize("method", list(CONTROL_NAMES))
def test_against_python_control_sample_system(name, fs, method):
    """Reference: python-control 0.10 ``sample_system`` (methods zoh, foh, tustin, impulse, euler,
    backward_diff)."""
    import control

    c = CONTROLLERS[name]
    if method == "impulse" and not c.is_strictly_proper:
        pytest.skip("python-control's impulse method (via scipy) refuses a direct term")
    d = control.sample_system(c.to_control(), 1 / fs, method=CONTROL_NAMES[method])
    num, den = np.ravel(d.num[0][0]), np.ravel(d.den[0][0])
    ours_num, ours_den = _descending(discretize(c, fs, method))
    _assert_close(ours_den, den / den[0], f"{name} {method} den")
    _assert_close(ours_num, num / den[0], f"{name} {method} num")


@pytest.mark.parametrize("fs", RATES)
@pytest.mark.parametrize("prewarp", [0.5, 3.0])
@pytest.mark.parametrize("name", ["lead", "lag", "filtered_pid", "pi"])
def test_tustin_prewarp_against_python_control(name, fs, prewarp):
    """Reference: python-control ``sample_system(..., 'tustin', prewarp_frequency=w)`` (w in rad/s)."""
    import control

    c = CONTROLLERS[name]
    d = control.sample_system(c.to_control(), 1 / fs, method="tustin", prewarp_frequency=2 * math.pi * prewarp)
    num, den = np.ravel(d.num[0][0]), np.ravel(d.den[0][0])
    ours_num, ours_den = _descending(discretize(c, fs, "tustin", prewarp_hz=prewarp))
    _assert_close(ours_den, den / den[0], f"{name} den")
    _assert_close(ours_num, num / den[0], f"{name} num")


@pytest.mark.parametrize("fs", RATES)
@pytest.mark.parametrize("name", ["lead", "lag"])
def test_matched_against_python_control_where_it_is_correct(name, fs):
    """Reference: python-control ``sample_system(..., 'matched')``. It maps poles and finite zeros
    by e^{sT} and matches DC gain, but maps no zeros at infinity to z = −1 and fails on an
    integrator; for a lead/lag (as many zeros as poles, no integrator) it is the textbook
    construction and must agree with ours."""
    import control

    c = CONTROLLERS[name]
    d = control.sample_system(c.to_control(), 1 / fs, method="matched")
    num, den = np.ravel(d.num[0][0]), np.ravel(d.den[0][0])
    ours_num, ours_den = _descending(discretize(c, fs, "matched"))
    _assert_close(ours_den, den / den[0], "den")
    _assert_close(ours_num, num / den[0], "num")


def test_python_control_matched_fails_on_an_integrator_where_ours_does_not():
    """Reference: python-control 0.10 ``sample_system(..., 'matched')`` on a PI gives NaN
    coefficients (it divides by 1 − e^{0·T} = 0); ours gives the textbook form (Franklin, Powell &
    Workman, Digital Control of Dynamic Systems, matched pole-zero section — from memory)."""
    import control

    c = CONTROLLERS["pi"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        d = control.sample_system(c.to_control(), 1e-3, method="matched")
    assert np.isnan(np.ravel(d.num[0][0])).any()
    real = discretize(c, 1e3, "matched")
    assert np.all(np.isfinite(real.b)) and real.controller.integrator_count() == 1
