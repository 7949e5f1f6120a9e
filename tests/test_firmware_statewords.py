"""Fixed point (Q15, Q31) in direct form II transposed and the delta-operator sections: the
bit-true model against compiled C, the stored realization against independent computations
(numpy eigenvalues of the word recursion, scipy.signal.lfilter in float64), the per-node scaling
against a worst-case input, and the delta form's precision at high sample rates."""

from __future__ import annotations

import numpy as np
import pytest

from convert.compare.frequency import log_grid
from convert.controller import from_expression
from convert.digital import discretize
from convert.digital.codegen import emit
from convert.digital.fixedpoint import realize
from convert.digital.quantized import analyze, choose
from convert.digital.structures import build_layout
from convert.digital.wordformats import FORMATS
from tests.test_firmware_code import PI_LEADLAG, STABLE, _run_c, _run_model, _vectors, needs_gcc

STATE_FORMS = ("direct2t", "delta")
LOWPASS_1HZ = "1/((s/6.283185307179586)^2+0.7*s/6.283185307179586+1)"  # our own 1 Hz low-pass


def _real(expr, fs):
    return discretize(from_expression(expr), fs, "tustin")


def _realize(expr, fs, structure, fmt, r=1.0, u=50.0):
    real = _real(expr, fs)
    return realize(build_layout(structure, real.roots, real.b, real.a), FORMATS[fmt], input_range=r, output_level=u)


@needs_gcc
@pytest.mark.parametrize("expr", [PI_LEADLAG, STABLE])
@pytest.mark.parametrize("structure", STATE_FORMS)
@pytest.mark.parametrize("fmt", ["q15", "q31"])
def test_c_matches_model_bit_exact(tmp_path, expr, structure, fmt):
    """gcc -std=c99 -Wall -Wextra -Werror -pedantic; steps, a ramp, noise, a long saturating
    push, a reset and (integrating controller) a manual-to-auto switch: the compiled code and the
    Python model give the same words, and the saturation vectors reach the word's end."""
    real = _realize(expr, 1000, structure, fmt)
    full = 1 << (real.word.bits - 1)
    seq = _vectors(True, full - 1, np.random.default_rng(11))
    if expr == STABLE:  # no integrator: no set_output
        seq = [v for v in seq if v[0] != "o"]
    c_out = _run_c(tmp_path, real, f"ctl_{structure}_{fmt}", seq)
    model = _run_model(real, seq)
    assert len(c_out) == len(model) > 2000
    assert c_out == model
    if expr == PI_LEADLAG:
        assert max(abs(v) for v in model) >= full - 1


def _word_matrix(real) -> np.ndarray:
    """The linear part of the word recursion with zero input, written from the stored integers
    (independent of the analysis's polynomials): state k's next value as a row."""
    rows = []
    for s in real.sections:
        m = len(s.p_int)
        one = 2.0**s.shift
        mat = np.zeros((m, m))
        for k in range(m):
            mat[k, 0] -= s.a_int[k + 1] / one * s.p_int[0] / one  # − A·y with y = P0·s0
            if k + 1 < m:
                mat[k, k + 1] += s.p_int[k + 1] / one
            if real.form == "delta":
                mat[k, k] += 1.0
        rows.append(mat)
    return rows


@pytest.mark.parametrize("structure", STATE_FORMS)
@pytest.mark.parametrize("fmt", ["q15", "q31"])
def test_stored_poles_are_the_eigenvalues_of_the_word_recursion(structure, fmt):
    """numpy.linalg.eigvals of each section's state recursion built from its stored words
    (an independent route) equals the poles the analysis reports, and numpy.roots of the stored
    polynomial agrees (direct2t)."""
    real_d = _real(LOWPASS_1HZ, 2000)
    x = analyze(real_d.roots, structure, fmt, log_grid(0.01, 900, 30), b=real_d.b, a=real_d.a, input_range=1.0)
    got = sorted(
        (complex(v) for mat in _word_matrix(x.realized) for v in np.linalg.eigvals(mat)), key=lambda v: (v.real, v.imag)
    )
    assert max(abs(v) for v in got) == pytest.approx(x.max_pole_radius, abs=1e-9)
    want = np.array(real_d.roots.poles)
    shift = max(min(abs(want - v)) for v in got)
    assert x.pole_shift == pytest.approx(shift, rel=0.05, abs=1e-12)
    if structure == "direct2t":
        r = np.roots(x.realized.sections[0].a)
        assert max(abs(r)) == pytest.approx(x.max_pole_radius, abs=1e-9)


