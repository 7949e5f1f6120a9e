"""The firmware PID block: anti-windup trajectories derived by hand, the unsaturated block
against scipy.signal.lfilter, bumpless transfer, and its generated C against the model."""

from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pytest

from convert.digital.pidblock import PidBlock, emit_pid_c
from convert.pid import PidSettings
from tests.firmware_refs import compile_c

GCC = shutil.which("gcc")


def _block(**kw):
    s = PidSettings(
        kp=kw.pop("kp", 1.0),
        ki=kw.pop("ki", 1.0),
        kd=kw.pop("kd", 0.0),
        tf=kw.pop("tf", 0.0),
        b=kw.pop("b", 1.0),
        c=kw.pop("c", 1.0),
        action=kw.pop("action", "reverse"),
    )
    return PidBlock.from_settings(s, kw.pop("fs", 10.0), **kw)


def test_conditional_integration_holds_the_integral():
    """Hand derivation (conditional integration, common practice): kp = 1, ki = 1/s, T = 0.1 s,
    limits ±1. Error 5 from rest: v = 5 > 1, the error drives further into the limit, so I stays 0
    and u = 1 every sample. Then an error of −0.5: v = −0.5 + I inside the limits, integration
    resumes: I = −0.05·n."""
    m = _block(limits=(-1.0, 1.0), anti_windup="clamp").model()
    assert all(m.step(5.0, 0.0) == 1.0 for _ in range(50))
    assert m.i == 0.0
    out = [m.step(0.0, 0.5) for _ in range(5)]
    assert out == pytest.approx([-0.5 - 0.05 * n for n in range(5)], abs=1e-15)


def test_without_anti_windup_the_integral_winds_up():
    """The reference behaviour the clamp removes: I grows by ki·T·e = 0.5 per sample."""
    m = _block(limits=(-1.0, 1.0), anti_windup="none").model()
    for _ in range(50):
        m.step(5.0, 0.0)
    assert m.i == pytest.approx(25.0)


def test_back_calculation_follows_the_tracking_time_constant():
    """Hand derivation (back-calculation, Åström & Hägglund, Advanced PID Control — from
    memory): saturated at u = 1 with constant e, I[n+1] = I[n] + bi·e + (T/Tt)(1 − P − I[n]), so
    I[n] = I* + (I[0] − I*)(1 − T/Tt)^n with I* = 1 − P + Tt·ki·e."""
    tt = 2.0
    m = _block(kp=1.0, ki=1.0, limits=(-1.0, 1.0), anti_windup="track", tracking_time_s=tt).model()
    e, p, t = 5.0, 5.0, 0.1
    i_star = 1 - p + tt * 1.0 * e
    got = []
    for _ in range(40):
        got.append(m.i)
        m.step(e, 0.0)
    want = [i_star + (0.0 - i_star) * (1 - t / tt) ** n for n in range(40)]
    assert got == pytest.approx(want, rel=1e-12, abs=1e-12)


def test_default_tracking_time_rule_of_thumb():
    """Stated default (Åström & Hägglund's rule of thumb, from memory): Tt = √(Ti·Td), Ti for a PI."""
    pid = _block(kp=2.0, ki=0.5, kd=1.0, tf=0.1, limits=(-1, 1), anti_windup="track")
    assert pid.tracking_time_s == pytest.approx(np.sqrt(4.0 * 0.5))
    assert _block(kp=2.0, ki=0.5).tracking_time_s == pytest.approx(4.0)


