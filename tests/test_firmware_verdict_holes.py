"""Firmware analyses that said "ok" or PASS for code that does not do what the design does (the
second reviewer's findings, case files in tests/cases/review2). Each check recomputes the claim
outside the tool: integer arithmetic written here from the stored words, numpy.roots, IEEE 754
spacing."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from convert.case import load_case
from convert.compare.evaluate import evaluate_case
from convert.controller import from_expression
from convert.digital import discretize
from convert.digital.quantized import DEAD_BAND_LIMIT, analyze
from convert.compare.frequency import log_grid

CASES = Path(__file__).parent / "cases" / "review2"


def _judged(res, key):
    return {j.realization: j for j in res.verdict.judgements if j.criterion == key}


def _q15_sections(expr, fs, rng, level):
    real = discretize(from_expression(expr), fs, "tustin")
    band = log_grid(1e-3, 0.45 * fs, 20)
    return analyze(real.roots, "sections", "q15", band, input_range=rng, output_level=level)


def test_lag_pole_dead_band_fails_and_holds_in_plain_integer_arithmetic():
    """10(2s + 1)/(20s + 1) by Tustin at 3 kHz in Q15 sections: the stored denominator words
    sum to d = 1 (the pole 1 − 1/60000 rounds next to z = 1), so any constant output word y with
    |d·y| ≤ 2^(shift−1) is kept with zero input. Recomputed here: a plain integer recursion
    y ← (−Σ a_k·y + 2^(shift−1)) >> shift from y = 0.4 of full scale stays there for 10,000
    samples (the design decays to e^(−0.5) of it). The analysis fails on the dead band and on the
    response (DC gain lost), never "ok"."""
    x = _q15_sections("10*(2s+1)/(20s+1)", 3000.0, 1.0, 10.0)
    lag = x.summary()["sections_int"][-1]
    a, shift = [int(v) for v in lag["a"]], int(lag["shift"])
    assert abs(sum(a)) <= 2  # 2^shift + a1: the stored 1 − p
    y = int(0.4 * 2**15)
    for _ in range(10_000):
        y = (-sum(ak * y for ak in a[1:]) + (1 << (shift - 1))) >> shift
    assert y == int(0.4 * 2**15)
    assert not x.ok and x.dead_band > DEAD_BAND_LIMIT
    assert any(f.startswith("dead band:") for f in x.failures)
    assert any(f.startswith("response:") for f in x.failures)


def test_lead_lag_whose_rounded_zero_lands_on_one_fails_on_its_response():
    """5(0.02s + 1)(0.5s + 1)/((0.002s + 1)(5s + 1)) at 5 kHz in Q15 sections: the rounded
    numerator words of the slow section sum to 0, a zero exactly at z = 1 (numpy.roots), so the
    stored controller has no DC gain where the design has 5. The analysis fails on the response."""
    x = _q15_sections("5*(0.02s+1)*(0.5s+1)/((0.002s+1)*(5s+1))", 5000.0, 2.0, 10.0)
    sums = [sum(int(v) for v in s["b"]) for s in x.summary()["sections_int"]]
    assert 0 in sums
    b = next(s["b"] for s in x.summary()["sections_int"] if sum(int(v) for v in s["b"]) == 0)
    assert np.min(np.abs(np.roots([float(v) for v in b]) - 1)) < 1e-9
    assert not x.ok and any(f.startswith("response:") for f in x.failures)


def test_lead_lag_report_fails_and_writes_no_code(tmp_path):
    """The reviewer's report case: the verdict FAILS on the word format's own check, the lost
    crossover is an unbounded phase-margin change (the source loop has one, the Q15 loop none),
    and no code is handed out for the failing realization."""
    res = evaluate_case(load_case(CASES / "ll_q15.toml"))
    assert res.verdict.overall == "fail"
    (resp,) = _judged(res, "firmware_response").values()
    assert resp.status == "fail"
    (pm,) = _judged(res, "max_phase_margin_change_deg").values()
    assert pm.status == "fail" and pm.note.startswith("unbounded")
    r = res.realizations[0]
    assert not [k for k in r.files if k.startswith("code/")]


def test_float32_stall_undecided_without_an_output_level_and_decided_with_one(tmp_path):
    """PI kc = 4, ti = 600 s at 100 Hz in float32 direct form I: the integral's increment per
    sample is kc·T/ti·e, and float32 keeps it only above half a spacing of the held output (IEEE
    754 round to nearest). At U = 100: e = spacing(100)/2 / (4·0.01/600) = 0.0572 (numpy.float32),
    above the stated resolution 0.01, so the stall check fails; with no output level the figure
    would rest on a level nobody chose, so the verdict is UNCHECKED, not PASS."""
    res = evaluate_case(load_case(CASES / "oven_f32.toml"))
    assert res.verdict.overall == "unchecked"
    (st,) = _judged(res, "firmware_stall").values()
    assert st.status == "skipped" and "output limits" in st.note
    text = (
        (CASES / "oven_f32.toml")
        .read_text()
        .replace("input_resolution = 0.01", "input_resolution = 0.01\noutput_limits = [0, 100]")
    )
    (tmp_path / "o.toml").write_text(text)
    res = evaluate_case(load_case(tmp_path / "o.toml"))
    (st,) = _judged(res, "firmware_stall").values()
    want = float(np.spacing(np.float32(100.0))) / 2 / (4 * 0.01 / 600)
    assert st.status == "fail" and st.value == pytest.approx(want, rel=0.1)
    assert res.verdict.overall == "fail"


def test_code_of_a_realization_that_fails_the_verdict_is_not_written(tmp_path):
    """The docs promise code only for a realization that passes: with a phase-error limit the
    10 Hz Tustin PI cannot meet (its hold alone lags 360·f·T/2 = 0.9 deg at 50 mHz, arithmetic),
    the verdict fails and no code/ file is kept; with a limit it meets, the code is there."""
    base = (
        '[case]\ntitle = "t"\n[source]\nexpression = "1.0*(1 + 1/(120s))"\n'
        '[target.digital]\nfs = "10 Hz"\nmethods = ["tustin"]\n'
        '[criteria]\nband = ["0.1 mHz", "50 mHz"]\nmax_phase_error_deg = {}\n'
    )
    (tmp_path / "strict.toml").write_text(base.format(0.1))
    (tmp_path / "loose.toml").write_text(base.format(5))
    strict = evaluate_case(load_case(tmp_path / "strict.toml"))
    loose = evaluate_case(load_case(tmp_path / "loose.toml"))
    assert strict.verdict.overall == "fail" and loose.verdict.overall == "pass"
    assert not [k for k in strict.realizations[0].files if k.startswith("code/")]
    assert any("code not written" in w for w in strict.realizations[0].warnings)
    assert [k for k in loose.realizations[0].files if k.startswith("code/")]


@pytest.mark.parametrize("name", ["REAL", "end_var", "Int", "a__b", "pi_"])
def test_structured_text_name_may_not_be_a_keyword(run_cli, tmp_path, name):
    """IEC 61131-3 reserves its keywords and elementary type names in any case and allows no
    double or trailing underscore in an identifier (from memory of the standard): such a block
    name is refused in one line, exit 2, nothing written."""
    out = run_cli(
        "code",
        "2*(1+1/(0.5s))",
        "--fs",
        "1kHz",
        "--format",
        "double",
        "--lang",
        "st",
        "--name",
        name,
        "--out",
        str(tmp_path / "o"),
    )
    assert out.code == 2 and "--name" in out.err and not (tmp_path / "o").exists()


def test_c_name_may_not_be_a_keyword(run_cli, tmp_path):
    """ISO C99 6.4.1 keywords cannot name the state type and functions."""
    out = run_cli(
        "code", "2*(1+1/(0.5s))", "--fs", "1kHz", "--format", "double", "--name", "int", "--out", str(tmp_path / "o")
    )
    assert out.code == 2 and "C keyword" in out.err


def test_code_of_a_z_expression_names_the_expression_not_fs(run_cli, tmp_path):
    """The reviewer's finding 15: --fs was given; the message says what is wrong (the expression
    is already in z)."""
    out = run_cli("code", "(0.2 - 0.18 z^-1)/(1 - z^-1)", "--fs", "1kHz", "--name", "x", "--out", str(tmp_path / "o"))
    assert out.code == 2 and "in z" in out.err and "give it with --fs" not in out.err


def test_fixed_point_integrator_without_output_limits_is_refused(run_cli, tmp_path):
    """`code --help` says q15 needs --output-limits for an integrating controller: the stall figure
    depends on the level the integral holds, so none is assumed."""
    out = run_cli(
        "code",
        "2*(1+1/(0.01s))",
        "--fs",
        "1kHz",
        "--format",
        "q15",
        "--input-range",
        "-10",
        "10",
        "--name",
        "fastpi",
        "--out",
        str(tmp_path / "o"),
    )
    assert out.code == 2 and "--output-limits" in out.err


def test_given_float32_coefficients_get_the_stall_check(tmp_path):
    """A float32 PI given as coefficients (kc = 4, ti = 600 s by Tustin at 100 Hz, output 0..100)
    is checked like a made target: its integral stops moving below spacing(100)/2 / (kc·T/ti)
    = 0.0572 (numpy.float32, IEEE 754 round to nearest), far above its default resolution, so the
    verdict fails on the stall instead of passing."""
    b0, b1 = 4 * (1 + 0.01 / 1200), -4 * (1 - 0.01 / 1200)
    (tmp_path / "g.toml").write_text(
        '[case]\ntitle = "g"\n[source.pid]\nkc = 4\nti = "600 s"\n'
        f'[target.given.plc]\nform = "digital"\nb = [{b0!r}, {b1!r}]\na = [1.0, -1.0]\nfs = "100 Hz"\n'
        'word_format = "float32"\noutput_limits = [0, 100]\n'
        '[criteria]\nband = ["10 uHz", "10 mHz"]\nmax_gain_error_db = 0.5\nmax_phase_error_deg = 5\n'
    )
    res = evaluate_case(load_case(tmp_path / "g.toml"))
    (st,) = _judged(res, "firmware_stall").values()
    want = float(np.spacing(np.float32(100.0))) / 2 / (4 * 0.01 / 600)
    assert st.status == "fail" and st.value == pytest.approx(want, rel=0.1)
    assert res.verdict.overall == "fail"


def test_long_dead_time_loop_simulation_matches_a_plain_step_loop():
    """A 10 Hz PI with a 40 s dead time (400 held outputs: the loop is advanced step by step
    through its sparse matrix, not by dense powers). Reference written here: the plant
    0.8/(90s + 1) discretized by scipy.signal.cont2discrete (ZOH, exact for held inputs), the
    controller's difference equation and a plain Python list as the delay line. Unity setpoint
    step, 600 s; the outputs agree at every sample to 1e-9."""
    from scipy.signal import cont2discrete

    from convert.compare.loop import simulate_loop
    from convert.controller import Controller

    t, theta = 0.1, 40.0
    c = discretize(Controller.analog([0.6 * 60, 0.6], [60, 0]), 1 / t, "tustin").controller
    plant = Controller.analog([0.8], [90, 1])
    got = simulate_loop(c, plant, theta, duration_s=600.0, sub_step_s=t)
    from convert.compare.loop import _DENSE_ORBIT_MAX, sampled_loop_matrix

    assert sampled_loop_matrix(c, plant, theta).shape[0] > _DENSE_ORBIT_MAX  # the step-by-step path
    ss = (np.array([[-1 / 90]]), np.array([[1.0]]), np.array([[0.8 / 90]]), np.array([[0.0]]))
    ad, bd, cd, _, _ = cont2discrete(ss, t, method="zoh")
    ad, bd, cd = float(np.squeeze(ad)), float(np.squeeze(bd)), float(np.squeeze(cd))
    b, a = np.asarray(c.b, float), np.asarray(c.a, float)
    m = int(round(theta / t))
    x, line, e1, u1 = 0.0, [0.0] * m, 0.0, 0.0
    ys = []
    for _ in range(len(got.t)):
        y = cd * x
        ys.append(y)
        e = 1.0 - y
        u = (b[0] * e + b[1] * e1 - a[1] * u1) / a[0]
        e1, u1 = e, u
        line.append(u)
        x = ad * x + bd * line.pop(0)
    assert np.max(np.abs(np.array(ys) - got.y)) < 1e-9


def test_digital_fixed_point_without_input_range_names_the_option(run_cli):
    """The reviewer's finding 24: the option is named as the user types it, exit 2."""
    out = run_cli("digital", "2*(1+1/(3s))", "--fs", "100Hz", "--word-format", "q15")
    assert out.code == 2 and "--input-range" in out.err and "input_range = [" not in out.err