def test_delta_holds_precision_far_above_the_corner():
    """A 1 Hz low-pass at 10 kHz (fs / corner = 1e4), run on 4 s of steps and a sine: each
    fixed-point model against scipy.signal.lfilter on the same float64 b/a (the reference
    library). The delta form keeps the response (Q31 within 1e-5 of the peak, Q15 within 10 %;
    measured 4.1e-7 and 8.4 %), the z-domain structures lose it (Q31 5.1e-4, Q15 nothing left) — the coefficient
    precision of the delta operator near z = 1 (common practice; Middleton & Goodwin, from
    memory). The analysis reports the same order: delta's response error is the smallest."""
    from scipy.signal import lfilter

    fs = 1e4
    real_d = _real(LOWPASS_1HZ, fs)
    n = 40000
    t = np.arange(n) / fs
    x = np.clip(0.5 * np.sin(2 * np.pi * 0.3 * t) + 0.3 * np.sign(np.sin(2 * np.pi * 0.05 * t)), -0.95, 0.95)
    ref = lfilter(real_d.b, real_d.a, x)
    err = {}
    for fmt in ("q15", "q31"):
        for s in ("direct1", "direct2t", "sections", "delta"):
            y = _realize(LOWPASS_1HZ, fs, s, fmt, 1.0, None).model().run(x)
            err[s, fmt] = float(np.max(np.abs(y - ref)) / np.max(np.abs(ref)))
    assert err["delta", "q31"] < 1e-5 and err["delta", "q15"] < 0.1
    for s in ("direct1", "direct2t", "sections"):
        assert err[s, "q31"] > 100 * err["delta", "q31"], (s, err)
        assert err[s, "q15"] > 0.5, (s, err)
    band = log_grid(0.01, 10, 30)  # the band of interest of a 1 Hz filter
    res = {
        s: analyze(real_d.roots, s, "q31", band, b=real_d.b, a=real_d.a, input_range=1.0)
        for s in ("direct1", "direct2t", "sections", "delta")
    }
    assert all(res["delta"].response_error * 100 < res[s].response_error for s in res if s != "delta")


@pytest.mark.parametrize("structure", STATE_FORMS)
def test_node_scaling_covers_the_worst_case_input(structure):
    """The peak-gain (L1) rule per node: the input that drives a node hardest (R times the sign
    of its impulse response, reversed) brings it within a factor 2.02 of its full scale and never
    past it. The node values come from the float64 model of the same structure (no words), so the
    check does not lean on the scaling code."""
    r = 2.0
    real_d = _real(STABLE, 500)
    lay = build_layout(structure, real_d.roots, real_d.b, real_d.a)
    q = realize(lay, FORMATS["q31"], input_range=r)
    f64 = realize(lay, FORMATS["float64"]).model()
    n = 6000
    for i, scales in enumerate(q.state_scales):
        for k, full in enumerate(scales):
            f64.reset()
            h = []
            for v in [1.0] + [0.0] * (n - 1):
                f64.step(v)
                h.append(float(f64.state[i][k]))
            worst = r * np.sign(np.array(h[::-1]))
            f64.reset()
            for v in worst:
                f64.step(v)
            peak = abs(float(f64.state[i][k]))
            assert full / 2.02 <= peak <= full, (i, k, peak, full)


def test_recommendation_includes_the_state_forms():
    """A Tustin PID at fs / integral corner = 6e4 in Q31: every structure is analysed, and the
    delta form is recommended with the smallest response error, by the numbers. (In Q15 no
    structure is usable here: the integral's increment per sample, 2e-4 of the error, is below
    half an output LSB at this output level — the stall check says so.)"""
    real_d = _real("2*(1+1/(1.0*s)+0.1*s/(0.01*s+1))", 1e4)
    pick, every, why = choose(
        real_d.roots,
        "q31",
        log_grid(0.01, 100, 30),
        b=real_d.b,
        a=real_d.a,
        input_range=1.0,
        output_level=50.0,
        input_resolution=1e-3,
    )
    assert {x.structure for x in every} == {"direct1", "direct2t", "sections", "delta"}
    assert pick is not None and pick.structure == "delta" and pick.ok, why
    sec = next(x for x in every if x.structure == "sections")
    assert pick.response_error * 100 < sec.response_error
    assert "delta has the smallest response error" in why
    q15, _, why15 = choose(
        real_d.roots, "q15", log_grid(0.01, 100, 30), input_range=1.0, output_level=50.0, input_resolution=1.0
    )
    assert q15 is None and "integrator stall" in why15