def test_unsaturated_block_matches_lfilter_and_the_velocity_form():
    """Reference library: without limits and with b = c = 1 the positional block is the linear
    filter kp + ki·T·z^-1/(1 − z^-1) + kd/(Tf+T)·(1 − z^-1)/(1 − Tf/(Tf+T)·z^-1) on the error
    (scipy.signal.lfilter term by term); the velocity form gives the same output."""
    from scipy.signal import lfilter

    kp, ki, kd, tf, fs = 1.5, 0.8, 0.3, 0.05, 50.0
    t = 1 / fs
    blk = _block(kp=kp, ki=ki, kd=kd, tf=tf, fs=fs, anti_windup="none")
    rng = np.random.default_rng(4)
    r = np.repeat(rng.normal(size=40), 10)
    y = np.cumsum(rng.normal(size=400)) * 0.05
    e = r - y
    want = kp * e + lfilter([0, ki * t], [1, -1], e) + lfilter([kd / (tf + t), -kd / (tf + t)], [1, -tf / (tf + t)], e)
    got = blk.model().run(r, y)
    assert np.max(np.abs(got - want)) < 1e-12 * np.max(np.abs(want))
    vel = _block(kp=kp, ki=ki, kd=kd, tf=tf, fs=fs, form="velocity").model().run(r, y)
    assert np.max(np.abs(vel - want)) < 1e-12 * np.max(np.abs(want))


def test_derivative_on_measurement_has_no_setpoint_kick():
    """c = 0: a setpoint step moves only P (b·Δr·kp) and nothing through D (common practice)."""
    m = _block(kp=2.0, ki=0.0, kd=1.0, tf=0.1, b=0.5, c=0.0).model()
    m.step(0.0, 0.0)
    assert m.step(1.0, 0.0) == pytest.approx(2.0 * 0.5)


def test_direct_action_reverses_every_term():
    """action = direct: the same error gives the opposite output (the sign folded into the gains)."""
    a = _block(kp=1.0, ki=1.0, kd=0.2, tf=0.1).model().run([1, 1, 1], [0, 0.2, 0.4])
    b = _block(kp=1.0, ki=1.0, kd=0.2, tf=0.1, action="direct").model().run([1, 1, 1], [0, 0.2, 0.4])
    assert np.allclose(a, -b)


@pytest.mark.parametrize("form", ["positional", "velocity"])
def test_bumpless_transfer(form):
    """set_output(u, r, y): the next sample with the same r and y gives u (bumpless transfer)."""
    m = _block(kp=2.0, ki=0.5, kd=0.3, tf=0.05, b=0.7, c=0.0, form=form, limits=(-10, 10)).model()
    m.set_output(3.25, 1.0, 0.4)
    assert m.step(1.0, 0.4) == pytest.approx(3.25, abs=1e-15)


@pytest.mark.skipif(GCC is None, reason="gcc not installed (.ci/run installs it)")
@pytest.mark.parametrize(
    "form,aw,fmt",
    [
        ("positional", "clamp", "float64"),
        ("positional", "track", "float32"),
        ("velocity", "clamp", "float32"),
        ("positional", "none", "float64"),
    ],
)
def test_pid_c_matches_model(tmp_path, form, aw, fmt):
    """The generated PID C (gcc -std=c99 -Wall -Wextra -Werror -pedantic) equals the model bit for
    bit on a run with saturation, a manual-to-auto switch and noise."""
    blk = _block(
        kp=2.0,
        ki=0.7,
        kd=0.4,
        tf=0.05,
        b=0.8,
        c=0.0,
        fs=100.0,
        form=form,
        anti_windup=aw,
        limits=(-3.0, 4.0),
        word_format=fmt,
    )
    files = emit_pid_c(blk, "pidx", source="test")
    main = r"""
#include <stdio.h>
#include "pidx.h"
int main(void) { pidx_state st; char c; double a, b, u;
  pidx_reset(&st);
  while (scanf(" %c %la %la", &c, &a, &b) == 3) {
    if (c == 'o') { if (scanf(" %la", &u) != 1) return 1; pidx_set_output(&st, (T)u, (T)a, (T)b); continue; }
    printf("%a\n", (double)pidx_step(&st, (T)a, (T)b)); }
  return 0; }
""".replace("(T)", "(float)" if fmt == "float32" else "(double)")
    exe = compile_c(tmp_path, files, "pidx", main)
    cast = np.float32 if fmt == "float32" else float
    rng = np.random.default_rng(9)
    seq = [("x", 5.0, 0.0)] * 200 + [("x", -2.0, 1.0)] * 100
    seq += [("x", 0.5, float(v)) for v in rng.normal(size=200) * 0.3]
    seq += [("o", 1.0, 0.2, 1.5)] + [("x", 1.0, 0.2)] * 20
    lines, model, want = [], blk.model(), []
    for item in seq:
        r, y = float(cast(item[1])), float(cast(item[2]))
        if item[0] == "o":
            u = float(cast(item[3]))
            lines.append(f"o {r.hex()} {y.hex()} {u.hex()}")
            model.set_output(u, r, y)
        else:
            lines.append(f"x {r.hex()} {y.hex()}")
            want.append(model.step(r, y))
    out = subprocess.run([str(exe)], input="\n".join(lines) + "\n", capture_output=True, text=True, check=True)
    got = [float.fromhex(v) for v in out.stdout.split()]
    assert got == want
    assert max(want) == 4.0 and want[-20] == pytest.approx(1.5, abs=1e-6)  # saturated, then bumpless


