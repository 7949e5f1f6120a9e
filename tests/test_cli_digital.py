"""The `loopshift digital` and `loopshift analog` commands (run in-process)."""

from __future__ import annotations

import json

import numpy as np
import pytest


def test_digital_table_marks_best_and_prints_difference_equations(run_cli):
    """Checks the rendering against the library result it shows (scipy-checked elsewhere)."""
    r = run_cli("digital", "(s+2)/(s+20)", "--fs", "1kHz", "--method", "tustin", "--method", "zoh")
    assert r.code == 0, r.err
    assert "(best)" in r.out and "best:" in r.out
    assert "tustin: b = [" in r.out and "zoh: b = [" in r.out
    assert r.out.count("u[n] =") == 2  # one difference equation per method


def test_digital_json_matches_scipy_for_tustin(run_cli):
    """Reference: scipy.signal.cont2discrete(method='bilinear')."""
    from scipy.signal import cont2discrete

    r = run_cli("digital", "(s+2)/(s+20)", "--fs", "1kHz", "--method", "all", "--json")
    assert r.code == 0, r.err
    data = json.loads(r.out)
    assert [d["method"] for d in data] == [
        "zoh",
        "foh",
        "tustin",
        "matched",
        "impulse",
        "forward-euler",
        "backward-euler",
    ]
    tus = next(d for d in data if d["method"] == "tustin")
    num, den, _ = cont2discrete(([1, 2], [1, 20]), 1e-3, method="bilinear")
    np.testing.assert_allclose(tus["b"], np.ravel(num) / den[0], rtol=1e-9)
    np.testing.assert_allclose(tus["a"], np.ravel(den) / den[0], rtol=1e-9)
    assert tus["fs_hz"] == 1000.0
    for d in data:
        assert set(d["method_error"]) >= {"max_gain_error_db", "max_phase_error_deg", "agreement_limit_hz"}
        assert "loop_error" in d
    assert sum(d["best"] for d in data) == 1


def test_digital_prewarp_in_json(run_cli):
    """Prewarp invariant (common practice): equal responses at the prewarp frequency."""
    r = run_cli("digital", "(0.5s+1)/(0.05s+1)", "--fs", "500Hz", "--method", "tustin", "--prewarp", "10Hz", "--json")
    data = json.loads(r.out)
    assert data[0]["prewarp_hz"] == 10.0
    b, a = np.array(data[0]["b"]), np.array(data[0]["a"])
    z1 = np.exp(-2j * np.pi * 10 / 500)
    cd = np.polyval(b[::-1], z1) / np.polyval(a[::-1], z1)
    s = 2j * np.pi * 10
    assert cd == pytest.approx((0.5 * s + 1) / (0.05 * s + 1), rel=1e-9)


def test_digital_filter_and_delay(run_cli):
    r = run_cli(
        "digital",
        "2*(1 + 1/(0.1*s) + 0.01*s)",
        "--fs",
        "1kHz",
        "--filter",
        "10",
        "--method",
        "tustin",
        "--delay",
        "1sample",
        "--json",
    )
    assert r.code == 0, r.err
    data = json.loads(r.out)
    assert data[0]["delay_s"] == pytest.approx(1e-3)
    assert data[0]["derivative_filter"]["tau_s"] == pytest.approx(0.001)