def test_direct2t_fixed_integrator_failure_is_reported():
    """A PI with a derivative filter in Q15 direct form II transposed at 1 kHz: the stored
    polynomial's integrator is not kept (its pole leaves z = 1, numpy.roots agrees) and the
    analysis fails it; the delta form keeps the integrator exactly (a lone δ = 0 pole)."""
    real_d = _real("0.8*(1 + 1/(2.5*s))*(1/(0.05*s+1))", 1000)
    f = log_grid(0.01, 100, 20)
    d = analyze(real_d.roots, "direct2t", "q15", f, b=real_d.b, a=real_d.a, input_range=50, output_level=60)
    assert not d.ok
    assert max(abs(np.roots(d.realized.sections[0].a))) == pytest.approx(d.max_pole_radius, abs=1e-9)
    g = analyze(real_d.roots, "delta", "q31", f, input_range=50, output_level=60)
    assert g.ok, g.failures
    assert g.realized.sections[-1].a == (1.0, 0.0)


@pytest.mark.parametrize("structure", STATE_FORMS)
@pytest.mark.parametrize("fmt", ["q15", "q31"])
def test_structured_text_fixed_point_runs_like_the_model(structure, fmt):
    """The emitted function block (INT/DINT words for Q15, DINT/LINT for Q31) is read by the
    subset parser (tests/st_subset.py: strict typing, explicit conversions, IEC integer division
    truncating toward zero, overflow of any intermediate is an error) and executed in Python on
    the C test's vectors: the same words as the model, reset and tracking (bumpless) included."""
    from tests.st_subset import FunctionBlock

    real = _realize(PI_LEADLAG, 1000, structure, fmt)
    (text,) = emit(real, "ctl", "st", source="test", method="tustin").values()
    fb = FunctionBlock(text)
    assert fb.name == "ctl" and fb.real is None and fb.word == ("INT" if fmt == "q15" else "DINT")
    env = fb.instance()
    model = real.model()
    full = 1 << (real.word.bits - 1)
    got, want = [], []
    for c, v in _vectors(True, full - 1, np.random.default_rng(5)):
        if c == "r":
            fb.call(env, reset=True, track=False, x=0)
            model.reset()
            model.step_int(0)
            continue
        if c == "o":
            fb.call(env, reset=False, track=True, track_value=int(v), x=0)
            model.set_level_word(int(v))
            model.step_int(0)
            continue
        got.append(fb.call(env, x=int(v), reset=False, track=False)["y"])
        want.append(model.step_int(int(v)))
    assert got == want and max(abs(v) for v in want) >= full - 1


def test_structured_text_reader_refuses_mixed_integer_types():
    """The subset reader's strict typing: an INT times a DINT without a conversion is refused,
    and so is a narrowing conversion that overflows when run."""
    from tests.st_subset import FunctionBlock, STError

    head = "FUNCTION_BLOCK f VAR_INPUT x : INT; END_VAR VAR_OUTPUT y : INT; END_VAR VAR acc : DINT; END_VAR "
    with pytest.raises(STError, match="conversion"):
        FunctionBlock(head + "acc := DINT#3 * x; y := x; END_FUNCTION_BLOCK")
    fb = FunctionBlock(head + "acc := DINT#3 * INT_TO_DINT(x); y := DINT_TO_INT(acc); END_FUNCTION_BLOCK")
    assert fb.call(fb.instance(), x=1000)["y"] == 3000
    with pytest.raises(STError, match="overflows"):
        fb.call(fb.instance(), x=20000)