# ----------------------------------------------------------------------------- fixed point (Q15, Q31)
def _vectors_ry(rng, span):
    """Steps, a ramp, noise, a long saturating push, a manual-to-auto switch (setpoint,
    measurement) in user units within ±span; ("o", r, y, u) sets the output (bumpless)."""
    seq = [("x", 0.8 * span, 0.0)] * 300 + [("x", -0.6 * span, 0.3 * span)] * 150
    seq += [("x", 0.2 * span, span * (k / 200 - 0.5)) for k in range(200)]
    seq += [("x", 0.1 * span, float(v)) for v in rng.normal(size=300).clip(-3, 3) * 0.2 * span]
    seq += [("x", span, -span)] * 200
    seq += [("o", 0.3 * span, 0.1 * span, 1.5)] + [("x", 0.3 * span, 0.1 * span)] * 30
    seq += [("x", 0.35 * span, 0.1 * span + 0.001 * k) for k in range(200)]
    return seq


FIXED_MAIN = r"""
#include <stdio.h>
#include "pidq.h"
int main(void) { pidq_state st; char c; long a, b, u;
  pidq_reset(&st);
  while (scanf(" %c %ld %ld", &c, &a, &b) == 3) {
    if (c == 'o') { if (scanf(" %ld", &u) != 1) return 1; pidq_set_output(&st, (T)u, (T)a, (T)b); continue; }
    printf("%ld\n", (long)pidq_step(&st, (T)a, (T)b)); }
  return 0; }
"""

FIXED_CASES = [
    (fmt, form, aw)
    for fmt in ("q15", "q31")
    for form, aw in (("positional", "clamp"), ("positional", "track"), ("positional", "none"), ("velocity", "clamp"))
]


@pytest.mark.skipif(GCC is None, reason="gcc not installed (.ci/run installs it)")
@pytest.mark.parametrize("fmt,form,aw", FIXED_CASES)
def test_fixed_pid_c_matches_model(tmp_path, fmt, form, aw):
    """The generated Q15/Q31 PID C (gcc -std=c99 -Wall -Wextra -Werror -pedantic) equals the
    bit-true model word for word on steps, a ramp, noise, saturation and a manual-to-auto switch."""
    blk = _block(
        kp=2.0, ki=0.7, kd=0.4, tf=0.05, b=0.8, c=0.0, fs=100.0, form=form, anti_windup=aw,
        limits=(-3.0, 4.0), word_format=fmt, input_range=5.0,
    )  # fmt: skip
    files = emit_pid_c(blk, "pidq", source="test")
    t = "int16_t" if fmt == "q15" else "int32_t"
    exe = compile_c(tmp_path, files, "pidq", FIXED_MAIN.replace("(T)", f"({t})"))
    model = blk.model()
    lines, want = [], []
    for item in _vectors_ry(np.random.default_rng(3), 5.0):
        r, y = model.words(item[1], item[2])
        if item[0] == "o":
            u = model.q.to_word(item[3], model.q.output_level)
            lines.append(f"o {r} {y} {u}")
            model.set_output_int(u, r, y)
        else:
            lines.append(f"x {r} {y}")
            want.append(model.step_int(r, y))
    out = subprocess.run([str(exe)], input="\n".join(lines) + "\n", capture_output=True, text=True, check=True)
    got = [int(v) for v in out.stdout.split()]
    assert got == want
    assert max(want) == model.q.hi and min(want) == model.q.lo  # both limits reached
    assert want[-230] == model.q.to_word(1.5, model.q.output_level)  # bumpless: the word set is the word out