def test_output_scale_with_mixed_units_is_refused(run_cli, tmp_path):
    """The reviewer's finding 13: a signal range from 0 mA to 10 V is not a range; exit 2 naming
    the option."""
    out = run_cli(
        "code",
        "--pid",
        "kc=2",
        "ti=30s",
        "--fs",
        "10Hz",
        "--format",
        "float",
        "--output-limits",
        "0",
        "4095",
        "--input-scale",
        "1V",
        "5V",
        "0",
        "4095",
        "--output-scale",
        "0mA",
        "10V",
        "0",
        "4095",
        "--name",
        "lvl2",
        "--out",
        str(tmp_path / "o"),
    )
    assert out.code == 2 and "--output-scale" in out.err and "mix units" in out.err


def test_velocity_form_with_back_calculation_is_refused(run_cli, tmp_path):
    """The reviewer's finding 14: the velocity form has no tracking term (its accumulated output
    is clamped), so a header stating a tracking constant would be false: refused, exit 2."""
    out = run_cli(
        "code",
        "--pid",
        "kc=2",
        "ti=20s",
        "td=2s",
        "n=10",
        "--fs",
        "10Hz",
        "--pid-block",
        "--format",
        "double",
        "--output-limits",
        "-20",
        "50",
        "--anti-windup",
        "track",
        "--tracking-time",
        "4s",
        "--velocity",
        "--name",
        "ovv",
        "--out",
        str(tmp_path / "o"),
    )
    assert out.code == 2 and "--anti-windup" in out.err


def test_the_help_q31_pid_example_writes_its_code(run_cli, tmp_path):
    """The reviewer's finding 22: the help's fixed-point PID example must run as shown (it was Q15,
    where this PID's integral stalls; the docs now say so and show Q31)."""
    out = run_cli(
        "code",
        "--pid",
        "kc=2",
        "ti=30s",
        "td=5s",
        "n=10",
        "--fs",
        "10Hz",
        "--format",
        "q31",
        "--input-range",
        "-10",
        "10",
        "--output-limits",
        "-100",
        "100",
        "--name",
        "flow",
        "--out",
        str(tmp_path / "fw"),
    )
    assert out.code == 0 and (tmp_path / "fw" / "flow.c").exists()