@pytest.mark.parametrize(
    "argv,what",
    [
        (["digital", "1+s", "--fs", "1k"], "derivative filter"),
        (["digital", "1/(s+1)", "--fs", "1k", "--method", "bogus"], "--method"),
        (["digital", "1/(s+1)", "--fs", "-3"], "--fs"),
        (["digital", "1/(s+1)", "--fs", "1k", "--delay", "3 parsecs"], "--delay"),
        (["digital", "1/(s+1)", "--fs", "1k", "--band", "10Hz", "1Hz"], "--band"),
        (["digital", "1/(s+1)", "--fs", "1k", "--band", "1Hz", "900Hz"], "fs/2"),
        (["digital", "1/(s+1)", "--fs", "1k", "--method", "zoh", "--prewarp", "5Hz"], "--prewarp"),
        (["digital", "1/(s+1", "--fs", "1k"], "expression"),
        (["analog", "1/(z+0.5)", "--fs", "1k", "--method", "zoh"], "z = -0.5"),
        (["analog", "z^-2/(1-0.5z^-1)", "--fs", "1k", "--method", "tustin"], "delay"),
        (["analog", "1/(z-0.5)", "--fs", "1k", "--method", "foh"], "--method"),
        (["analog", "1/(s+1)", "--fs", "1k", "--method", "zoh"], "z"),
        (["analog", "1/z", "--fs", "1k", "--method", "matched"], "z = 0"),
    ],
)
def test_bad_inputs_exit_2_with_one_line(run_cli, argv, what):
    r = run_cli(*argv)
    assert r.code == 2
    lines = [ln for ln in r.err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error:") and what in lines[0], r.err


def test_analog_goes_back_and_checks_itself(run_cli):
    """Reference: python-control sample_system(tustin) of the result reproduces the input."""
    import control

    r = run_cli("analog", "(0.2 - 0.18 z^-1)/(1 - z^-1)", "--fs", "100Hz", "--method", "tustin", "--json")
    assert r.code == 0, r.err
    data = json.loads(r.out)[0]
    d = control.sample_system(control.tf(data["num"], data["den"]), 0.01, method="tustin")
    np.testing.assert_allclose(np.ravel(d.num[0][0]) / d.den[0][0][0], [0.2, -0.18], rtol=1e-9)
    assert data["round_trip_max_relative_difference"] < 1e-12
    text = run_cli("analog", "(0.2 - 0.18 z^-1)/(1 - z^-1)", "--fs", "100Hz", "--method", "tustin")
    assert "C(s) =" in text.out and "integrators: 1" in text.out


def test_structure_pid_block_is_said_and_judged(run_cli):
    """--structure pid_block: the PID block's result is printed as such beside the methods (and in
    --json as an entry "pid_block" with its analysis); a source that is not a PID is refused in
    one line. The Q15 stall figure is half an input LSB (16/2^16 ≈ 2.44e-4), within the search's 6 %."""
    args = ["--pid", "kc=1.8", "ti=12s", "td=0.8s", "n=8", "--fs", "20Hz", "--method", "tustin"]
    more = [
        "--structure",
        "pid_block",
        "--word-format",
        "q15",
        "--input-range",
        "0",
        "16",
        "--output-limits",
        "0",
        "100",
    ]
    r = run_cli("digital", *args, *more)
    assert r.code == 0, r.err
    assert "structure: pid_block (the firmware PID block, positional" in r.out and "in q15" in r.out
    r = run_cli("digital", *args, *more, "--json")
    data = json.loads(r.out)
    block = data[-1]
    assert block["method"] == "pid_block" and block["firmware"]["structure"] == "pid_block"
    assert 16 / 2**16 <= block["firmware"]["stall_error"] <= 1.06 * 16 / 2**16
    r = run_cli("digital", "1/((s+1)*(s+2)*(s+3))", "--fs", "20Hz", "--structure", "pid_block")
    assert r.code == 2 and "pid_block needs a PID" in r.err and len(r.err.strip().splitlines()) == 1


@pytest.mark.parametrize("plant", ["1/(z+1)", "0.5/(z - 0.5)"])
def test_a_plant_in_z_is_refused_as_such(run_cli, plant):
    """Before: `--plant "1/(z+1)"` was told to give a sample rate, as if a plant in z could be
    right. A plant is a continuous process: the one-line error says to write it in s (exit 2)."""
    r = run_cli("digital", "2*(1+1/(30s))", "--fs", "10Hz", "--plant", plant)
    assert r.code == 2
    assert "--plant" in r.err and "write its model in s" in r.err and "sample rate" not in r.err


def test_an_unstable_method_is_marked_in_the_table(run_cli):
    """Forward Euler of 5/(0.001s + 1) at 100 Hz puts the pole at z = 1 − 1000·0.01 = −9 (hand):
    an unstable controller. The table showed its errors (2.35 dB, better looking than Tustin's)
    with the instability only counted in the warn column; it now reads UNSTABLE beside the
    method and in a line under the table, and it is never the best."""
    r = run_cli("digital", "5/(0.001s+1)", "--fs", "100Hz", "--method", "forward-euler", "--method", "tustin")
    assert r.code == 0, r.err
    text = " ".join(r.out.split())
    assert "forward-euler: UNSTABLE at this rate" in text
    assert "best: tustin" in text
