"""analog -> digital against textbook constructions and facts of the trade."""

from __future__ import annotations

import math

import numpy as np
import pytest

from convert.controller import Controller, from_expression
from convert.digital import add_derivative_filter, discretize


def _matched_textbook(zeros_s, poles_s, k_s, t, *, match_w=None, keep_delay=False):
    """Matched pole-zero built by hand as published (Franklin, Powell & Workman, Digital Control
    of Dynamic Systems, matched pole-zero section — from memory): poles and finite zeros by
    z = e^{sT}; zeros at infinity to z = −1 (one left at infinity for a one-sample delay if
    asked); gain equal at DC, or at match_w (rad/s) when the controller integrates."""
    zeros_s, poles_s = np.asarray(zeros_s, complex), np.asarray(poles_s, complex)
    r = poles_s.size - zeros_s.size
    zd = list(np.exp(zeros_s * t)) + [-1.0] * (r - 1 if keep_delay and r else r)
    pd = list(np.exp(poles_s * t))

    def analog(s):
        return k_s * np.prod(s - zeros_s) / np.prod(s - poles_s)

    def unit(z):
        return np.prod(z - np.asarray(zd)) / np.prod(z - np.asarray(pd))

    if match_w is None:
        k = analog(0.0) / unit(1.0)
    else:
        ratio = analog(1j * match_w) / unit(np.exp(1j * match_w * t))
        k = abs(ratio) * np.sign(ratio.real)
    return np.sort_complex(np.array(zd, complex)), np.sort_complex(np.array(pd, complex)), float(np.real(k))


CASES = [
    # (zeros, poles, k, fs, match_hz)
    ([-2.0], [-20.0], 10.0, 1e3, None),  # lead
    ([], [-50.0, -80.0], 4000.0, 500.0, None),  # 2 zeros at infinity
    ([-10.0], [0.0], 3.0, 1e3, 0.1),  # PI (integrating)
    ([-5.0, -30.0], [0.0, -300.0, -400.0], 2e4, 2e3, 0.05),  # filtered PID, integrating
    ([], [0.0], 7.0, 100.0, 0.2),  # pure integrator
]