@pytest.mark.parametrize("fmt", ["q15", "q31"])
def test_fixed_conditional_integration_holds_the_integral_word(fmt):
    """Hand derivation (conditional integration, common practice), in fixed point: kp = 1,
    ki = 1/s, T = 0.1 s, limits ±1, inputs within ±8 (0.5 and 5 are exact words). Error 5 drives
    the output into +1 and further: the integral word stays exactly 0. Error −0.5 then: integration
    resumes, u = −0.5 − 0.05·n within an output LSB plus the increments' rounding."""
    m = _block(limits=(-1.0, 1.0), anti_windup="clamp", word_format=fmt, input_range=8.0).model()
    assert all(m.step_int(*m.words(5.0, 0.0)) == m.q.hi for _ in range(50))
    assert m.i == 0
    out = [m.step(0.0, 0.5) for _ in range(5)]
    tol = 1.5 * m.q.output_lsb
    assert out == pytest.approx([-0.5 - 0.05 * n for n in range(5)], abs=tol)


@pytest.mark.parametrize("fmt", ["q15", "q31"])
def test_fixed_back_calculation_follows_the_tracking_time_constant(fmt):
    """Hand derivation (back-calculation, Åström & Hägglund, Advanced PID Control — from memory):
    saturated at u = 1 with constant e, I[n] = I* + (I[0] − I*)(1 − T/Tt)^n, I* = 1 − P + (Tt/T)·bi·e,
    evaluated with the constants as stored; rounding adds at most one integral LSB per sample
    (summed geometrically: LSB_I·Tt/T) and two output LSBs through u − v."""
    from convert.digital.pidcheck import stored_constants

    tt = 2.0
    blk = _block(limits=(-1.0, 1.0), anti_windup="track", tracking_time_s=tt, word_format=fmt, input_range=10.0)
    m = blk.model()
    k = stored_constants(blk)
    e, t = 5.0, 0.1
    p = k["kp"] * e
    i_star = 1 - p + k["bi"] * e / k["ao"]
    got = []
    for _ in range(60):
        got.append(m.integral())
        m.step(e, 0.0)
    want = [i_star * (1 - (1 - k["ao"]) ** n) for n in range(60)]
    lsb_i = m.q.output_level * 2.0**m.q.g_int / 2.0 ** (m.q.acc_bits - 1)
    assert k["ao"] == pytest.approx(t / tt, rel=2.0 ** -(m.q.bits // 2))
    assert np.max(np.abs(np.array(got) - want)) <= lsb_i * tt / t + 2 * m.q.output_lsb


@pytest.mark.parametrize("fmt", ["q15", "q31"])
def test_fixed_unsaturated_block_matches_lfilter_within_the_rounding_bound(fmt):
    """Reference library: within its limits and with b = c = 1 the fixed-point block is the linear
    filter kp + bi·z^-1/(1 − z^-1) + bd·(1 − z^-1)/(1 − ad·z^-1) of its stored constants
    (scipy.signal.lfilter) on the quantized error, to within its rounding: ½ output LSB for P,
    ½ for the integral's read-out, n·½ integral LSB for the increments, ½ derivative LSB/(1 − ad)."""
    from scipy.signal import lfilter

    from convert.digital.pidcheck import linear_b_a, stored_constants

    blk = _block(kp=1.5, ki=0.8, kd=0.3, tf=0.05, fs=50.0, limits=(-400.0, 400.0), word_format=fmt, input_range=4.0)
    m = blk.model()
    rng = np.random.default_rng(4)
    r = np.repeat(rng.uniform(-3, 3, size=40), 10)
    y = (np.cumsum(rng.normal(size=400)) * 0.05).clip(-3.9, 3.9)
    got = m.run(r, y)
    words = np.array([m.words(a, b) for a, b in zip(r, y)], float)
    e = (words[:, 0] - words[:, 1]) * 4.0 / 2.0 ** (m.q.bits - 1)
    k = stored_constants(blk)
    want = lfilter(*linear_b_a(k), e)
    q = m.q
    lsb_i = q.output_level * 2.0**q.g_int / 2.0 ** (q.acc_bits - 1)
    lsb_d = q.output_level * 2.0**q.g_d / 2.0 ** (q.bits - 1)
    n = np.arange(1, r.size + 1)
    bound = q.output_lsb + n * 0.5 * lsb_i + 0.5 * lsb_d / (1 - k["ad"])
    assert np.all(np.abs(got - want) <= bound)
    assert np.max(np.abs(want)) < 400  # the limits were never reached


def test_float32_integrator_stall_hand_derived():
    """Hand derivation: kp = 2, ki = 2/s at 10 kHz in float32, output held at 10: the integral
    (≈ 10, ulp 2^-20) moves only for increments bi·e above half an ulp, e ≥ 2^-21 / fl32(2e-4)."""
    from convert.digital.pidcheck import block_stall

    blk = _block(kp=2.0, ki=2.0, fs=1e4, limits=(-10.0, 10.0), word_format="float32")
    want = 2.0**-21 / float(np.float32(2e-4))
    got = block_stall(blk, 10.0, 10.0)
    assert want <= got <= 1.06 * want


def test_q15_integrator_stall_hand_derived():
    """Hand derivation: the Q15 increment rs(gi·e_w, fi) (round half up) is nonzero for a
    negative error word only when gi·|e_w| > 2^(fi−1): |e_w| ≥ floor(2^(fi−1)/gi) + 1, i.e. an
    error above (that − ½)·S/2^15 in input units (inputs round half up)."""
    from convert.digital.pidcheck import block_stall

    blk = _block(kp=2.0, ki=0.01, fs=1e3, limits=(-10.0, 10.0), word_format="q15", input_range=10.0)
    q = blk.model().q
    words = (1 << (q.fi - 1)) // q.gi + 1
    want = (words - 0.5) * 10.0 / 2**15
    got = block_stall(blk, 10.0, 10.0)
    assert want <= got <= 1.06 * (words + 0.5) * 10.0 / 2**15


def test_float32_derivative_pole_rounded_to_one_fails():
    """Independent computation: numpy.float32(Tf/(Tf + T)) == 1 for Tf/T = 1e8, so the stored
    derivative filter has its pole on the unit circle: the analysis must fail it, never pass."""
    from convert.digital.pidcheck import analyze_block

    blk = _block(kp=1.0, ki=0.1, kd=1.0, tf=1e4, fs=1e4, limits=(-1.0, 1.0), word_format="float32")
    assert np.float32(1e4 / (1e4 + 1e-4)) == 1.0
    a = analyze_block(blk, np.logspace(-3, 2, 30))
    assert not a.ok and any("unstable" in f for f in a.failures)
    assert next(c for c in a.checks() if c["key"] == "firmware_stability")["status"] == "fail"


# ----------------------------------------------------------------------------- Structured Text
ST_CASES = [
    (form, aw, fmt, lim)
    for fmt in ("float64", "float32")
    for form, aw in (("positional", "clamp"), ("positional", "track"), ("positional", "none"), ("velocity", "clamp"))
    for lim in ((-3.0, 4.0), None)
    if not (lim is None and aw != "none")
]


@pytest.mark.parametrize("form,aw,fmt,lim", ST_CASES)
def test_pid_structured_text_runs_like_the_model(form, aw, fmt, lim):
    """The emitted PID function block is read by the parser for the subset (tests/st_subset.py:
    IF/ELSIF/ELSE, comparisons, AND/OR) and its statements executed in Python with IEC 61131-3
    REAL as IEEE single and LREAL as double, on the vectors of the C test (steps, ramp, noise,
    saturation, a stretch in manual with output tracking, the switch to automatic, a reset):
    bit-exact with the model, the first automatic output equal to the manual one."""
    from tests.st_subset import FunctionBlock

    blk = _block(
        kp=2.0, ki=0.7, kd=0.4, tf=0.05, b=0.8, c=0.0, fs=100.0, form=form, anti_windup=aw, limits=lim,
        word_format=fmt, action="direct" if aw == "none" else "reverse",
    )  # fmt: skip
    from convert.digital.pidblock import emit_pid_st

    (text,) = emit_pid_st(blk, "pidst", source="test").values()
    fb = FunctionBlock(text)
    assert fb.name == "pidst" and fb.real == ("REAL" if fmt == "float32" else "LREAL")
    cast = np.float32 if fmt == "float32" else float
    env = fb.instance()
    model = blk.model()
    seq = _vectors_ry(np.random.default_rng(5), 5.0)
    seq = (
        seq[:900]
        + [("o", 0.3, 0.2, -1.25 + 0.01 * k) for k in range(20)]
        + [("x", 0.3, 0.2)]
        + seq[900:]
        + [("r", 0.0, 0.0)]
    )
    seq += [("x", 1.0, 0.5)] * 50
    got, want, after = [], [], []
    for item in seq:
        r, y = cast(item[1]), cast(item[2])
        if item[0] == "o":
            out = fb.call(env, setpoint=r, measurement=y, manual=True, manual_output=cast(item[3]), reset=False)
            assert out["u"] == cast(item[3])
            model.set_output(float(cast(item[3])), float(r), float(y))
            after.append(len(want))
            continue
        if item[0] == "r":
            fb.call(env, setpoint=0.0, measurement=0.0, manual=False, manual_output=0.0, reset=True)
            model.reset()
            model.step(0.0, 0.0)
            continue
        got.append(float(fb.call(env, setpoint=r, measurement=y, manual=False, manual_output=0.0, reset=False)["u"]))
        want.append(model.step(float(r), float(y)))
    assert got == want
    if lim:
        assert max(want) == lim[1] and min(want) == lim[0]
    assert got[after[19]] == pytest.approx(float(cast(-1.25 + 0.19)), abs=1e-6)  # bumpless after tracking
    assert got[after[-1]] == pytest.approx(1.5, abs=1e-6)


def test_pid_structured_text_refuses_fixed_point():
    from convert.digital.pidblock import emit_pid_st
    from convert.errors import InputError

    blk = _block(limits=(-1.0, 1.0), word_format="q15", input_range=1.0)
    with pytest.raises(InputError, match="Structured Text"):
        emit_pid_st(blk, "p")


@pytest.mark.parametrize(
    "bad",
    [
        "FUNCTION_BLOCK f VAR_INPUT x : REAL; END_VAR VAR_OUTPUT y : REAL; END_VAR "
        "IF x THEN y := x; END_IF; END_FUNCTION_BLOCK",  # a REAL as a condition
        "FUNCTION_BLOCK f VAR_INPUT x : REAL; m : BOOL; END_VAR VAR_OUTPUT y : REAL; END_VAR "
        "y := x + m; END_FUNCTION_BLOCK",  # a BOOL in arithmetic
        "FUNCTION_BLOCK f VAR_INPUT x : REAL; END_VAR VAR_OUTPUT y : REAL; END_VAR "
        "IF x < 1.0 THEN y := x; ELSE y := 1.0; END_FUNCTION_BLOCK",  # END_IF missing
        "FUNCTION_BLOCK f VAR_INPUT x : REAL; END_VAR VAR_OUTPUT y : REAL; END_VAR "
        "IF x << 1.0 THEN y := x; END_IF; END_FUNCTION_BLOCK",
    ],
)
def test_structured_text_reader_refuses_conditions_outside_the_subset(bad):
    """The subset reader's conditions are strict too (so the emitted PID text passing it means something)."""
    from tests.st_subset import FunctionBlock, STError

    with pytest.raises(STError):
        FunctionBlock(bad)