def test_cli_writes_fixed_point_structured_text(run_cli, tmp_path):
    """`loopshift code --lang st --format q31`: the recommendation is taken among the structures
    the block is written for, the file passes the subset reader; a structure the block is not
    written for is a one-line error naming --structure (exit 2), and nothing is written."""
    from tests.st_subset import FunctionBlock

    args = ("code", "1.5*(1+1/(4*s))*(0.5*s+1)/(0.05*s+1)", "--fs", "500Hz", "--format", "q31", "--lang", "st")
    more = ("--input-range", "-2", "2", "--output-limits", "0", "100", "--input-resolution", "0.001")
    r = run_cli(*args, *more, "--name", "tic", "--out", str(tmp_path))
    assert r.code == 0, r.err
    assert "structure used: delta" in r.out
    fb = FunctionBlock((tmp_path / "tic.st").read_text())
    assert fb.word == "DINT"
    r = run_cli(*args, *more, "--structure", "sections", "--name", "t2", "--out", str(tmp_path / "x"))
    assert r.code == 2 and "--structure" in r.err and len(r.err.strip().splitlines()) == 1
    assert not (tmp_path / "x").exists()


def test_case_file_fixed_point_delta_with_structured_text(tmp_path):
    """A case's digital target in Q31 delta with C and Structured Text: the report folder
    carries both (the realization passes its checks), and the verdict's firmware checks are
    computed on the delta words."""
    from convert.case import parse_case
    from convert.compare.evaluate import evaluate_case
    from convert.report import build_report

    text = """
[case]
title = "Level loop, Q31 delta"

[source]
expression = "1.5*(1+1/(20*s))*(2*s+1)/(0.2*s+1)"

[target.digital]
fs = "20 Hz"
methods = ["tustin"]
word_format = "q31"
structure = "delta"
input_range = [-5, 5]
output_limits = [0, 100]
code_name = "lvl"
code_languages = ["c", "st"]

[plant]
model = "0.5/(30s + 1)"

[signals]
setpoint_step = 1.0
duration = "300 s"

[criteria]
band = ["1 mHz", "1 Hz"]
max_gain_error_db = 1
max_phase_error_deg = 10
"""
    res = evaluate_case(parse_case(text, tmp_path / "c.toml"))
    checks = {j.criterion: j.status for j in res.verdict.judgements if j.criterion.startswith("firmware_")}
    assert checks and all(v == "pass" for v in checks.values()), checks
    names = sorted(n.rsplit("/", 1)[1] for n in build_report(res) if n.startswith("code/"))
    assert names == ["lvl.c", "lvl.h", "lvl.st"]


def test_saturating_running_sum_scan_equals_the_loop():
    """The vectorized integrator (a prefix scan of clamp-and-add maps) against the plain
    sample-by-sample loop y = min(hi, max(lo, y + d)), on steps that hit both limits often."""
    from convert.digital.arithmetic import saturating_cumsum

    rng = np.random.default_rng(4)
    for n, scale in ((1, 5), (7, 50), (1000, 300), (4097, 2**31)):
        push = np.where(np.arange(n) < n // 2, scale // 2, -(scale // 2))  # up to one end, then the other
        d = rng.integers(-scale, scale, size=n, dtype=np.int64) + push
        lo, hi = -1000 if scale < 1000 else -(2**31), 999 if scale < 1000 else 2**31 - 1
        y, want = 17, []
        for v in d.tolist():
            y = min(hi, max(lo, y + v))
            want.append(y)
        got = saturating_cumsum(d, 17, lo, hi)
        assert got.tolist() == want
        assert n < 100 or (min(want) == lo and max(want) == hi)


@needs_gcc
@pytest.mark.parametrize("structure", ["direct1", "direct2t", "sections", "delta"])
@pytest.mark.parametrize("fmt", ["float64", "float32", "q15", "q31"])
def test_pure_gain_compiles_and_matches(tmp_path, structure, fmt):
    """A controller that is a pure gain keeps no state: its code still compiles with -Werror
    (the unused state pointer is marked) and gives the model's outputs."""
    real = _realize("0.75", 100, structure, fmt, 1.0, None)
    full = (1 << (real.word.bits - 1)) - 1 if real.word.is_fixed else 0
    seq = [v for v in _vectors(real.word.is_fixed, full, np.random.default_rng(3)) if v[0] != "o"][:900]
    c_out = _run_c(tmp_path, real, "gain", seq)
    model = _run_model(real, seq)
    if fmt == "float64":
        assert np.allclose(c_out, model, rtol=1e-12, atol=0)
    else:
        assert c_out == model
