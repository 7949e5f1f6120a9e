"""The library calls: refusals, warnings, the difference equation, the comparison-core helpers."""

from __future__ import annotations

import re

import numpy as np
import pytest

from convert.compare.frequency import comparison_grid, default_band_hz, delay_in_seconds, responses_on_grid
from convert.controller import Controller, from_expression
from convert.digital import discretize, survey_methods, to_analog
from convert.errors import InputError, UnrealizableError


def test_difference_equation_runs_like_lfilter():
    """Reference: scipy.signal.lfilter(b, a, x) (the direct-form recursion)."""
    from scipy.signal import lfilter

    real = discretize(from_expression("2*(1 + 1/(0.1*s) + 0.01*s/(0.001*s+1))"), 1e3, "tustin")
    terms = re.findall(r"([+-]?) ?([0-9.e+-]+)\*([eu])\[n(?:-(\d+))?\]", real.difference_equation.split("=", 1)[1])
    rng = np.random.default_rng(1)
    x = rng.standard_normal(50)
    y = np.zeros_like(x)
    for n in range(x.size):
        acc = 0.0
        for sign, coef, sym, lag in terms:
            k = int(lag or 0)
            if n - k < 0:
                continue
            v = float(coef) * (-1 if sign == "-" else 1)
            acc += v * (x[n - k] if sym == "e" else y[n - k])
        y[n] = acc
    np.testing.assert_allclose(y, lfilter(real.b, real.a, x), rtol=1e-9, atol=1e-9)


def test_improper_is_refused_with_filter_advice():
    with pytest.raises(UnrealizableError, match="derivative filter"):
        discretize(from_expression("2*(1 + 0.5*s)"), 1e3, "tustin")


def test_bad_arguments():
    c = from_expression("1/(s+1)")
    with pytest.raises(InputError, match="method"):
        discretize(c, 1e3, "bilinear-ish")
    with pytest.raises(InputError, match="fs"):
        discretize(c, 0, "zoh")
    with pytest.raises(InputError, match="prewarp"):
        discretize(c, 1e3, "tustin", prewarp_hz=600)


def test_warnings_corner_and_ignored_prewarp():
    c = from_expression("1/(s/(2*3.14159*400) + 1)")  # pole corner near 400 Hz
    real = discretize(c, 1e3, "zoh", prewarp_hz=10)
    assert any("above fs/4" in w and "400" in w for w in real.warnings)
    assert any("prewarp" in w and "ignored" in w for w in real.warnings)


@pytest.mark.parametrize(
    "expr,method,what",
    [
        ("1/(z+0.5)", "zoh", "z = -0.5"),
        ("1/(z+0.5)", "matched", "negative real axis"),
        ("(z-0.5)/(z+1)", "tustin", "z = -1"),
        ("z/(z*z)", "zoh", "z = 0"),
        ("1/z^2", "matched", "delay"),
        ("1/(z*(z-0.5))", "backward-euler", "delay"),
    ],
)
def test_inverse_refusals_name_the_pole(expr, method, what):
    d = from_expression(expr, fs_hz=1e3)
    with pytest.raises(UnrealizableError, match=re.escape(what)):
        to_analog(d, method)


def test_delay_in_seconds_and_band():
    assert delay_in_seconds(delay_samples=2, fs_hz=500) == pytest.approx(4e-3)
    assert delay_in_seconds(delay_s=1e-4) == 1e-4
    with pytest.raises(InputError):
        delay_in_seconds(delay_s=1e-3, delay_samples=1, fs_hz=1e3)
    c = from_expression("(s+2*3.14159265358979*3)/(s+2*3.14159265358979*30)")
    lo, hi = default_band_hz(c, 1e3)
    assert lo == pytest.approx(0.3) and hi == 500
    assert comparison_grid((lo, hi), 1e3)[-1] < 500


def test_loop_seen_response_has_hold_and_delay_phase():
    """Common practice: a zero-order hold lags by ωT/2 and a delay d by ωd; the hold's magnitude is
    sinc(fT)."""
    c = from_expression("1/(s+10)")
    real = discretize(c, 1e3, "zoh")
    f = np.array([1.0, 50.0, 200.0])
    g = responses_on_grid(c, real.controller, f, delay_s=5e-4)
    ratio = g.digital_seen / g.digital
    np.testing.assert_allclose(np.angle(ratio), -2 * np.pi * f * (0.5e-3 + 5e-4), rtol=1e-12)
    np.testing.assert_allclose(np.abs(ratio), np.sinc(f * 1e-3), rtol=1e-12)


def test_survey_never_picks_a_method_that_destabilizes():
    """Reference: Åström & Wittenmark (from memory): forward difference unstable for Td/N < h/2."""
    c = Controller.analog([0.1, 0.0], [0.01, 1.0])
    s = survey_methods(c, 1 / 0.03, ["forward-euler", "backward-euler"])
    assert s.best == "backward-euler"
    assert s.row("forward-euler").unstable