@pytest.mark.parametrize("zeros,poles,k,fs,match_hz", CASES)
@pytest.mark.parametrize("keep_delay", [False, True])
def test_matched_against_textbook(zeros, poles, k, fs, match_hz, keep_delay):
    """Reference: Franklin, Powell & Workman, Digital Control of Dynamic Systems, matched
    pole-zero section (from memory), built by hand in :func:`_matched_textbook`, including
    integrating controllers (where python-control returns NaN)."""
    c = Controller.from_zpk(zeros, poles, k)
    t = 1 / fs
    real = discretize(c, fs, "matched", match_at_hz=match_hz, keep_delay=keep_delay)
    zd, pd, kd = _matched_textbook(
        zeros, poles, k, t, match_w=None if match_hz is None else 2 * np.pi * match_hz, keep_delay=keep_delay
    )
    np.testing.assert_allclose(np.sort_complex(np.array(real.zeros_z, complex)), zd, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(np.sort_complex(np.array(real.poles_z, complex)), pd, rtol=1e-12, atol=1e-12)
    assert real.gain_z == pytest.approx(kd, rel=1e-10)


def test_matched_default_match_frequency_is_a_decade_below_lowest_corner():
    """Our documented rule (docs/digital.md): an integrating controller's gain is matched a decade
    below its lowest non-zero corner (at most fs/100). Checked against the textbook construction
    (Franklin, Powell & Workman, from memory) at that frequency."""
    c = Controller.from_zpk([-2 * np.pi * 1.0], [0.0], 3.0)  # PI with its zero at 1 Hz
    real = discretize(c, 1e3, "matched")
    assert real.match_at_hz == pytest.approx(0.1)
    assert any("0.1 Hz" in n for n in real.notes)
    _, _, kd = _matched_textbook([-2 * np.pi], [0.0], 3.0, 1e-3, match_w=2 * np.pi * 0.1)
    assert real.gain_z == pytest.approx(kd, rel=1e-12)


@pytest.mark.parametrize("td,n,h", [(0.5, 10, 0.01), (2.0, 5, 0.1), (0.1, 20, 0.001)])
def test_filtered_derivative_pole_closed_forms(td, n, h):
    """Reference: Åström & Wittenmark, Computer-Controlled Systems, discretization of the
    filtered derivative K·Td·s/(1 + s·Td/N) (from memory): pole at
    backward difference Td/(Td + N·h), Tustin (2Td − N·h)/(2Td + N·h), step invariant (ZOH)
    e^{−N·h/Td}, forward difference 1 − N·h/Td."""
    c = Controller.analog([td, 0.0], [td / n, 1.0])
    expect = {
        "backward-euler": td / (td + n * h),
        "tustin": (2 * td - n * h) / (2 * td + n * h),
        "zoh": math.exp(-n * h / td),
        "forward-euler": 1 - n * h / td,
    }
    for method, pole in expect.items():
        real = discretize(c, 1 / h, method)
        assert len(real.poles_z) == 1
        assert real.poles_z[0].real == pytest.approx(pole, rel=1e-12, abs=1e-14)


def test_forward_euler_derivative_unstable_below_half_sample_warns():
    """Reference: Åström & Wittenmark, Computer-Controlled Systems (from memory): the forward
    difference makes the filtered derivative unstable when Td/N < h/2; the tool must say so."""
    td, n, h = 0.1, 10, 0.03  # Td/N = 0.01 < h/2 = 0.015
    c = Controller.analog([td, 0.0], [td / n, 1.0])
    real = discretize(c, 1 / h, "forward-euler")
    assert abs(real.poles_z[0]) > 1
    assert any("unit circle" in w and "raise fs above" in w for w in real.warnings)
    assert not any("unit circle" in w for w in discretize(c, 1 / h, "backward-euler").warnings)


@pytest.mark.parametrize("fs,fp", [(1e3, 50.0), (200.0, 7.0), (1e5, 2e4)])
@pytest.mark.parametrize(
    "expr", ["(0.5*s+1)/(0.05*s+1)", "2*(1 + 1/(0.3*s) + 0.05*s/(0.0005*s+1))", "1/((s/300)^2 + 0.4*s/300 + 1)"]
)
def test_prewarp_makes_responses_equal_at_the_prewarp_frequency(expr, fs, fp):
    """Invariant of the prewarped bilinear map (common practice; python-control's test suite
    checks the same invariant): C_d(e^{j2πf_pT}) = C(j2πf_p) exactly at the prewarp frequency."""
    c = from_expression(expr)
    real = discretize(c, fs, "tustin", prewarp_hz=fp)
    assert real.frequency_response([fp])[0] == pytest.approx(c.frequency_response([fp])[0], rel=1e-9)
    assert real.controller.frequency_response([fp])[0] == pytest.approx(c.frequency_response([fp])[0], rel=1e-8)


def test_first_order_zero_corner_and_slope_survive_prewarped_tustin():
    """Common practice: a first-order zero gives +3.01 dB and +45° at its corner and rises
    20 dB/decade well above it. Checked on the digital form (Tustin prewarped at the corner,
    fs far above the corners) with a far pole at 1000× the corner (its own effect < 0.06°)."""
    fc = 1.0
    c = Controller.analog([1 / (2 * np.pi * fc), 1.0], [1 / (2 * np.pi * 1000 * fc), 1.0])
    real = discretize(c, 1e5, "tustin", prewarp_hz=fc)
    h = real.frequency_response([fc, 10 * fc, 100 * fc])
    db = 20 * np.log10(np.abs(h))
    assert db[0] == pytest.approx(3.0103, abs=1e-3)
    assert np.degrees(np.angle(h[0])) == pytest.approx(45.0, abs=0.06)
    assert db[2] - db[1] == pytest.approx(20.0, abs=0.1)


def test_derivative_filter_gives_the_textbook_pid_form():
    """Reference: the filtered ideal PID Kc·(1 + 1/(Ti·s) + Td·s/(1 + s·Td/N)) (Åström &
    Hägglund, PID Controllers: Theory, Design and Tuning — from memory)."""
    kc, ti, td, n = 2.0, 30.0, 5.0, 10.0
    c = from_expression(f"{kc}*(1 + 1/({ti}*s) + {td}*s)")
    f = add_derivative_filter(c, n)
    s = 1j * np.array([0.001, 0.05, 0.3, 2.0, 40.0])
    expect = kc * (1 + 1 / (ti * s) + td * s / (1 + s * td / n))
    np.testing.assert_allclose(f.frequency_response(np.abs(s) / (2 * np.pi)), expect, rtol=1e-12)
    assert f.is_proper
